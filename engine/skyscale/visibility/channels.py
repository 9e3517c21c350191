"""One `VisibilityOperator` per channel, for wideband runs against the data.

`skyscale.deconvolve_wideband` (``operators=``) recomputes every channel's residual from
its own visibilities at each major cycle; these helpers cut multi-channel data (arrays
or a skyscale visibility file) into one operator per channel and make the inputs the
wideband run starts from: each channel's dirty image and PSF, its frequency, and its
weight (the sum of its imaging weights, so the Taylor sums weight the channels as the
data do).

References
----------
.. [1] Rau, U. & Cornwell, T. J. 2011, A&A 532, A71 (multi-frequency synthesis with
   major cycles against the visibilities of every channel).
.. [2] Schwab, F. R. 1984, AJ 89, 1076.
"""

import numpy as np

from skyscale.visibility.file import read_visibilities
from skyscale.visibility.operator import VisibilityOperator

__all__ = ["channel_operators", "channel_operators_from_file", "wideband_inputs"]


def channel_operators(uvw, freqs, vis, weights, *, flags=None, **options):
    """One `VisibilityOperator` per channel of multi-channel data.

    Parameters
    ----------
    uvw : (nrow, 3) array_like
        Baselines, metres.
    freqs : (nchan,) array_like
        Channel frequencies, Hz.
    vis, weights : (nrow, nchan) array_like
        Visibilities (Jy) and natural weights (Jy^-2), as `VisibilityOperator`.
    flags : (nrow, nchan) bool array_like, optional
    **options
        Passed to every `VisibilityOperator` (``npix``, ``cell_arcsec``, ``weighting``,
        ...); each channel is weighted on its own (uniform and Briggs weights from its
        own uv coverage).

    Returns
    -------
    list of VisibilityOperator
        In channel order.
    """
    freqs = np.atleast_1d(np.asarray(freqs, dtype=np.float64))
    vis, weights = np.asarray(vis), np.asarray(weights)
    ops = []
    for c in range(freqs.size):
        cut = slice(c, c + 1)
        ops.append(VisibilityOperator(
            uvw, freqs[cut], vis[:, cut], weights[:, cut],
            flags=None if flags is None else np.asarray(flags)[:, cut], **options))
    return ops


def channel_operators_from_file(path, **options):
    """`channel_operators` of a skyscale visibility file (`skyscale.visibility.file`)."""
    data = read_visibilities(path)
    return channel_operators(data.uvw, data.freqs, data.vis, data.weights, flags=data.flags,
                             **options)


def wideband_inputs(operators):
    """``(dirty, psf, freqs, weights)`` for `skyscale.deconvolve_wideband` from
    per-channel operators.

    ``dirty`` is ``(nchan, ny, nx)``, ``psf`` ``(nchan, 2 ny, 2 nx)`` (each with peak 1
    at the centre), ``freqs`` each operator's frequency (Hz; an operator holding several
    frequencies gives their mean) and ``weights`` each channel's sum of imaging weights,
    normalised to sum 1 (the inverse variance of its dirty image for natural weights).
    """
    ops = list(operators)
    dirty = np.stack([op.dirty_image() for op in ops])
    psf = np.stack([op.psf_image() for op in ops])
    freqs = np.array([float(np.mean(op.freqs)) for op in ops])
    weights = np.array([op.weight_sum for op in ops], dtype=np.float64)
    return dirty, psf, freqs, weights / weights.sum()
