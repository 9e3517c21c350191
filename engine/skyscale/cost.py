r"""The cost model: time and memory of a planned run, predicted before anything is allocated.

The model is built from what the engine does, term by term, with coefficients
measured on this machine by ``skyscale bench`` (see `DEFAULT_CALIBRATION` and
`load_calibration`):

.. math::

    t_\mathrm{pre} = a + a_P P + (N_s + 1)\, b\, U_p + \tfrac12 N_s (N_s + 1)\, c\, U_p

    t_\mathrm{iter}(k) = d_0 + d\, A_k + e\, N_s\, n_\mathrm{rows}

    t_\mathrm{minor} = K\, \bar t_\mathrm{iter} + n_\mathrm{cycles} (m_0 + m\, U_s + m_N N_s N),
    \qquad t_\mathrm{major} = j\, U_M^{\gamma}

with ``P`` the PSF's pixels, ``U = S log2 S`` the work of an FFT of ``S`` points
(``p`` the cross-term FFT, ``M`` the major-cycle FFT, ``s`` the smoothing FFTs
summed over the scales), ``A_k`` the pixels a component of scale ``k`` makes the
loop rescan summed over the ``N_s`` planes (its cross-term patches, rounded up to
the search tiles), ``n_rows`` the tile rows of the region and ``K`` the component
budget.  The image-sized FFTs (major cycle, the residual operator, the first use of
each FFT plan) follow power laws in ``U``: their cost per point grows with size, as the
buffers outgrow the caches.  So the precompute grows as ``a + b' N_s + c' N_s^2`` and
one iteration as ``N_s`` times the patch area, not the image's.  Threads divide the
parallel part (Amdahl's law, fractions measured with 1 and 2 threads).  Memory is counted from
the arrays the engine keeps and the ones it makes for a moment (`predict_memory`).
"""

import json
import logging
import math
import os
from dataclasses import asdict, dataclass, field

import numpy as np

from ._validate import resolve_dtype
from .fft import fast_shape

__all__ = ["DEFAULT_CALIBRATION", "DEFAULT_PSF_PATCH", "DEFAULT_MAJOR_CYCLES", "SCALE_MIXES",
           "MEMORY_HEADROOM", "CALIBRATION_ENV", "InsufficientMemoryError", "Plan",
           "Geometry", "run_geometry", "touched_pixels", "predict_iteration", "predict_times",
           "predict_memory", "plan_run", "check_fits_memory", "max_affordable_scales",
           "AffordableScales", "available_memory", "load_calibration", "save_calibration",
           "default_calibration_path", "fit_power_law", "fit_nonnegative"]

logger = logging.getLogger(__name__)

#: PSF patch half-width assumed when neither a PSF nor ``psf_patch`` is given: twice
#: the main-lobe radius of a PSF sampled with about 5 pixels across its half-power
#: width (the engine's default patch is at least twice the main-lobe radius).
DEFAULT_PSF_PATCH = 12
#: Major cycles assumed when none are given: the budget of `skyscale.deconvolve`.
DEFAULT_MAJOR_CYCLES = 20
#: Named mixes of components over the scales for the iteration time.
SCALE_MIXES = ("uniform", "smallest", "largest")
#: A run fits when its predicted peak times this is at most the memory available.
MEMORY_HEADROOM = 1.10
#: Environment variable naming a calibration file (overrides the default path).
CALIBRATION_ENV = "SKYSCALE_COST_CALIBRATION"

