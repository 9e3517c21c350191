"""FFT backends and linear-convolution helpers.

The default backend is ``scipy.fft`` (pocketfft): it needs no plans, keeps float32 in
float32, and computes every one-dimensional transform the same way whatever the number
of worker threads, so results are bit-identical at any thread count and depend on no
cache.  numpy.fft and pyfftw can be chosen by name.  pyfftw's plans (``FFTW_ESTIMATE``)
are kept for the process, shared by every engine, and no wisdom is read or written:
with wisdom, FFTW may pick another algorithm and round differently, and its threaded
plans also round differently from its serial ones, so a pyfftw run is reproducible only
at the same thread count.  The backend is injectable so that tests can run the paths
against each other.
"""

import logging
import threading

import numpy as np
import scipy.fft as _sfft
from scipy.fft import next_fast_len

from skyscale.core.threads import usable_cores
from skyscale.core.validate import FFT_BACKENDS, check_choice

__all__ = ["FFT_BACKENDS", "ScipyFFT", "NumpyFFT", "FFTWFFT", "get_backend", "fast_shape",
           "convolution_grid", "convolve_centred", "Convolver", "MultiConvolver"]

logger = logging.getLogger(__name__)

def _workers(threads):
    return max(int(threads or usable_cores()), 1)


class ScipyFFT:
    """Real 2-D FFTs with ``scipy.fft`` (pocketfft): the default backend.

    Deterministic whatever ``threads`` is: the worker threads share out whole
    one-dimensional transforms, each computed the same way.  float32 input gives
    complex64 transforms.
    """

    name = "scipy"

    def __init__(self, threads=None):
        self.threads = _workers(threads)

    def rfft2(self, a, s):
        return _sfft.rfft2(a, s=s, workers=self.threads)

    def irfft2(self, a, s):
        return _sfft.irfft2(a, s=s, workers=self.threads)


class NumpyFFT:
    """Real 2-D FFTs with numpy.fft (one thread)."""

    name = "numpy"

    def __init__(self, threads=None):
        self.threads = threads

    def rfft2(self, a, s):
        return np.fft.rfft2(a, s=s)

    def irfft2(self, a, s):
        return np.fft.irfft2(a, s=s)


class FFTWFFT:
    """Real 2-D FFTs with pyfftw's builders and threads; plans kept for the process.

    Parameters
    ----------
    threads : int, optional
        FFT threads; default the number of CPUs.

    Notes
    -----
    Plans use ``FFTW_ESTIMATE`` and no wisdom is imported or exported, so the plan,
    and with it the rounding, does not depend on any file a user's earlier runs left.
    FFTW's threaded plans round differently from its serial ones: use the default
    backend for results that do not depend on the thread count.
    """

    name = "pyfftw"
    _lock = threading.RLock()
    _plans = {}               # (kind, shape, dtype, s, threads) -> plan, for the process

    def __init__(self, threads=None):
        import pyfftw
        import pyfftw.builders  # noqa: F401
        self._pyfftw = pyfftw
        self.threads = _workers(threads)

    def _plan(self, kind, shape, dtype, s):
        key = (kind, shape, np.dtype(dtype).str, s, self.threads)
        plan = FFTWFFT._plans.get(key)
        if plan is None:
            with FFTWFFT._lock:
                builders = self._pyfftw.builders
                template = self._pyfftw.empty_aligned(shape, dtype=dtype)
                build = builders.rfft2 if kind == "r" else builders.irfft2
                plan = build(template, s=s, threads=self.threads,
                             planner_effort="FFTW_ESTIMATE", avoid_copy=False)
                FFTWFFT._plans[key] = plan
        return plan

    def rfft2(self, a, s):
        a = np.asarray(a)
        with FFTWFFT._lock:      # a plan owns its buffers: one caller at a time
            return self._plan("r", a.shape, a.dtype, tuple(s))(a).copy()

    def irfft2(self, a, s):
        a = np.asarray(a)
        with FFTWFFT._lock:
            return self._plan("i", a.shape, a.dtype, tuple(s))(a).copy()


def get_backend(name="auto", threads=None):
    """Return an FFT backend by name.

    Parameters
    ----------
    name : {'auto', 'scipy', 'numpy', 'pyfftw'} or backend object
        ``'auto'`` and ``'scipy'`` give `ScipyFFT`; an object with ``rfft2`` and
        ``irfft2`` methods is returned as it is.
    threads : int, optional
        Worker threads (scipy, pyfftw); default all CPUs.
    """
    if hasattr(name, "rfft2") and hasattr(name, "irfft2"):
        return name
    check_choice(name, "fft", FFT_BACKENDS)
    if name == "pyfftw":
        try:
            return FFTWFFT(threads=threads)
        except ImportError:
            raise ImportError("fft='pyfftw' but pyfftw is not installed; "
                              "pip install skyscale[fftw] or pass fft='scipy'") from None
    if name == "numpy":
        return NumpyFFT(threads=threads)
    return ScipyFFT(threads=threads)


