"""Major cycles against the visibilities: `VisibilityOperator` on ``ducc0.wgridder``.

The operator holds the visibilities and makes, with the w-gridding of the ``ducc0``
library (an optional dependency: ``pip install 'skyscale[vis]'``), the dirty image,
the PSF at twice the image size, and for a model image the residual image of the data
itself (degrid the model, subtract from the visibilities, grid again: the
Cotton-Schwab major cycle).  It is a residual operator: ``operator(model)`` plugs into
`skyscale.deconvolve` (``operator=``) and into a pipeline's own loop over
`Engine.minor_cycle`.

Conventions
-----------
- ``uvw`` in metres, shape (nrow, 3): u towards the east, v towards the north, w
  towards the phase centre.  ``freqs`` in Hz, shape (nchan,).  ``vis`` in Jy and
  ``weights`` (``1 / sigma^2``, Jy^-2) of shape (nrow, nchan); ``flags`` True marks a
  sample to leave out.
- Images are ``[y, x]`` with y (rows) towards the north (+m) and x (columns) towards
  the west (-l), RA increasing to the left as in the FITS outputs; the phase centre
  is pixel ``(ny // 2, nx // 2)``.
- Measurement equation ([1]_, ch. 3), model ``I`` in Jy/pixel, no ``1/n`` factor:
  ``V(u, v, w) = sum I(l, m) exp(-2 pi i (u l + v m + w (n - 1)))``.
- Dirty image and PSF, with ``w_k`` the imaging weights of the unflagged samples:
  ``dirty(l, m) = Re sum_k w_k V_k exp(+2 pi i (u l + v m + w (n - 1))) / sum_k w_k``
  and the PSF is the same with ``V_k = 1`` on a ``(2 ny, 2 nx)`` grid: 1 at its
  centre ``(ny, nx)`` up to the gridder's accuracy, then divided by that value so the
  peak is exactly 1, and a point source of S Jy at a pixel
  centre reads S Jy/beam there.  Residuals have the same normalisation.
- Non-finite visibilities, weights or uvw in unflagged samples are refused, with the
  fix in the message (flag them); flagged samples may hold anything.

References
----------
.. [1] Thompson, A. R., Moran, J. M. & Swenson, G. W. 2017, Interferometry and
   Synthesis in Radio Astronomy, 3rd ed., ch. 3 (measurement equation), ch. 10.
.. [2] Schwab, F. R. 1984, AJ 89, 1076 (major cycles against the visibilities).
.. [3] Briggs, D. S. 1995, PhD thesis, New Mexico Institute of Mining and Technology.
.. [4] Arras, P., Reinecke, M., Westermann, R. & Ensslin, T. A. 2021, A&A 646, A58
   (the w-gridder of ``ducc0``, its accuracy parameter epsilon).
"""

import logging

import numba
import numpy as np

from skyscale.core.threads import resolve_threads
from skyscale.core.validate import check_choice, resolve_dtype
from skyscale.visibility.weights import SPEED_OF_LIGHT, WEIGHTINGS, imaging_weights
from skyscale.visibility.file import read_visibilities

__all__ = ["VisibilityOperator", "check_visibilities", "largest_cell_arcsec",
           "DEFAULT_EPSILON", "MAX_BASELINE_M"]

logger = logging.getLogger(__name__)

ARCSEC = np.pi / (180.0 * 3600.0)

#: Default accuracy of the gridder per working dtype.  The gridder always runs in
#: double precision: in single precision its sums depend on the threads' timing and
#: differ from run to run (measured with ducc0 0.42), which would break skyscale's
#: rule that a result does not depend on the thread count.
DEFAULT_EPSILON = {np.dtype(np.float32): 1e-5, np.dtype(np.float64): 1e-8}

#: Longest plausible baseline in metres: Earth-to-space interferometry has reached
#: about 3.5e8 m (from memory); beyond this uvw are not metres.
MAX_BASELINE_M = 1.0e9


def _wgridder():
    try:
        from ducc0 import wgridder
    except ImportError as exc:
        raise ImportError("VisibilityOperator needs the gridding library ducc0: "
                          "pip install 'skyscale[vis]' (or pip install ducc0)") from exc
    return wgridder