#: Coefficients measured on this machine (2 cores; the model at 1 thread, float32) on
#: 2026-12-02 by ``PYTHONPATH=engine python -m skyscale.cli bench --sizes 512,1024,2048
#: --out bench-out`` (the calibration it wrote, rounded; "startup" from its fresh-process
#: runs of 256 and 1024 px against the warm model, run twice).  Seconds; FFT work U in
#: points * log2(points); the first four families are linear, the rest power laws.
DEFAULT_CALIBRATION = {
    "source": "built-in: skyscale bench --sizes 512,1024,2048 --max-scales 8, 2026-12-02",
    "iteration": {"fixed": 0.0, "per_pixel": 2.62e-9, "per_row": 2.54e-8},
    "precompute": {"fixed": 0.0266, "per_psf_pixel": 3.62e-8, "per_forward": 2.31e-9,
                   "per_pair": 3.75e-10},
    "minor_overhead": {"fixed": 8.9e-4, "per_fft": 1.32e-9, "per_plane_pixel": 1.0e-8},
    "major": {"coefficient": 3.17e-11, "exponent": 1.204},
    "first_major": {"coefficient": 2.88e-13, "exponent": 1.445},
    "first_minor": {"coefficient": 7.16e-8, "exponent": 0.813},
    "setup": {"coefficient": 4.49e-10, "exponent": 1.045},
    "threads": {"iteration_parallel": 0.51, "fft_parallel": 0.71, "measured_with": 2},
    "memory": {"scale": 0.981},
    "range": {"max_image_pixels": 2048 * 2048},
    "startup": {"fixed": 0.41, "per_byte": 7.0e-10},
}


class InsufficientMemoryError(ValueError, MemoryError):
    """A planned run would need more memory than is available."""


def patch_half_widths(radii, psf_patch_half, image_shape):
    """Half-width of each cross-term patch: ``psf_patch + r_k + r_l``, capped by the image."""
    r = np.asarray(radii, dtype=np.int64)
    cap = int(max(image_shape)) - 1
    return np.minimum(psf_patch_half + r[:, None] + r[None, :], cap).astype(np.int64)


def _radii(scales, shape="paraboloid"):
    from .scales import ScaleSet
    return ScaleSet(scales, shape=shape).support_radii


def _fft_work(shape):
    """``S log2 S`` for an FFT of ``shape``: the unit of FFT time."""
    s = float(shape[0]) * float(shape[1])
    return s * math.log2(max(s, 2.0))