def fast_shape(shape_a, shape_b):
    """FFT shape for the linear convolution of two 2-D arrays (no wrap-around)."""
    return tuple(next_fast_len(int(a + b - 1), real=True) for a, b in zip(shape_a, shape_b))


def convolve_centred(image, kernel, *, backend=None, out_dtype=None):
    """Linear convolution of ``image`` with a kernel centred at ``kernel.shape // 2``.

    ``out[q] = sum_p image[p] * kernel[q - p + c]`` with ``c = (ky // 2, kx // 2)``,
    cut to the image's shape.  For odd kernels this equals
    ``scipy.signal.fftconvolve(image, kernel, mode='same')``.

    Parameters
    ----------
    image : (ny, nx) ndarray
    kernel : (ky, kx) ndarray
    backend : FFT backend, optional
        Default `get_backend('auto')`.
    out_dtype : numpy dtype, optional
        Default the image's dtype.
    """
    return Convolver(kernel, image.shape, backend=backend)(image, out_dtype=out_dtype)


def _complex(precision):
    """The complex dtype of a real precision."""
    return np.complex64 if np.dtype(precision) == np.float32 else np.complex128


def convolution_grid(kernel_shape, image_shape):
    """The FFT grid on which a centred kernel convolves an image without wrap-around.

    ``out[q] = sum_p image[p] * kernel[q - p + c]`` only uses offsets ``|q - p| <= n - 1``
    per axis.  With the kernel reaching ``a`` pixels below and ``b`` above its centre
    (cut to ``n - 1``), a circular convolution of length ``L >= n + max(a, b)`` has no
    wrap-around on the image: ``L`` about ``2 n`` for a PSF twice the image's size,
    ``1.5 n`` for one of the image's size, ``n + r`` for a scale kernel of radius ``r``.
    Each length is rounded up to a fast one (`next_fast_len`).
    """
    shape = []
    for n, k in zip(image_shape, kernel_shape):
        c = k // 2
        shape.append(next_fast_len(int(n + max(min(c, n - 1), min(k - 1 - c, n - 1))),
                                   real=True))
    return tuple(shape)


def _wrapped_kernel(kernel, image_shape, fshape=None):
    """The kernel's offsets that can matter for an image, wrapped onto its grid.

    Returns the kernel on the grid of `convolution_grid` (or ``fshape``, at least that
    large, as for several kernels) with offset 0 at index 0, and the grid's shape.
    """
    kernel = np.asarray(kernel, dtype=np.float64)
    shape = convolution_grid(kernel.shape, image_shape) if fshape is None else tuple(fshape)
    wrapped = np.zeros(shape, dtype=np.float64)
    cy, cx = kernel.shape[0] // 2, kernel.shape[1] // 2
    # offsets -a..b per axis (a, b cut to n - 1) go to indices -a..b modulo the grid:
    # four quadrant copies instead of a roll of the whole grid
    spans = []
    for n, k, c in zip(image_shape, kernel.shape, (cy, cx)):
        a, b = min(c, n - 1), min(k - 1 - c, n - 1)
        spans.append(((c, c + b + 1, 0), (c - a, c, -a)))   # kernel rows -> grid start
    for ky0, ky1, gy in spans[0]:
        for kx0, kx1, gx in spans[1]:
            if ky1 > ky0 and kx1 > kx0:
                gy0, gx0 = gy % shape[0], gx % shape[1]
                wrapped[gy0:gy0 + ky1 - ky0, gx0:gx0 + kx1 - kx0] = kernel[ky0:ky1, kx0:kx1]
    return wrapped, shape