def largest_cell_arcsec(uvw, freqs):
    """Largest cell (arcsec) whose image grid samples every baseline: ``1 / (2 max |u|, |v|)``.

    ``uvw`` in metres, ``freqs`` in Hz (Nyquist sampling of the uv plane, common
    practice).
    """
    uv_max = float(np.max(np.abs(uvw[:, :2]))) * float(np.max(freqs)) / SPEED_OF_LIGHT
    return np.inf if uv_max == 0 else 1.0 / (2.0 * uv_max) / ARCSEC


def _shape_of(npix):
    shape = tuple(int(n) for n in np.atleast_1d(npix))
    if len(shape) == 1:
        shape = shape * 2
    if len(shape) != 2 or min(shape) < 32 or any(n % 2 for n in shape):
        raise ValueError(f"npix is {npix!r}; the gridder needs an even size of at least 32 "
                         "pixels (an int or (ny, nx)): round it up to the next even number")
    return shape


def _as_rows(array, name, nrow, nchan, dtype):
    arr = np.asarray(array)
    if arr.ndim == 1 and nchan == 1 and arr.shape[0] == nrow:
        arr = arr[:, None]
    if arr.shape != (nrow, nchan):
        raise ValueError(f"{name} has shape {arr.shape}, expected (nrow, nchan) = "
                         f"({nrow}, {nchan}) from uvw and freqs; give one value per row "
                         "and channel")
    return np.ascontiguousarray(arr, dtype=dtype)


def check_visibilities(uvw, freqs, vis, weights, flags=None):
    """Check visibility arrays and return them cleaned, or raise one clear error.

    Parameters
    ----------
    uvw : (nrow, 3) array_like
        Metres.
    freqs : (nchan,) array_like
        Hz.
    vis : (nrow, nchan) array_like
        Jy, complex (1-D is accepted for one channel).
    weights : (nrow, nchan) array_like
        ``1 / sigma^2``, non-negative.
    flags : (nrow, nchan) bool array_like, optional
        True = leave out.

    Returns
    -------
    uvw : (nrow, 3) float64, freqs : (nchan,) float64,
    vis : (nrow, nchan) complex128, weights : (nrow, nchan) float64 (zero where
    flagged), flags : (nrow, nchan) bool

    Raises
    ------
    ValueError
        Mismatched shapes; non-finite values in unflagged samples; negative weights;
        no sample left with a positive weight; uvw too long to be metres.
    """
    uvw = np.asarray(uvw, dtype=np.float64)
    if uvw.ndim != 2 or uvw.shape[1] != 3 or uvw.shape[0] < 1:
        raise ValueError(f"uvw has shape {uvw.shape}, expected (nrow, 3) in metres")
    freqs = np.atleast_1d(np.asarray(freqs, dtype=np.float64))
    if freqs.ndim != 1 or not np.all(np.isfinite(freqs)) or np.any(freqs <= 0):
        raise ValueError(f"freqs is {freqs!r}; give the channel frequencies in Hz, "
                         "positive and finite, shape (nchan,)")
    nrow, nchan = uvw.shape[0], freqs.size
    vis = _as_rows(vis, "vis", nrow, nchan, np.complex128)
    weights = _as_rows(weights, "weights", nrow, nchan, np.float64)
    if flags is None:
        flags = np.zeros((nrow, nchan), dtype=bool)
    else:
        flags = _as_rows(flags, "flags", nrow, nchan, bool)
    bad_uvw = ~np.all(np.isfinite(uvw), axis=1)
    flags = flags | bad_uvw[:, None] | (weights == 0)
    for name, values in (("vis", vis), ("weights", weights)):
        bad = ~np.isfinite(values) & ~flags
        if bad.any():
            r, c = np.argwhere(bad)[0]
            raise ValueError(f"{name} has {int(bad.sum())} non-finite values in unflagged "
                             f"samples (the first at row {r}, channel {c}); flag them, for "
                             f"example flags=~np.isfinite({name}), or replace them")
    negative = (weights < 0) & ~flags
    if negative.any():
        raise ValueError(f"weights has {int(negative.sum())} negative values (smallest "
                         f"{weights[negative].min():.3g}); weights are 1/sigma^2 >= 0")
    if flags.all():
        raise ValueError(f"all {flags.size} visibilities are flagged or have zero weight; "
                         "nothing to image: check the weights and flags")
    used_rows = ~flags.all(axis=1)
    longest = float(np.max(np.abs(uvw[used_rows]))) if used_rows.any() else 0.0
    if longest > MAX_BASELINE_M:
        raise ValueError(f"uvw reach {longest:.3g}, implausibly long for metres (no "
                         f"interferometer baseline exceeds about {MAX_BASELINE_M:.0e} m); "
                         "they look like wavelengths: convert them to metres, "
                         "u_m = u_wavelengths * c / f")
    vis = np.where(flags, 0, vis)
    weights = np.where(flags, 0.0, weights)
    uvw = np.where(bad_uvw[:, None], 0.0, uvw)
    return uvw, freqs, vis, weights, flags