def _complex_bytes(shape):
    """Bytes of the complex128 transform of a real array of ``shape``."""
    return 16 * int(shape[0]) * (int(shape[1]) // 2 + 1)


@dataclass(frozen=True)
class Geometry:
    """Sizes the cost of a run depends on, from shapes alone."""

    image_shape: tuple
    psf_shape: tuple
    radii: tuple                #: support half-width of each scale kernel
    psf_patch: int              #: PSF patch half-width
    itemsize: int
    tile: int
    region_shape: tuple         #: minor-cycle sub-region (default the image)
    halves: np.ndarray          #: (n, n) cross-term patch half-widths
    scan_pixels: np.ndarray     #: (n,) pixels rescanned per component of scale k, all planes
    write_pixels: np.ndarray    #: (n,) pixels updated per component of scale k, all planes
    tile_rows: int
    precompute_fft: tuple
    major_fft: tuple
    smooth_ffts: tuple          #: FFT shape of each finite scale's smoothing

    @property
    def n_scales(self):
        return len(self.radii)

    @property
    def bytes_per_component(self):
        """(n,) bytes one iteration must touch: rescan reads (plane + mask), plane
        write-back and patch reads over the updated pixels."""
        b = self.itemsize
        return self.scan_pixels * (b + 1) + self.write_pixels * 2 * b


def run_geometry(image_shape, psf_shape, radii, psf_patch, *, itemsize=4, tile=16,
                 region_shape=None):
    """Compute the `Geometry` of a run (no large array is made).

    A component is taken as away from the region's edges, so each patch counts whole;
    a patch of side ``s`` rescans on average ``s + tile - 1`` rows and columns of tiles.
    """
    ny, nx = (int(v) for v in image_shape)
    region = tuple(int(v) for v in (region_shape or (ny, nx)))
    r = np.asarray(radii, dtype=np.int64)
    halves = patch_half_widths(r, int(psf_patch), (ny, nx))
    side = 2 * halves + 1
    scan = np.minimum(side + tile - 1, region[0]) * np.minimum(side + tile - 1, region[1])
    write = np.minimum(side, region[0]) * np.minimum(side, region[1])
    rmax = int(r.max())
    need = int((halves + r[:, None] + r[None, :]).max())
    pre = fast_shape((2 * need + 1,) * 2, (4 * rmax + 1,) * 2)
    smooth = tuple(fast_shape((ny, nx), (2 * int(k) + 1,) * 2) for k in r if k > 0)
    return Geometry((ny, nx), tuple(int(v) for v in psf_shape), tuple(int(v) for v in r),
                    int(psf_patch), int(itemsize), int(tile), region, halves,
                    scan.sum(axis=1).astype(float), write.sum(axis=1).astype(float),
                    -(-region[0] // tile), pre, fast_shape((ny, nx), psf_shape), smooth)


def touched_pixels(ys, xs, ks, halves, region_shape, tile=16):
    """Pixels each component updates and rescans, clipped to the region as the loop does.

    Parameters
    ----------
    ys, xs, ks : (m,) int arrays
        Component positions in region coordinates and scale indices.
    halves : (n, n) int array
        Cross-term patch half-widths (``engine.patch_half``).
    region_shape : (int, int)
    tile : int

    Returns
    -------
    write, scan : (m,) float arrays
        Pixels updated (the patches, clipped) and rescanned (whole tiles under the
        patch rows, clipped), summed over the planes.
    """
    h, w = int(region_shape[0]), int(region_shape[1])
    ys, xs = np.asarray(ys, np.int64)[:, None], np.asarray(xs, np.int64)[:, None]
    hp = np.asarray(halves, np.int64)[np.asarray(ks, np.int64)]          # (m, n)
    ya, yb = np.maximum(ys - hp, 0), np.minimum(ys + hp, h - 1)
    xa, xb = np.maximum(xs - hp, 0), np.minimum(xs + hp, w - 1)
    write = (yb - ya + 1) * (xb - xa + 1)
    rows = np.minimum((yb // tile + 1) * tile, h) - (ya // tile) * tile
    cols = np.minimum((xb // tile + 1) * tile, w) - (xa // tile) * tile
    return write.sum(axis=1).astype(float), (rows * cols).sum(axis=1).astype(float)


def _mix_weights(mix, n):
    if mix is None or (isinstance(mix, str) and mix == "uniform"):
        return np.full(n, 1.0 / n)
    if isinstance(mix, str):
        if mix not in SCALE_MIXES:
            raise ValueError(f"scale_mix is {mix!r}; valid values are "
                             f"{', '.join(map(repr, SCALE_MIXES))} or one fraction per scale")
        wts = np.zeros(n)
        wts[0 if mix == "smallest" else -1] = 1.0
        return wts
    wts = np.asarray(mix, dtype=float)
    if wts.shape != (n,) or np.any(wts < 0) or not wts.sum() > 0:
        raise ValueError(f"scale_mix has {wts.tolist()}; give {n} non-negative fractions, "
                         "one per scale (for example the component counts of a past run)")
    return wts / wts.sum()


def _amdahl(fraction, threads):
    """Time factor of ``threads`` threads for a parallel fraction (Amdahl's law)."""
    f = min(max(float(fraction), 0.0), 1.0)
    return (1.0 - f) + f / max(int(threads), 1)


def predict_iteration(geom, calibration=None, *, threads=1, scale_mix=None):
    """Seconds per minor-cycle iteration: (mean under ``scale_mix``, per-scale array)."""
    cal = calibration or load_calibration()
    c = cal["iteration"]
    b_ratio = (3 * geom.itemsize + 1) / 13.0   # bytes per pixel relative to float32
    per_k = (c["fixed"] + c["per_pixel"] * b_ratio * geom.scan_pixels
             + c["per_row"] * geom.n_scales * geom.tile_rows)
    per_k = per_k * _amdahl(cal["threads"]["iteration_parallel"], threads)
    return float(_mix_weights(scale_mix, geom.n_scales) @ per_k), per_k


def _power(section, work):
    return section["coefficient"] * work ** section["exponent"] if work > 0 else 0.0


def predict_times(geom, calibration=None, *, threads=1):
    """Seconds of the precompute; the setup (the residual operator); one minor cycle's
    overhead besides its iterations; one major cycle; and the extra of the first minor
    and first major cycle (FFT plans made and their buffers first touched)."""
    cal = calibration or load_calibration()
    fft_f = _amdahl(cal["threads"]["fft_parallel"], threads)
    n = geom.n_scales
    u_p, u_m = _fft_work(geom.precompute_fft), _fft_work(geom.major_fft)
    u_s = sum(_fft_work(s) for s in geom.smooth_ffts)
    c = cal["precompute"]
    pre = (c["fixed"] + c["per_psf_pixel"] * geom.psf_shape[0] * geom.psf_shape[1]
           + fft_f * u_p * (c["per_forward"] * (n + 1) + c["per_pair"] * n * (n + 1) / 2))
    c = cal["minor_overhead"]
    overhead = (c["fixed"] + fft_f * c["per_fft"] * u_s
                + c["per_plane_pixel"] * n * geom.image_shape[0] * geom.image_shape[1])
    return {"precompute": pre, "setup": fft_f * _power(cal["setup"], u_m),
            "minor_overhead": overhead, "major": fft_f * _power(cal["major"], u_m),
            "first_minor": fft_f * _power(cal["first_minor"], u_s),
            "first_major": fft_f * _power(cal["first_major"], u_m)}


def predict_memory(geom, calibration=None):
    """Peak bytes the engine adds to the process, and its terms.

    Counted from the code: the normalised PSF copies of the engine and the
    image-plane operator; the PSF measures (``33 + 2 * itemsize`` bytes per PSF
    pixel for a moment); the cached FFT plans (input and output buffers, about two
    complex transforms each, one per distinct kernel shape and FFT shape) of the
    precompute, the smoothing and the major cycle; the kept transforms; the planes
    (one per scale, twice while the sub-region is cut out); the run's images.
    """
    cal = calibration or load_calibration()
    b = geom.itemsize
    ny, nx = geom.image_shape
    n_img = ny * nx
    n_psf = geom.psf_shape[0] * geom.psf_shape[1]
    n = geom.n_scales
    cp = _complex_bytes(geom.precompute_fft)
    cm = _complex_bytes(geom.major_fft)
    n_kshapes = len(set(geom.radii))
    # (k, l) and (l, k) share one stored patch
    patches = int(sum((2 * geom.halves[k, l] + 1) ** 2 for k in range(n) for l in range(k, n))) * b
    smooth_plans = sum(3 * _complex_bytes(s) for s in geom.smooth_ffts) + \
        sum(4 * _complex_bytes(s) for s in set(geom.smooth_ffts))
    smooth_tmp = max([3 * _complex_bytes(s) for s in geom.smooth_ffts] or [0]) + 8 * n_img
    planes = n * n_img * b
    images = 4 * n_img * b
    t = {
        "psf": 2 * n_psf * b,
        "psf_measures": (33 + 2 * b) * n_psf,
        "precompute_plans": (2 * n_kshapes + 4) * cp,
        "precompute_work": (n + 4) * cp,
        "patches": patches,
        "operator": 3 * cm,
        "smoothing_plans": smooth_plans,
        "smoothing_work": smooth_tmp,
        # the image's forward plan is the operator's own when the PSF has the image's shape
        "major_plans": (2 if geom.psf_shape == geom.image_shape else 4) * cm,
        "major_work": 2 * cm + 8 * n_img,
        "planes": planes,
        "region_copy": planes,
        "images": images,
    }
    kept = t["psf"] // 2 + t["precompute_plans"] + t["patches"]
    phases = {
        "psf_measures": t["psf"] // 2 + t["psf_measures"],
        "precompute": kept + t["precompute_work"],
        "operator": kept + t["psf"] // 2 + t["operator"] + 8 * n_psf,
    }
    kept += t["psf"] // 2 + t["operator"] + t["smoothing_plans"] + images
    phases["smoothing"] = kept + planes + t["smoothing_work"]
    phases["major"] = kept + t["major_plans"] + t["major_work"]
    kept += t["major_plans"]
    phases["minor"] = kept + planes + t["region_copy"] + 2 * n_img * b
    scale = float(cal["memory"]["scale"])
    peak_phase = max(phases, key=phases.get)
    return {"peak": int(scale * phases[peak_phase]), "peak_phase": peak_phase,
            "phases": {k: int(scale * v) for k, v in phases.items()}, "terms": t}


# ------------------------------------------------------------------------- fitting
def fit_power_law(x, y):
    """Least-squares fit of ``y = c * prod_i x_i ** p_i`` in log space.

    Parameters
    ----------
    x : (m,) or (m, q) array of positive values
    y : (m,) array of positive values

    Returns
    -------
    dict
        ``coefficient`` c, ``exponents`` [p_i], ``rms_log_residual`` (natural log).
    """
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    x = x[:, None] if x.ndim == 1 else x
    if x.shape[0] != y.shape[0] or y.size < x.shape[1] + 1:
        raise ValueError(f"fit_power_law got {x.shape[0]} x rows and {y.size} y values for "
                         f"{x.shape[1]} exponents; give matching arrays with more points "
                         "than exponents")
    if np.any(x <= 0) or np.any(y <= 0):
        raise ValueError("fit_power_law needs positive x and y; drop zero or negative points")
    design = np.column_stack([np.ones(y.size), np.log(x)])
    sol, *_ = np.linalg.lstsq(design, np.log(y), rcond=None)
    resid = np.log(y) - design @ sol
    return {"coefficient": float(np.exp(sol[0])), "exponents": [float(p) for p in sol[1:]],
            "rms_log_residual": float(np.sqrt(np.mean(resid ** 2)))}


def fit_nonnegative(features, y):
    """Non-negative least squares ``y ~ features @ coef`` weighted to relative errors.

    Returns
    -------
    coef : (q,) ndarray
    max_relative_error : float
        Largest ``|model / y - 1|`` over the points.
    """
    from scipy.optimize import nnls
    a = np.asarray(features, dtype=float)
    y = np.asarray(y, dtype=float)
    if a.ndim != 2 or a.shape[0] != y.size or np.any(y <= 0):
        raise ValueError(f"fit_nonnegative got features {a.shape} and {y.size} positive "
                         "times; give one row of features per positive time")
    coef, _ = nnls(a / y[:, None], np.ones(y.size))
    return coef, float(np.max(np.abs(a @ coef / y - 1.0)))


# ---------------------------------------------------------------------- calibration
def default_calibration_path():
    """``$SKYSCALE_COST_CALIBRATION``, or ``~/.cache/skyscale/cost_calibration.json``."""
    return os.environ.get(CALIBRATION_ENV) or os.path.join(
        os.path.expanduser("~"), ".cache", "skyscale", "cost_calibration.json")


def _merged(data, source):
    cal = json.loads(json.dumps(DEFAULT_CALIBRATION))
    for section, values in data.items():
        if isinstance(values, dict) and section in cal:
            unknown = set(values) - set(cal[section])
            if unknown:
                raise ValueError(f"section {section!r} has unknown keys {sorted(unknown)}")
            cal[section].update({k: float(v) for k, v in values.items()})
        elif section != "source" and section != "fit":
            raise ValueError(f"unknown section {section!r}")
    cal["source"] = f"{source} ({data['source']})" if data.get("source") else source
    return cal


def load_calibration(path=None):
    """The coefficients the planner uses: ``path``, else the default file, else built-in.

    Raises
    ------
    ValueError
        When an explicit ``path`` is missing or not a calibration written by
        ``skyscale bench``.  A broken default file is logged and skipped.
    """
    explicit = path is not None
    path = path or default_calibration_path()
    try:
        with open(path) as fh:
            return _merged(json.load(fh), str(path))
    except FileNotFoundError:
        if explicit:
            raise ValueError(f"calibration {path!r} does not exist; run skyscale bench "
                             "--calibration PATH to make one, or leave it out") from None
    except (OSError, ValueError, TypeError, AttributeError) as exc:
        if explicit:
            raise ValueError(f"calibration {path!r} is not a skyscale bench calibration "
                             f"({exc}); remake it with skyscale bench") from None
        logger.warning("ignoring the calibration file %s (%s); using the built-in one", path, exc)
    return json.loads(json.dumps(DEFAULT_CALIBRATION))


def save_calibration(calibration, path=None):
    """Write ``calibration`` as JSON atomically; returns the path."""
    path = path or default_calibration_path()
    folder = os.path.dirname(os.path.abspath(path))
    os.makedirs(folder, exist_ok=True)
    tmp = f"{path}.{os.getpid()}.tmp"
    with open(tmp, "w") as fh:
        json.dump(calibration, fh, indent=2)
    os.replace(tmp, path)
    return path


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


# ------------------------------------------------------------------------- planning
def _gib(nbytes):
    return f"{nbytes / 2**30:.2f} GiB"


@dataclass
class Plan:
    """Predicted cost of a run (seconds, bytes); ``plan['key']`` works too."""

    image_shape: tuple
    psf_shape: tuple
    scales: tuple
    psf_patch: int
    psf_patch_source: str          #: 'measured' (from the PSF), 'given' or 'assumed'
    threads: int
    dtype: str
    max_components: int
    major_cycles: int
    precompute_seconds: float
    setup_seconds: float           #: the residual operator (the PSF's transform)
    startup_seconds: float         #: what the first run of a process pays more (imports,
                                   #: fresh memory pages); 0 unless ``fresh_process``
    iteration_seconds: float       #: one minor-cycle iteration under the scale mix
    iteration_seconds_range: tuple  #: all components on the cheapest / dearest scale
    minor_overhead_seconds: float  #: per minor cycle, besides its iterations
    minor_seconds: float           #: all minor cycles of the run
    major_seconds: float           #: one major cycle (the residual), after the first
    major_total_seconds: float     #: all major cycles, the first one's extra included
    total_seconds: float
    memory_bytes: int              #: predicted peak the engine adds to the process
    memory_phase: str              #: where the peak happens
    memory_available: int | None
    fits: bool
    messages: list = field(default_factory=list)
    calibration: str = ""
    memory_terms: dict = field(default_factory=dict)

    def __getitem__(self, key):
        return getattr(self, key)

    def as_dict(self):
        """Plain JSON-ready dict."""
        return {k: (list(v) if isinstance(v, tuple) else v) for k, v in asdict(self).items()}


def _shape2(value, name):
    try:
        shape = tuple(int(v) for v in value)
    except (TypeError, ValueError):
        shape = ()
    if len(shape) != 2 or min(shape) < 1:
        raise ValueError(f"{name} is {value!r}, expected (ny, nx) with two positive integers")
    return shape


def _spinning_threads():
    """True when Numba's kernels run on OpenMP threads that busy-wait when idle."""
    import numba
    if os.environ.get("OMP_WAIT_POLICY", "").lower() == "passive":
        return False
    spin = os.environ.get("GOMP_SPINCOUNT", "")   # skyscale sets 20000 unless told otherwise
    if spin.isdigit() and int(spin) <= 1_000_000:
        return False
    try:
        layer = numba.threading_layer()
    except ValueError:                 # no parallel kernel has run yet: what it will pick
        layer = numba.config.THREADING_LAYER
        if layer in ("default", "safe", "threadsafe"):
            try:
                from numba.np.ufunc import tbbpool  # noqa: F401
                layer = "tbb"
            except ImportError:
                layer = "omp"
    return layer == "omp"


def _psf_patch(psf_arr, image_shape, psf_shape, psf_patch, dtype, messages):
    hcap = min(max(image_shape) - 1, max(psf_shape[0] // 2, psf_shape[1] // 2))
    if psf_arr is not None:
        from .psf import check_psf, describe_psf
        info = describe_psf(check_psf(psf_arr, image_shape, dtype=dtype), image_shape,
                            patch_half=psf_patch)
        return info.patch_half, "measured" if psf_patch is None else "given"
    if psf_patch is not None:
        if int(psf_patch) < 0:
            raise ValueError(f"psf_patch is {psf_patch}, expected a half-width >= 0 pixels")
        return min(int(psf_patch), hcap), "given"
    messages.append(f"no PSF given: assumed a PSF patch half-width of {DEFAULT_PSF_PATCH} px; "
                    "pass the PSF or psf_patch for a closer prediction")
    return min(DEFAULT_PSF_PATCH, hcap), "assumed"


def plan_run(image_shape, psf, scales, *, max_components=20000, threads=None, psf_patch=None,
             dtype=None, memory_available=None, major_cycles=None, scale_shape="paraboloid",
             scale_mix=None, calibration=None, tile=16, fresh_process=True):
    """Predict the time and memory of a run before anything large is allocated.

    Parameters
    ----------
    image_shape : (int, int)
        Shape of the dirty image.
    psf : (int, int) or (py, px) ndarray
        The PSF's shape, or the PSF itself (its patch half-width is then measured as
        the engine does, which takes about 45 bytes per PSF pixel for a moment).
    scales : sequence of float
        Scale diameters in pixels (0 = delta).
    max_components : int
        Component budget; default 20000.
    threads : int, optional
        Default all cores.  More threads than this machine has are counted as its cores.
    psf_patch : int, optional
        PSF patch half-width; default measured from ``psf``, or `DEFAULT_PSF_PATCH`.
    dtype : {float32, float64}
        Default float32.
    memory_available : int, optional
        Bytes; default `available_memory`.
    major_cycles : int, optional
        Major cycles to count; default `DEFAULT_MAJOR_CYCLES` (the run's budget).
    scale_shape : {'paraboloid', 'gaussian'}
    scale_mix : {'uniform', 'smallest', 'largest'} or sequence of float
        How components spread over the scales; default uniform.
    calibration : dict or str, optional
        Coefficients, or a calibration file; default `load_calibration`.
    fresh_process : bool
        The run is the first of its Python process (as with the command line): count
        the one-off start-up.  Pipelines running many fields in one process pass False.

    Returns
    -------
    Plan
    """
    from .scales import ScaleSet
    messages = []
    image_shape = _shape2(image_shape, "image_shape")
    psf_arr = None
    if np.ndim(psf) >= 2:
        psf_arr = np.asarray(psf)
        psf_shape = psf_arr.shape[-2:]
    else:
        psf_shape = _shape2(psf, "psf")
    if psf_shape[0] < image_shape[0] or psf_shape[1] < image_shape[1]:
        raise ValueError(f"psf has shape {tuple(psf_shape)}, smaller than the image "
                         f"{image_shape}; make the PSF at least the image's size")
    dt = resolve_dtype(dtype)
    sset = ScaleSet(scales, shape=scale_shape, image_shape=image_shape)
    if int(max_components) < 0:
        raise ValueError(f"max_components is {max_components}, expected an integer >= 0")
    from ._threads import resolve_threads
    cores = resolve_threads(None)      # what the engine takes for "all cores"
    if threads is None:
        threads = cores
    elif int(threads) < 1:
        raise ValueError(f"threads is {threads}, expected an integer >= 1 or None for all cores")
    elif int(threads) > cores:
        messages.append(f"threads {threads} is more than the {cores} this machine gives the "
                        f"engine; predicted for {cores}")
    threads = min(int(threads), cores)
    if threads > 1 and _spinning_threads():
        messages.append("with Numba's OpenMP threading layer, runs on more than one thread "
                        "were measured several times slower than on one (idle OpenMP "
                        "threads spin while the FFT library's threads work); set "
                        "GOMP_SPINCOUNT=20000 (skyscale's default), OMP_WAIT_POLICY=passive or "
                        "NUMBA_THREADING_LAYER=workqueue, or use "
                        "threads=1; the times here assume no such contention")
    if major_cycles is None:
        major_cycles = DEFAULT_MAJOR_CYCLES
        messages.append(f"counted {major_cycles} major cycles (the run's budget; most runs "
                        "stop earlier)")
    cal = load_calibration(calibration) if not isinstance(calibration, dict) else calibration
    patch, source = _psf_patch(psf_arr, image_shape, psf_shape, psf_patch, dt, messages)
    geom = run_geometry(image_shape, psf_shape, sset.support_radii, patch,
                        itemsize=dt.itemsize, tile=tile)
    it, per_k = predict_iteration(geom, cal, threads=threads, scale_mix=scale_mix)
    if scale_mix is None:
        messages.append(f"iteration time for components spread evenly over the scales; "
                        f"{per_k.min() * 1e6:.3g} us if all on the smallest, "
                        f"{per_k.max() * 1e6:.3g} us if all on the largest")
    t = predict_times(geom, cal, threads=threads)
    cycles = int(major_cycles)
    minor = int(max_components) * it + cycles * t["minor_overhead"] + t["first_minor"] * (
        cycles > 0)
    major = cycles * t["major"] + t["first_major"] * (cycles > 0)
    big = cal.get("range", {}).get("max_image_pixels")
    if big and image_shape[0] * image_shape[1] > 1.5 * big:
        side = int(big ** 0.5)
        messages.append(f"the image is larger than the calibrated sizes (up to {side} x "
                        f"{side}); times are extrapolated: run skyscale bench --sizes with "
                        "this size for a closer figure")
    mem = predict_memory(geom, cal)
    avail = memory_available if memory_available is not None else available_memory()
    fits = avail is None or mem["peak"] * MEMORY_HEADROOM <= avail
    if avail is None:
        messages.append("the memory available is unknown; not checked")
    elif not fits:
        messages.append(f"will not fit: needs about {_gib(mem['peak'])} (peak at "
                        f"{mem['peak_phase']}), {_gib(avail)} available")
    st = cal.get("startup", {"fixed": 0.0, "per_byte": 0.0})
    startup = (st["fixed"] + st["per_byte"] * mem["peak"]) if fresh_process else 0.0
    total = t["precompute"] + t["setup"] + minor + major + startup
    return Plan(image_shape, tuple(psf_shape), sset.pixels, int(patch), source, threads,
                dt.name, int(max_components), cycles, t["precompute"], t["setup"], startup,
                it, (float(per_k.min()), float(per_k.max())), t["minor_overhead"], minor,
                t["major"], major, total, mem["peak"],
                mem["peak_phase"], avail, bool(fits), messages, cal.get("source", ""),
                mem["terms"])


def check_fits_memory(plan):
    """Raise `InsufficientMemoryError` (a ValueError and a MemoryError) if ``plan`` won't fit."""
    if not plan.fits:
        raise InsufficientMemoryError(
            f"the run needs about {_gib(plan.memory_bytes)} (predicted peak, at "
            f"{plan.memory_phase}) but {_gib(plan.memory_available)} is available; use fewer "
            "or smaller scales, a smaller image, a PSF the image's size instead of twice it, "
            "or free memory")
    return plan


@dataclass
class AffordableScales:
    """The longest run of the smallest candidate scales that fits the budgets."""

    scales: tuple
    plan: Plan | None             #: the plan of ``scales`` (None when none fits)
    limited_by: str | None        #: 'memory', 'time' or None (every candidate fits)


def max_affordable_scales(image_shape, psf, candidate_scales, *, seconds_budget=None,
                          memory_budget=None, **plan_options):
    """Most scales (smallest first) whose predicted run fits the time and memory budgets.

    Parameters
    ----------
    image_shape, psf
        As in `plan_run`.
    candidate_scales : sequence of float
        Diameters in pixels; tried smallest first, since larger scales cost more.
    seconds_budget : float, optional
        Largest predicted total time; default no limit.
    memory_budget : int, optional
        Bytes; default the memory available now.
    **plan_options
        Passed to `plan_run`.

    Returns
    -------
    AffordableScales
    """
    cands = sorted(float(s) for s in candidate_scales)
    if not cands:
        raise ValueError("candidate_scales is empty; give at least one diameter")
    if np.ndim(psf) >= 2 and plan_options.get("psf_patch") is None:   # measure the PSF once
        first = plan_run(image_shape, psf, cands[:1], **plan_options)
        plan_options["psf_patch"], psf = first.psf_patch, np.shape(psf)[-2:]
    best, limited = None, None
    for i in range(1, len(cands) + 1):
        p = plan_run(image_shape, psf, cands[:i], memory_available=memory_budget, **plan_options)
        if not p.fits:
            limited = "memory"
        elif seconds_budget is not None and p.total_seconds > seconds_budget:
            limited = "time"
        if limited:
            break
        best = p
    return AffordableScales(best.scales if best else (), best, limited)
