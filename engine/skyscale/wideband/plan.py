"""`plan_wideband`: what a multi-term (Taylor) run will cost, before it starts.

Memory is `skyscale.wideband.memory.wideband_memory`'s account (the ``2 n - 1`` spectral
PSFs times the scales' cross-term beams, the Taylor residuals and their smoothings,
the channels' residuals).  Time is counted from the transforms the wideband driver does,
timed with the calibration's FFT law (`skyscale.cost.model.fft_seconds`), and the joint
loop from the single-term loop's cost (`skyscale.cost.model.loop_seconds`) times ``n^2``
(the joint scan's products per pixel).  The counts (sub-loops, components, major
cycles) are the single-term planner's (`skyscale.cost.planner.plan_run`) unless given.

References
----------
.. [1] Rau, U. & Cornwell, T. J. 2011, A&A 532, A71.
"""

from skyscale.core.scales import ScaleSet
from skyscale.core.grids import fft_grid as _grid
from skyscale.cost.model import fft_seconds
from skyscale.cost.planner import plan_run
from skyscale.wideband.memory import wideband_memory

__all__ = ["plan_wideband"]


def plan_wideband(image_shape, psf_shape, nchan, terms, scales, *, threads=1, dtype=None,
                  box_shape=None, calibration=None, **known):
    """Predicted seconds and peak bytes of `skyscale.deconvolve_wideband`.

    Parameters
    ----------
    image_shape, psf_shape : (int, int)
        One channel's image and PSF.
    nchan : int
        Channels.
    terms : {1, 2, 3}
        Taylor terms; 1 is the single-term plan of the band-averaged image.
    scales : sequence of float
        Scale diameters, pixels.
    threads : int
    dtype : {float32, float64}
    box_shape : (int, int), optional
        The mask's box grown by the largest scale's radius (the beams' extent).
    calibration : dict or path, optional
    **known
        Counts of `plan_run` (``components``, ``rounds``, ``major_cycles``, ...), or
        ``dynamic_range``, ``max_components``.

    Returns
    -------
    dict
        ``seconds`` (by step and ``total``), ``memory`` (bytes by item and ``total``),
        ``counts`` and ``assumptions`` (sentences), and ``single``: the single-term
        `Plan` the counts came from.
    """
    single = plan_run(tuple(image_shape), tuple(psf_shape), scales, threads=threads,
                      dtype=dtype, calibration=calibration, box_shape=box_shape,
                      fresh_process=False, **known)
    if terms == 1:
        return {"seconds": {"total": single.total_seconds},
                "memory": {"total": single.memory_bytes}, "counts": single.counts,
                "assumptions": list(single.messages), "single": single}
    from skyscale.core.calibration import load_calibration
    cal = calibration if isinstance(calibration, dict) else load_calibration(calibration)
    radii = ScaleSet(scales, image_shape=tuple(image_shape)).support_radii
    n, moments = int(terms), 2 * int(terms) - 1
    n_finite = sum(1 for r in radii if r > 0)
    rmax = max(radii)
    conv = tuple(_grid(s, p // 2, p - 1 - p // 2) for s, p in zip(image_shape, psf_shape))
    smooth = tuple(_grid(s, rmax, rmax) for s in image_shape)
    counts = dict(single.counts)
    rounds, cycles = int(counts["rounds"]), int(counts["major_cycles"])
    # each update: n forward and n inverse transforms of the increments, then every term
    # smoothed by every finite scale (one forward, n_finite inverses per term)
    update = [(conv, 2 * n), (smooth, n * (1 + n_finite))]
    seconds = {
        "precompute": fft_seconds([(conv, 2 * moments), (smooth, n_finite)], cal, threads),
        "beams": single.beams_seconds * moments,
        "updates": rounds * fft_seconds(update, cal, threads),
        "loop": single.loop_seconds * n * n,
        "major": (cycles + 1) * fft_seconds(update, cal, threads),
        "channels": fft_seconds([(conv, 3 * int(nchan))], cal, threads),
    }
    seconds["total"] = sum(seconds.values())
    memory = wideband_memory(tuple(image_shape), tuple(psf_shape), int(nchan), n, radii,
                             box_shape=box_shape,
                             itemsize=4 if single.dtype == "float32" else 8)
    # every wideband sub-loop is an FFT update: the single-term split does not apply
    assumptions = [m for m in single.messages if not m.startswith("fft updates")] + [
        "sub-loops, components and major cycles as for one term (the benchmark field took "
        "about twice the sub-loops with two terms)",
        f"the joint loop at {n * n} times the single-term loop's cost",
    ]
    return {"seconds": seconds, "memory": memory, "counts": counts,
            "assumptions": assumptions, "single": single}
