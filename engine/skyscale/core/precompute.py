"""Precompute of the multi-scale beams (their memory is counted in `skyscale.cost`).

For each scale ``k`` the minor cycle needs the scale beam
``B_kk = PSF (*) scale_k (*) scale_k``: the response of scale ``k``'s smoothed residual
to a component of scale ``k``; its direct updates also need the pair beams
``B_jk = PSF (*) scale_j (*) scale_k`` (and ``PSF (*) scale_k`` without a delta scale).
Each is kept at every offset within the box a minor cycle works in (`BeamBank`), so
that a sub-loop subtracts it exactly however far apart its components are.

References
----------
.. [1] Cornwell, T. J. 2008, IEEE J. Sel. Topics Signal Process. 2(5), 793 (scale
   beams PSF (*) scale_k (*) scale_l).
.. [2] Offringa, A. R. & Smirnov, O. 2017, MNRAS 471, 301.
"""

import numpy as np

from skyscale.core.fft import fast_shape

__all__ = ["BeamBank", "beam_peaks", "pair_beams", "plan_memory"]


def _psf_offsets(psf, half_y, half_x):
    """The PSF at offsets ``[-half, half]`` per axis, zero beyond its edge (float64)."""
    py, px = psf.shape
    cy, cx = py // 2, px // 2
    out = np.zeros((2 * half_y + 1, 2 * half_x + 1), dtype=np.float64)
    ya, yb = max(cy - half_y, 0), min(cy + half_y + 1, py)
    xa, xb = max(cx - half_x, 0), min(cx + half_x + 1, px)
    out[ya - cy + half_y:yb - cy + half_y, xa - cx + half_x:xb - cx + half_x] = psf[ya:yb, xa:xb]
    return out


