"""The one memory account: the peak bytes a run adds, counted from what the engine allocates.

`predict_memory` is what ``skyscale plan`` quotes, what `skyscale.Engine` keeps as
``memory`` (`engine_memory`) and what ``Engine(max_memory=)`` and ``skyscale run``
check (`fits_memory`).  It counts the default FFT backend, ``scipy.fft``
(`skyscale.core.fft.ScipyFFT`): no plans are kept, float32 data is transformed in
complex64, and each transform allocates its output (and a zero-padded copy of its
input, and for an inverse a complex work array).  pyfftw keeps plans with their
buffers for the process, which this account leaves out.
"""

from skyscale.core.calibration import load_calibration
from skyscale.core.grids import run_geometry

__all__ = ["MEMORY_HEADROOM", "predict_memory", "engine_memory", "fits_memory",
           "available_memory"]

#: A run fits when its predicted peak times this is at most the memory available.
MEMORY_HEADROOM = 1.10


def _cells(grid):
    """Complex values of a real FFT's half spectrum on ``grid``."""
    return int(grid[0]) * (int(grid[1]) // 2 + 1)


def _area(grid):
    return int(grid[0]) * int(grid[1])


def _forward(grid, b, in_b=None):
    """Bytes alive while one real FFT runs: the padded input and the half spectrum."""
    return (b if in_b is None else in_b) * _area(grid) + 2 * b * _cells(grid)


def _inverse(grid, b):
    """Bytes an inverse real FFT allocates beyond its input: a complex work array for
    the first axis (pocketfft's own, which tracemalloc does not see) and the real
    output."""
    return 2 * b * _cells(grid) + b * _area(grid)


def predict_memory(geom, calibration=None):
    """Peak bytes a run adds to the process, and where it happens: the one memory account.

    Counted from the code (`skyscale.core.engine`, `skyscale.core.precompute`,
    `skyscale.core.driver`, `skyscale.core.operators`) with the default FFT backend,
    ``scipy.fft``, which keeps no plans; for the largest box a minor cycle can work in,
    the whole image:

    - ``beams``: one beam per scale at the image's extent, ``(2 ny - 1) (2 nx - 1)``
      (`skyscale.Engine.beams`); ``pair_beams``: the pair beams direct updates use
      (`skyscale.Engine._pair_keys`);
    - ``planes``: the smoothed residuals twice (the run's and the cycle's copy of them);
    - ``tracked``: the cycle's tracked pixels (all of the box at most): their
      coordinates and per-scale masks; ``tracked_values``: their residual in float64
      and planes (made after the beams);
    - ``images``: the residual in float64, the cycle's box of it and its increment
      (float64), the model, the per-scale allowed centres, the masks and the centres
      taken;
    - ``psf_copies``: the engine's PSF (normalised, in the run's precision; the
      operator shares it);
    - ``kept_transforms``: the half spectra the convolvers keep (the residual operator's
      PSF, the engine's smoothing kernels, and the cycle's box convolvers: the PSF and
      the kernels again);
    - ``beam_work``: the transient while the beams are made (the PSF's region in
      float64, its spectrum, each kernel's, and one beam's inverse FFT);
    - ``update_work``: the transient of an FFT update (the step, the PSF convolution's
      spectrum and output, then the smoothing's spectrum, work array and output).  A
      major cycle needs less: the cycle's box copies and tracked pixels are freed before
      the operator's transform, the new residual and its planes are made.

    Parameters
    ----------
    geom : `skyscale.core.grids.Geometry`
    calibration : dict, optional
        Its ``memory.scale`` multiplies the count (fitted by ``skyscale bench`` against
        tracemalloc); default `skyscale.core.calibration.load_calibration`.

    Returns
    -------
    dict
        ``peak`` (bytes, times the calibrated ``memory.scale``), ``peak_phase``
        ('beams': while the first minor cycle makes the beams, or 'cycles'),
        ``phases``, ``terms`` and ``engine`` (what `skyscale.Engine` keeps as
        ``memory``: the terms with ``total`` = ``peak`` and ``peak_phase``).
    """
    cal = calibration or load_calibration()
    b = geom.itemsize
    ny, nx = geom.image_shape
    npx = geom.pixels
    n = geom.n_scales
    nf = geom.n_finite
    n_psf = geom.psf_shape[0] * geom.psf_shape[1]
    m, p, s = geom.major_grid, geom.precompute_grid, geom.smooth_grid
    rmax = max(geom.radii) if geom.radii else 0
    region = (2 * (ny - 1 + 2 * rmax) + 1) * (2 * (nx - 1 + 2 * rmax) + 1)
    smooth_kept = nf * 2 * b * _cells(s) if nf else 0
    # the image in the transforms' precision, its spectrum, the product, one inverse
    smoothing = (b * npx + 2 * 2 * b * _cells(s) + _inverse(s, b)) if nf else 0
    t = {
        "beams": n * geom.beam_pixels * b,
        "pair_beams": geom.n_pairs * geom.beam_pixels * b,
        "planes": 2 * n * npx * b,
        "tracked": npx * (8 + 8 + n + 1) + 4 * 8 * ny,
        "tracked_values": npx * (8 + n * b),
        "images": 3 * 8 * npx + b * npx + n * npx + 3 * npx,
        "psf_copies": b * n_psf,
        "kept_transforms": 2 * (2 * b * _cells(m)) + 2 * smooth_kept,
        # the PSF's region (float64, then in the run's precision), or its spectrum with
        # each finite kernel's, a product and one inverse
        "beam_work": max(8 * region + b * region, b * region + _forward(p, b),
                         (2 + nf) * 2 * b * _cells(p) + _inverse(p, b)),
        # an FFT update: the step and the PSF convolution (its spectrum, then its
        # output) with the box's new residual (a scratch box the cycle keeps); then the
        # smoothing, with the tracked values gathered again
        "update_work": max(b * npx + 2 * b * _cells(m) + _inverse(m, b) + 8 * npx,
                           smoothing + (8 + n * b) * npx),
    }
    common = sum(t[k] for k in ("beams", "planes", "tracked", "images", "psf_copies",
                                "kept_transforms"))
    phases = {"beams": common + t["pair_beams"] + t["beam_work"],
              "cycles": common + t["pair_beams"] + t["tracked_values"] + t["update_work"]}
    scale = float(cal["memory"]["scale"])
    peak_phase = max(phases, key=phases.get)
    peak = int(scale * phases[peak_phase])
    return {"peak": peak, "peak_phase": peak_phase,
            "phases": {k: int(scale * v) for k, v in phases.items()},
            "engine": dict(t, total=peak, peak_phase=peak_phase), "terms": t}


def engine_memory(image_shape, psf_shape, radii, itemsize=4, calibration=None):
    """`predict_memory` of an engine's shapes: what `skyscale.Engine` keeps as ``memory``.

    Parameters
    ----------
    image_shape, psf_shape : (int, int)
    radii : sequence of int
        Support half-width of each scale kernel.
    itemsize : int
        4 for float32, 8 for float64.
    calibration : dict, optional
        Default `skyscale.core.calibration.load_calibration` (its ``memory.scale``), as the planner
        reads it.

    Returns
    -------
    dict
        The terms of `predict_memory` (bytes), ``total`` (its ``peak``) and ``peak_phase``.
    """
    geom = run_geometry(image_shape, psf_shape, radii, itemsize=itemsize)
    return predict_memory(geom, calibration)["engine"]


def fits_memory(peak, available):
    """True when a predicted ``peak`` (bytes) fits in ``available`` bytes.

    The rule of the planner and of ``Engine(max_memory=)``: the peak times
    `MEMORY_HEADROOM` (the model's margin) must be at most what is available; an
    unknown ``available`` (None) fits.
    """
    return available is None or peak * MEMORY_HEADROOM <= available


def available_memory():
    """Bytes of memory available now (psutil, else /proc/meminfo), or None if unknown."""
    try:
        import psutil
        return int(psutil.virtual_memory().available)
    except ImportError:
        pass
    try:
        with open("/proc/meminfo") as fh:
            for line in fh:
                if line.startswith("MemAvailable:"):
                    return int(line.split()[1]) * 1024
    except OSError:
        pass
    return None