def _check_cell(cell_arcsec, uvw, freqs, flags):
    cell = float(getattr(cell_arcsec, "value", cell_arcsec))
    if not np.isfinite(cell) or cell <= 0:
        raise ValueError(f"cell_arcsec is {cell_arcsec!r}; give a positive cell size in arcsec")
    used = ~flags.all(axis=1)
    largest = largest_cell_arcsec(uvw[used], freqs)
    if cell < largest:
        return cell
    # Read as wavelengths rather than metres, would the cell give a usual 2 to 10 pixels
    # across the beam (1 / u_max)?
    uv_max = float(np.max(np.abs(uvw[used, :2])))
    per_beam = 1.0 / uv_max / (cell * ARCSEC) if uv_max > 0 else 0.0
    as_wavelengths = float(np.max(freqs)) > SPEED_OF_LIGHT and 2.0 <= per_beam <= 10.0
    hint = (f"; or the uvw may be in wavelengths rather than metres (read as wavelengths, "
            f"this cell gives a usual {per_beam:.1f} pixels across the beam): if so, convert "
            "them, u_m = u_wavelengths * c / f" if as_wavelengths else "")
    raise ValueError(f"cell_arcsec {cell:g} is too coarse for the longest baseline "
                     f"({uv_max * np.max(freqs) / SPEED_OF_LIGHT:.4g} wavelengths at "
                     f"{np.max(freqs):.4g} Hz): the largest cell that samples it is "
                     f"{largest:.4g} arcsec; use a smaller cell (3 to 5 pixels across the "
                     f"beam is common practice){hint}")