def pair_beams(psf, kernels, image_shape, backend, pairs, *, dtype=np.float32, cache=None):
    """Beams ``PSF (*) s_j (*) s_k`` for pairs of kernels, at every offset within the image.

    The minor cycle's direct updates use them: ``(j, k)`` takes a component of scale
    ``k`` to the residual smoothed by scale ``j``.

    Parameters
    ----------
    psf : (py, px) ndarray
        Normalised PSF, peak 1 at ``(py // 2, px // 2)``.
    kernels : list of (2r+1, 2r+1) ndarray
        Unit-sum kernels; a 1 x 1 kernel ``[[1]]`` among them stands for no smoothing.
    image_shape : (int, int)
    backend : FFT backend
    pairs : iterable of (int, int)
        Indices into ``kernels``.
    dtype : numpy dtype
        Precision of the transforms and of the beams; default float32.
    cache : dict, optional
        Keeps the PSF's and kernels' transforms between calls for the same
        ``image_shape`` (a `BeamBank` passes its own).

    Returns
    -------
    dict
        ``{(j, k): (2 ny - 1, 2 nx - 1) ndarray}``, zero offset at ``(ny - 1, nx - 1)``.

    Notes
    -----
    One forward transform of the PSF and one per finite kernel used, one inverse per
    pair; the PSF beyond its own edge is taken as zero, as the image-plane residual does
    ([1]_).
    """
    ny, nx = image_shape
    dtype = np.dtype(dtype)
    radii = [np.shape(k)[0] // 2 for k in kernels]
    rmax = max(radii)
    hy, hx = ny - 1 + 2 * rmax, nx - 1 + 2 * rmax
    cache = {} if cache is None else cache
    fshape = fast_shape((2 * hy + 1, 2 * hx + 1), (4 * rmax + 1, 4 * rmax + 1))
    if "psf" not in cache:
        region = _psf_offsets(np.asarray(psf, dtype=np.float64), hy, hx).astype(dtype)
        cache["psf"] = backend.rfft2(region, fshape)
        del region
    psf_f = cache["psf"]
    kern_f = cache.setdefault("kernels", {})

    def factor(i):
        kern = np.asarray(kernels[i], dtype=dtype)
        if kern.size == 1:
            return float(kern.ravel()[0])
        if i not in kern_f:
            kern_f[i] = backend.rfft2(kern, fshape).astype(psf_f.dtype, copy=False)
        return kern_f[i]

    out = {}
    spec = np.empty_like(psf_f)           # one buffer for every pair's product
    for j, k in pairs:
        np.multiply(psf_f, factor(j), out=spec)
        spec *= factor(k)
        full = backend.irfft2(spec, fshape)
        s = 2 * rmax + radii[j] + radii[k]
        out[(j, k)] = np.ascontiguousarray(full[s:s + 2 * ny - 1, s:s + 2 * nx - 1],
                                           dtype=dtype)
    return out


def plan_memory(image_shape, psf_shape, radii, itemsize=4):
    """Deprecated: the memory account is `skyscale.cost.engine_memory`.

    Returns what `skyscale.cost.engine_memory` returns (its ``total`` is the full
    predicted peak, about three times this function's old figure at 2048^2).
    """
    import warnings
    from skyscale.core.memory import engine_memory
    warnings.warn("skyscale.core.precompute.plan_memory is deprecated: the one memory account "
                  "is skyscale.cost.engine_memory (what Engine.memory holds)",
                  DeprecationWarning, stacklevel=2)
    return engine_memory(image_shape, psf_shape, radii, itemsize)


def beam_peaks(psf, kernels):
    """``B_kk(0) = sum_p PSF(p) (s_k (*) s_k)(p)`` for each kernel, by a direct sum.

    Only the PSF within twice each kernel's radius of its centre takes part, so this
    costs nothing next to the beams themselves.
    """
    from scipy.signal import fftconvolve
    psf = np.asarray(psf, dtype=np.float64)
    peaks = np.zeros(len(kernels))
    for i, kern in enumerate(kernels):
        kern = np.asarray(kern, dtype=np.float64)
        auto = fftconvolve(kern, kern, mode="full")    # s_k (*) s_k, centred
        h = auto.shape[0] // 2
        window = _psf_offsets(psf, h, h)
        peaks[i] = float(np.sum(window * auto[::-1, ::-1])) if kern.size > 1 else \
            float(psf[psf.shape[0] // 2, psf.shape[1] // 2]) * float(kern.ravel()[0]) ** 2
    return peaks


#: Beam extents are rounded up to a multiple of this many pixels, so that a box that
#: grows a little between major cycles reuses the beams already made.
EXTENT_STEP = 64

#: A box at least this fraction of the image (per axis) gets beams for the whole image
#: at once: making them for the box and again for the image when the mask grows (as it
#: mostly does) cost more than the larger beams (their grids' area is at most 1.8 times
#: the box's).
WHOLE_FRACTION = 0.75


class BeamBank:
    """The scale beams and pair beams, made for the extent the minor cycle needs.

    A minor cycle works in a box around its mask; its components and pixels are never
    farther apart than the box, so beams covering the box's offsets are exact for it.
    The bank makes them on first use for that extent (rounded up to `EXTENT_STEP`, at
    most the image's) and keeps them until a larger box asks for more, so a compact
    source in a large image pays for beams of its own size.

    Parameters
    ----------
    psf : (py, px) ndarray
    kernels : list of (2r+1, 2r+1) ndarray
        Unit-sum scale kernels.
    image_shape : (int, int)
    backend : FFT backend
    dtype : numpy dtype
        Precision of the beams (and of their transforms).
    """

    def __init__(self, psf, kernels, image_shape, backend, dtype=np.float32):
        self.psf = psf
        self.kernels = [np.asarray(k, dtype=np.float64) for k in kernels] + [np.ones((1, 1))]
        self.image_shape = tuple(int(v) for v in image_shape)
        self.backend = backend
        self.dtype = np.dtype(dtype)
        self.extent = (0, 0)          # image shape the beams cover (offsets < extent)
        self._beams = {}
        self._spectra = {}            # transforms of the PSF and kernels at this extent

    def _extent_for(self, shape):
        """The extent to make for a box of ``shape``: the current one when it covers
        the box, else at least twice the current (a box that grows over the major
        cycles remakes the beams a few times at most), rounded up to `EXTENT_STEP`, and
        the image's own from `WHOLE_FRACTION` of it on (such a box mostly grows to the
        whole image as the mask takes in more emission)."""
        out = []
        for b, n, e in zip(shape, self.image_shape, self.extent):
            if b <= e:
                out.append(e)
            elif b >= WHOLE_FRACTION * n:
                out.append(n)
            else:
                out.append(min(n, -(-max(int(b), 2 * e) // EXTENT_STEP) * EXTENT_STEP))
        return tuple(out)

    def get(self, j, k, shape):
        """``PSF (*) s_j (*) s_k`` covering every offset within a box of ``shape``
        (index ``len(kernels)``: no smoothing); ``(j, k)`` and ``(k, j)`` are the same
        beam.  Made on first use (`make`)."""
        self.make([(j, k)], shape)
        return self._beams[(min(j, k), max(j, k))]

    def make(self, keys, shape):
        """Make the beams ``keys`` for a box of ``shape`` that are not made yet, together
        (one PSF transform); a box beyond the current extent remakes them all larger."""
        need = self._extent_for(shape)
        if any(n > e for n, e in zip(need, self.extent)):
            self._beams, self._spectra = {}, {}
            self.extent = need
        keys = [(min(j, k), max(j, k)) for j, k in keys]
        todo = [key for key in dict.fromkeys(keys) if key not in self._beams]
        if todo:
            self._beams.update(pair_beams(self.psf, self.kernels, self.extent, self.backend,
                                          todo, dtype=self.dtype, cache=self._spectra))

    @property
    def nbytes(self):
        return sum(b.nbytes for b in self._beams.values())