class Convolver:
    """Repeated centred linear convolutions with one kernel (its FFT kept).

    ``out[q] = sum_p image[p] * kernel[q - p + c]`` over the image, ``c`` the kernel's
    centre ``(ky // 2, kx // 2)`` and the kernel zero beyond its edge: the same as
    ``scipy.signal.fftconvolve(image, kernel, mode='same')`` for odd kernels.  Only the
    kernel's offsets that can reach across the image are kept and the convolution is
    done circularly on the smallest grid without wrap-around (``2 n`` for a PSF twice
    the image's size, rather than the ``3 n`` of a full linear convolution).

    Parameters
    ----------
    kernel : (ky, kx) ndarray
        Centred at ``(ky // 2, kx // 2)``.
    image_shape : (int, int)
        Shape of the images that will be convolved.
    backend : FFT backend, optional
    precision : {float64, float32}
        Precision of the transforms; default float64.  float32 halves their cost for
        updates whose own size bounds the rounding.
    """

    def __init__(self, kernel, image_shape, *, backend=None, precision=np.float64):
        self.backend = get_backend(backend or "auto")
        self.kernel_shape = np.shape(kernel)
        self.image_shape = tuple(image_shape)
        self.precision = np.dtype(precision)
        wrapped, self.fshape = _wrapped_kernel(kernel, self.image_shape)
        self._kf = self.backend.rfft2(wrapped, self.fshape).astype(_complex(self.precision))

    @property
    def spectrum(self):
        """The kernel's transform on the grid ``fshape`` (for callers that add several
        convolutions in the transform domain; read it, do not change it)."""
        return self._kf

    def transform(self, image):
        """The convolution on the whole grid (``image`` at its origin): the first
        ``image.shape`` of it is the result; nothing is copied."""
        image = np.asarray(image)
        if image.shape != self.image_shape:
            raise ValueError(f"image has shape {image.shape}, this convolver was built for "
                             f"{self.image_shape}; build a new one")
        spectrum = self.backend.rfft2(image.astype(self.precision, copy=False), self.fshape)
        if spectrum.dtype == self._kf.dtype:
            spectrum *= self._kf
        else:
            spectrum = spectrum * self._kf
        return self.backend.irfft2(spectrum, self.fshape)

    def __call__(self, image, out_dtype=None):
        image = np.asarray(image)
        out = self.transform(image)[:image.shape[0], :image.shape[1]]
        return np.ascontiguousarray(out, dtype=out_dtype or image.dtype)

    def subtract(self, target, image):
        """``target -= kernel (*) image`` in place (``target`` of the image's shape)."""
        full = self.transform(image)
        np.subtract(target, full[:target.shape[0], :target.shape[1]], out=target,
                    casting="unsafe")
        return target


class MultiConvolver:
    """One image convolved with several kernels: one forward FFT, one inverse per kernel.

    Parameters
    ----------
    kernels : sequence of (k, k) ndarray
        Odd, centred kernels (the scale kernels); a 1 x 1 kernel is applied as a product.
    image_shape : (int, int)
    backend : FFT backend, optional
    precision : {float64, float32}
        Precision of the transforms; default float64.

    Notes
    -----
    Same result as ``[Convolver(k, shape)(image) for k in kernels]`` at the cost of
    ``1 + n`` transforms instead of ``2 n``; all kernels share the grid of the widest.
    """

    def __init__(self, kernels, image_shape, *, backend=None, precision=np.float64):
        self.backend = get_backend(backend or "auto")
        self.image_shape = tuple(image_shape)
        self.precision = np.dtype(precision)
        kernels = [np.asarray(k, dtype=np.float64) for k in kernels]
        widest = max(kernels, key=lambda k: k.shape[0])
        _, self.fshape = _wrapped_kernel(widest, self.image_shape)
        self._kf = []
        for k in kernels:
            if k.size == 1:
                self._kf.append(float(k[0, 0]))
                continue
            wrapped, _ = _wrapped_kernel(k, self.image_shape, self.fshape)
            self._kf.append(self.backend.rfft2(wrapped, self.fshape).astype(
                _complex(self.precision)))

    def __call__(self, image, out=None, dtype=np.float32):
        """Return ``(n_kernels, ny, nx)`` convolutions of ``image`` (into ``out`` if given)."""
        image = np.asarray(image)
        if image.shape != self.image_shape:
            raise ValueError(f"image has shape {image.shape}, this convolver was built for "
                             f"{self.image_shape}; build a new one")
        ny, nx = image.shape
        if out is None:
            out = np.empty((len(self._kf), ny, nx), dtype=dtype)
        spectrum = None
        for i, kf in enumerate(self._kf):
            if isinstance(kf, float):
                out[i] = image * kf
                continue
            if spectrum is None:
                spectrum = self.backend.rfft2(image.astype(self.precision, copy=False),
                                              self.fshape)
                work = np.empty_like(spectrum)
            np.multiply(spectrum, kf, out=work, casting="unsafe")
            out[i] = self.backend.irfft2(work, self.fshape)[:ny, :nx]
        return out