class VisibilityOperator:
    """Dirty image, PSF and exact residuals from visibilities, by w-gridding.

    Parameters
    ----------
    uvw : (nrow, 3) array_like
        Baselines, metres (u east, v north, w towards the phase centre).
    freqs : (nchan,) array_like
        Channel frequencies, Hz.
    vis : (nrow, nchan) array_like
        Complex visibilities, Jy.
    weights : (nrow, nchan) array_like
        Natural weights ``1 / sigma^2`` (Jy^-2), non-negative.
    npix : int or (ny, nx)
        Image size, even, at least 32.
    cell_arcsec : float or Quantity ['angle']
        Cell size, arcsec; must sample the longest baseline.
    weighting : {'natural', 'uniform', 'briggs'}
        Default 'natural'.  The PSF follows the same weights.
    robust : float
        Briggs robustness, for ``weighting='briggs'``; default 0.
    flags : (nrow, nchan) bool array_like, optional
        True leaves a sample out; default none.
    epsilon : float, optional
        Accuracy of the gridder ([4]_), 2e-13 < epsilon < 0.1; default 1e-5 for
        float32 images, 1e-8 for float64.
    threads : int, optional
        Gridder threads; default None follows Numba's thread count at each call (so a
        run under a thread limit uses that limit).
    dtype : {float32, float64}
        dtype of the images; default float32.  The gridding itself always runs in
        double precision (reproducible whatever the thread count, see Notes).
    wgridding : bool
        Apply the w-term (default True); False treats every w as zero.

    Raises
    ------
    ImportError
        When ``ducc0`` is not installed.
    ValueError
        Bad input: see `check_visibilities`; a cell too coarse for the longest
        baseline (the message gives the largest cell that samples it).

    Notes
    -----
    ``residual(model) = grid(V - degrid(model)) / sum w``, the dirty image of what
    the model does not explain; ``dirty_image() = residual(0)``.  Each call is one
    major cycle ([2]_).  See the module docstring for the sign and normalisation.

    The gridder runs in double precision: its double-precision results agree across
    thread counts to about 1e-16 relative, which rounding to float32 removes (float32
    images were bit-identical for 1 and 2 threads on the demo); in single precision
    ``ducc0`` 0.42 gave different bits from run to run even with the same threads.

    References
    ----------
    .. [1] Thompson, Moran & Swenson 2017, ch. 3.
    .. [2] Schwab 1984, AJ 89, 1076.
    .. [3] Briggs 1995, PhD thesis, New Mexico Tech.
    .. [4] Arras et al. 2021, A&A 646, A58.

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(0)
    >>> uvw = rng.normal(scale=[300, 300, 10], size=(2000, 3))
    >>> op = VisibilityOperator(uvw, [1.4e9], np.full((2000, 1), 2.0 + 0j),
    ...                         np.ones((2000, 1)), npix=64, cell_arcsec=10.0)
    >>> round(float(op.dirty_image()[32, 32]), 4), op.psf_image().shape
    (2.0, (128, 128))
    """

    def __init__(self, uvw, freqs, vis, weights, *, npix, cell_arcsec, weighting="natural",
                 robust=0.0, flags=None, epsilon=None, threads=None, dtype=None,
                 wgridding=True):
        self._gridder = _wgridder()
        check_choice(weighting, "weighting", WEIGHTINGS)
        robust = float(robust)
        if not np.isfinite(robust):
            raise ValueError(f"robust is {robust}; give a finite number (-2 about uniform, "
                             "+2 about natural)")
        self.dtype = resolve_dtype(dtype)
        self.shape = _shape_of(npix)
        uvw, freqs, vis, weights, flags = check_visibilities(uvw, freqs, vis, weights, flags)
        self.cell_arcsec = _check_cell(cell_arcsec, uvw, freqs, flags)
        self.epsilon = DEFAULT_EPSILON[self.dtype] if epsilon is None else float(epsilon)
        if not 2e-13 < self.epsilon < 0.1:
            raise ValueError(f"epsilon is {epsilon!r}; the gridder needs 2e-13 < epsilon "
                             "< 0.1 (1e-5 is plenty for float32 images)")
        if threads is not None:
            resolve_threads(threads)
        self.threads = threads
        self.weighting, self.robust, self.wgridding = weighting, robust, bool(wgridding)
        self.cell_rad = self.cell_arcsec * ARCSEC
        # The gridder's first image axis pairs with uvw[:, 0]: give it (v, -u, w) so that
        # its (first, second) axes are our (y north, x west).
        self._uvw = np.ascontiguousarray(np.stack([uvw[:, 1], -uvw[:, 0], uvw[:, 2]], axis=1))
        self.freqs = freqs
        self.vis = np.ascontiguousarray(vis, dtype=np.complex128)
        self.flags = flags
        imw = imaging_weights(uvw, freqs, weights, self.shape, self.cell_rad,
                              weighting=weighting, robust=robust)
        self.weight_sum = float(imw.sum())
        #: Imaging weights divided by their sum: the dirty image's normalisation.
        self.imaging_weights = np.ascontiguousarray(imw / self.weight_sum)
        self._mask = np.ascontiguousarray(~flags, dtype=np.uint8)
        self.largest_cell_arcsec = largest_cell_arcsec(uvw[~flags.all(axis=1)], freqs)
        self._dirty = None
        self._psf = None
        logger.debug("VisibilityOperator: %d rows x %d channels (%d used), %s, %s weighting",
                     *vis.shape, int(self._mask.sum()), self.shape, weighting)

    @classmethod
    def from_file(cls, path, **options):
        """Read a skyscale visibility file (`skyscale.visibility.file`) and build the operator."""
        data = read_visibilities(path)
        return cls(data.uvw, data.freqs, data.vis, data.weights, flags=data.flags, **options)

    # ------------------------------------------------------------------ plumbing
    @property
    def nthreads(self):
        """Gridder threads this call uses (``threads`` or Numba's current count)."""
        return resolve_threads(self.threads) if self.threads is not None \
            else numba.get_num_threads()

    def _common(self, pixsize):
        return dict(uvw=self._uvw, freq=self.freqs, pixsize_x=pixsize, pixsize_y=pixsize,
                    epsilon=self.epsilon, do_wgridding=self.wgridding,
                    nthreads=self.nthreads, mask=self._mask, flip_w=True, divide_by_n=False)

    def grid(self, vis, shape=None):
        """Dirty image of visibilities ``vis`` with this operator's weights (Jy/beam)."""
        ny, nx = self.shape if shape is None else shape
        vis = np.ascontiguousarray(vis, dtype=np.complex128)
        image = self._gridder.vis2dirty(vis=vis, wgt=self.imaging_weights, npix_x=ny,
                                        npix_y=nx, **self._common(self.cell_rad))
        return image.astype(self.dtype, copy=False)

    def degrid(self, model):
        """Model visibilities (Jy) of a model image (Jy/pixel), unweighted."""
        model = np.ascontiguousarray(model, dtype=np.float64)
        if model.shape != self.shape:
            raise ValueError(f"model has shape {model.shape}, expected the image's "
                             f"{self.shape}")
        return self._gridder.dirty2vis(dirty=model, **self._common(self.cell_rad))

    # ------------------------------------------------------------------ the API
    def dirty_image(self):
        """The dirty image, Jy/beam, ``(ny, nx)`` of the working dtype (kept)."""
        if self._dirty is None:
            self._dirty = self.grid(self.vis)
        return self._dirty.copy()

    def psf_image(self):
        """The PSF on a ``(2 ny, 2 nx)`` grid, peak exactly 1 at ``(ny, nx)`` (kept).

        Same weights as the dirty image, normalised by their sum, so the value at the
        centre is ``sum w / sum w = 1`` up to the gridder's accuracy; the gridded PSF
        is then divided by its centre value, which makes the peak exactly 1.
        """
        if self._psf is None:
            ny, nx = self.shape
            psf = self.grid(np.ones_like(self.vis), (2 * ny, 2 * nx))
            self._psf = psf / psf.dtype.type(psf[ny, nx])
        return self._psf.copy()

    def residual(self, model):
        """Residual image (Jy/beam) of a model (Jy/pixel): degrid, subtract, grid.

        Same normalisation as `dirty_image`; ``residual(zeros) == dirty_image()``.
        """
        model = np.asarray(model)
        if not np.all(np.isfinite(model)):
            raise ValueError("model has non-finite pixels; a model must be finite Jy/pixel")
        if not model.any():
            return self.dirty_image()
        return self.grid(self.vis - self.degrid(model))

    __call__ = residual

    @property
    def approximation(self):
        """None: residuals are exact up to the gridder's accuracy ``epsilon``."""
        return None

    def describe(self):
        """A JSON-ready summary for run reports: which operator ran and how."""
        import ducc0
        return {"operator": "VisibilityOperator", "gridder": f"ducc0.wgridder {ducc0.__version__}",
                "rows": int(self.vis.shape[0]), "channels": int(self.vis.shape[1]),
                "samples_used": int(self._mask.sum()), "weighting": self.weighting,
                "robust": self.robust if self.weighting == "briggs" else None,
                "epsilon": self.epsilon, "wgridding": self.wgridding,
                "image_shape": list(self.shape), "cell_arcsec": self.cell_arcsec,
                "largest_cell_arcsec": self.largest_cell_arcsec,
                "dtype": str(self.dtype), "threads": self.nthreads}
