"""What would fit: the changes that bring a run, or a bench, within the memory there is.

`memory_remedies` takes a run that will not fit and computes, with the same cost model
and calibration as the planner (`skyscale.cost.predict_memory`), the peak memory of each
change a user can make: fewer scales (the most of the smallest that fit), float32
instead of float64, a PSF the image's size instead of larger, and the largest square
sub-region that fits with everything else as given.  `bench_advice` picks the sizes of
a ``skyscale bench`` that fit (`skyscale.cost.sweep_plan.sweep_memory`) for a plan whose image is
larger than the calibrated sizes.  Nothing here prints.
"""

from skyscale.core.defaults import DEFAULTS
from skyscale.core.scales import ScaleSet
from skyscale.core.validate import InputError
from skyscale.cost import model as cost
from skyscale.cost.sweep_plan import sweep_memory

__all__ = ["memory_remedies", "bench_sizes_that_fit", "bench_advice", "check_bench_fits",
           "BENCH_SIZE_LADDER"]

#: Sizes ``skyscale bench --sizes`` is advised in (square images, PSF twice the size).
BENCH_SIZE_LADDER = (512, 768, 1024, 1536, 2048, 3072, 4096, 6144, 8192, 12288, 16384)
_SMALLEST_REGION = 16


def _gib(nbytes):
    return f"{nbytes / 2**30:.1f} GiB"


def _peak(image_shape, psf_shape, scales, itemsize, scale_shape, cal):
    """Predicted peak bytes, or None where the scales do not fit the image at all."""
    try:
        radii = ScaleSet(scales, shape=scale_shape, image_shape=image_shape).support_radii
    except (InputError, ValueError):
        return None
    geom = cost.run_geometry(image_shape, psf_shape, radii, itemsize=itemsize)
    return int(cost.predict_memory(geom, cal)["peak"])


def _fits(peak, available):
    """The planner's rule (`skyscale.cost.fits_memory`); a peak of None never fits."""
    return peak is not None and cost.fits_memory(peak, available)


def _remedy(kind, peak, available, option, text):
    fits = _fits(peak, available)
    if not fits:
        text += f", still more than the {_gib(available / cost.MEMORY_HEADROOM)} that fits"
    return {"kind": kind, "peak_bytes": peak, "fits": fits, "option": option, "text": text}


def memory_remedies(image_shape, psf_shape, scales, *, itemsize, available, calibration,
                    scale_shape=DEFAULTS.scale_shape):
    """The changes that would make a run fit, each with its predicted peak memory.

    Parameters
    ----------
    image_shape, psf_shape : (int, int)
    scales : sequence of float
        Diameters in pixels.
    itemsize : int
        4 for float32, 8 for float64.
    available : int
        Bytes available (the planner's ``memory_available``).
    calibration : dict
        The cost model's coefficients, as the plan used.
    scale_shape : str

    Returns
    -------
    list of dict
        ``kind`` ('scales', 'dtype', 'psf', 'together' (the last two with the most
        scales that then fit, offered when no single change fits), 'sub-region'),
        ``peak_bytes``, ``fits``
        (within the available memory with the planner's headroom), ``option`` (what
        to write on the command line, or None) and ``text`` (one line in words).  Only
        the changes that apply: no 'dtype' for float32, no 'psf' for a PSF the image's
        size.
    """
    ny, nx = (int(v) for v in image_shape)
    py, px = (int(v) for v in psf_shape)
    scales = sorted(float(s) for s in scales)
    cal = calibration
    out = []

    def peak(shape=(ny, nx), psf=(py, px), sc=scales, size=itemsize):
        return _peak(shape, psf, sc, size, scale_shape, cal)

    def most_scales(**kw):
        for k in range(len(scales) - 1, 0, -1):
            p = peak(sc=scales[:k], **kw)
            if _fits(p, available):
                return k, p
        return None

    kept = most_scales()
    if kept:
        k, p = kept
        sel = ",".join(f"{s:g}" for s in scales[:k])
        which = (f"the smallest {k} of {len(scales)} ({sel} px) need" if k > 1 else
                 f"the smallest alone ({sel} px) needs")
        out.append(_remedy("scales", p, available, f"--scales {sel}",
                           f"fewer scales: {which} about {_gib(p)}"))
    elif len(scales) > 1:
        p = peak(sc=scales[:1])
        out.append(_remedy("scales", p, available, f"--scales {scales[0]:g}",
                           f"fewer scales: even the smallest alone needs about {_gib(p)}"))
    if itemsize > 4:
        out.append(_remedy("dtype", peak(size=4), available, "--dtype float32",
                           f"float32 instead of float64: about {_gib(peak(size=4))}"))
    if (py, px) != (ny, nx):
        p = peak(psf=(ny, nx))
        out.append(_remedy("psf", p, available, None,
                           f"a PSF the image's size ({ny} x {nx}) instead of {py} x {px}: "
                           f"about {_gib(p)} (the residual is then exact only near each "
                           "component)"))
    if len(out) > 1 and not any(r["fits"] for r in out):
        both = {"size": 4, "psf": (ny, nx)}
        p = peak(**both)
        k = len(scales) if _fits(p, available) else None
        if k is None:
            kept = most_scales(**both)
            k, p = kept if kept else (None, None)
        if k:
            sel = ",".join(f"{s:g}" for s in scales[:k])
            done = [w for w, on in (("float32", itemsize > 4), ("a PSF the image's size",
                                                                 (py, px) != (ny, nx))) if on]
            out.append(_remedy("together", p, available, None,
                               " and ".join(done) + f" together, with scales {sel} px: about "
                               f"{_gib(p)}"))
    n = _largest_region(ny, nx, py, px, peak, available)
    if n:
        ry, rx = -(-n * py // ny), -(-n * px // nx)
        p = peak(shape=(n, n), psf=(ry, rx))
        out.append(_remedy("sub-region", p, available, None,
                           f"a sub-region of at most {n} x {n} pixels cut around the "
                           f"emission (its PSF {ry} x {rx}), with these scales: about "
                           f"{_gib(p)}"))
    return out


def _largest_region(ny, nx, py, px, peak, available):
    """Largest square side that fits (rounded down to a multiple of 16 from 64 up), the
    PSF keeping its ratio to the image; None when not even 16 x 16 fits."""
    def ok(n):
        return _fits(peak(shape=(n, n), psf=(-(-n * py // ny), -(-n * px // nx))), available)
    lo, hi = _SMALLEST_REGION, min(ny, nx) - 1
    while lo <= hi and peak(shape=(lo, lo), psf=(-(-lo * py // ny), -(-lo * px // nx))) is None:
        lo *= 2                          # the scales need a larger image than this
    if hi < lo or not ok(lo):
        return None
    while lo < hi:                       # the peak grows with the side: bisect
        mid = (lo + hi + 1) // 2
        lo, hi = (mid, hi) if ok(mid) else (lo, mid - 1)
    return lo - lo % 16 if lo >= 64 else lo


def bench_sizes_that_fit(available, *, calibration=None, up_to=None, validate=True):
    """The largest sizes of `BENCH_SIZE_LADDER` (up to three, ending at ``up_to`` or
    below) whose ``skyscale bench`` fits in ``available`` bytes; [] if none does."""
    ladder = [n for n in BENCH_SIZE_LADDER if up_to is None or n <= up_to] or \
        [BENCH_SIZE_LADDER[0]]
    for top in reversed(range(len(ladder))):
        sizes = [n for n in (ladder[top] // 4, ladder[top] // 2, ladder[top]) if n >= 256]
        sizes = sizes[-3:]
        peak, _ = sweep_memory(sizes, validate=validate, calibration=calibration)
        if _fits(peak, available):
            return sizes
    return []


def bench_advice(image_shape, calibrated_side, available, calibration=None):
    """One sentence: the ``skyscale bench --sizes`` that fits and reaches closest to the
    image, or why none closer than the calibration can be measured here."""
    side = max(int(v) for v in image_shape)
    if available is None:
        sizes = [n for n in BENCH_SIZE_LADDER if n <= side][-3:] or [BENCH_SIZE_LADDER[0]]
        return (f"run skyscale bench --sizes {','.join(map(str, sizes))} for a closer figure "
                "(memory available unknown: not checked)")
    sizes = bench_sizes_that_fit(available, calibration=calibration, up_to=side)
    if sizes and sizes[-1] > calibrated_side:
        peak, _ = sweep_memory(sizes, calibration=calibration)
        return (f"for a closer figure run skyscale bench --sizes {','.join(map(str, sizes))} "
                f"(the largest sweep that fits here: about {_gib(peak)} of "
                f"{_gib(available)})")
    biggest = sizes[-1] if sizes else None
    return ("a bench at larger sizes does not fit in the "
            f"{_gib(available)} available" + (f" (it reaches {biggest} px)" if biggest else "")
            + "; run skyscale bench on a machine with more memory for a closer figure")


def check_bench_fits(sizes, available, *, validate=True, calibration=None, label="--sizes"):
    """Refuse a ``skyscale bench`` whose largest step will not fit, naming sizes that do."""
    if available is None:
        return
    peak, (n, scales) = sweep_memory(sizes, validate=validate, calibration=calibration)
    if _fits(peak, available):
        return
    ok = bench_sizes_that_fit(available, calibration=calibration, up_to=max(sizes),
                              validate=validate)
    fix = (f"give --sizes {','.join(map(str, ok))} (the largest sweep that fits)" if ok else
           "no sweep fits here; free memory")
    raise InputError(f"{label} {','.join(map(str, sizes))}: the sweep's largest step ({n} x "
                     f"{n} px, scales {','.join(f'{s:g}' for s in scales)}, PSF twice the "
                     f"size) needs about {_gib(peak)} but {_gib(available)} is available; "
                     + fix)
