"""What ``skyscale bench`` runs, and the memory it will need, known before it runs.

`sweep_shapes` lists every ``(size, scales)`` a sweep of some sizes runs and
`sweep_memory` predicts its peak, so that the planner's remedies
(`skyscale.cost.remedies`) and ``skyscale bench`` can refuse or propose sizes without
importing the engine.  `skyscale.cost.sweep` runs them.
"""

from skyscale.core.calibration import load_calibration
from skyscale.core.grids import run_geometry
from skyscale.core.memory import predict_memory
from skyscale.core.scales import ScaleSet

__all__ = ["SCALE_SETS", "DEFAULT_SIZES", "FULL_LADDER_PIXELS", "VALIDATION_RUNS",
           "scale_radii", "sets_for", "calibration_runs", "sweep_shapes", "sweep_memory"]

#: Scale sets swept at every size (the doubling ladder from the delta scale).
SCALE_SETS = ((0,), (0, 4), (0, 4, 8, 16), (0, 4, 8, 16, 32, 64))
#: Image sizes swept by default (square images, PSF twice the size).
DEFAULT_SIZES = (512, 1024, 2048)
#: Largest image area at which every scale set is swept; above it the first and the
#: third only (memory and minutes on a shared machine).
FULL_LADDER_PIXELS = 1024 * 1024
#: Runs that check the planner on sizes and fields the sweep did not see:
#: ``(size, scales, seed)``.
VALIDATION_RUNS = ((768, (0, 4, 8, 16), 11), (1536, (0, 4, 8, 16, 32), 12),
                   (640, (0, 4, 8, 16, 32), 14))


def scale_radii(scales):
    """Support half-width of each scale kernel of ``scales`` (pixels)."""
    return ScaleSet(scales).support_radii


def sets_for(n, scale_sets):
    """The scale sets of ``scale_sets`` swept at size ``n``."""
    ok = [s for s in scale_sets if max(s) <= n // 4]
    if n * n > FULL_LADDER_PIXELS:
        ok = ok[::2]
    return ok


def calibration_runs(sizes):
    """The whole runs that calibrate the counts: ``[(size, scales), ...]``."""
    runs = [(sizes[0], (0, 4, 8)), (sizes[0], (0, 4, 8, 16)),
            (sizes[-1 if len(sizes) < 2 else 1], (0, 4, 8, 16))]
    return [(n, s) for n, s in runs if max(s) <= n // 4]


def sweep_shapes(sizes, *, validate=True):
    """Every ``(size, scales)`` the sweep of ``sizes`` runs (PSF twice the size, float32):
    the points, the calibration runs and, with ``validate``, `VALIDATION_RUNS`."""
    sizes = sorted({int(s) for s in sizes})
    todo = [(n, tuple(s)) for n in sizes for s in sets_for(n, SCALE_SETS)]
    todo += [(n, tuple(s)) for n, s in calibration_runs(sizes)]
    if validate:
        todo += [(n, tuple(s)) for n, s, _ in VALIDATION_RUNS]
    return todo


def sweep_memory(sizes, *, validate=True, calibration=None):
    """Predicted peak memory of ``skyscale bench --sizes`` (bytes) and its largest step.

    Returns
    -------
    peak : int
        The largest `skyscale.cost.predict_memory` peak of the steps of `sweep_shapes`.
    worst : (int, tuple)
        Its ``(size, scales)``.
    """
    cal = calibration or load_calibration()
    best = (0, None)
    for n, scales in sweep_shapes(sizes, validate=validate):
        g = run_geometry((n, n), (2 * n, 2 * n), scale_radii(scales))
        best = max(best, (predict_memory(g, cal)["peak"], (n, scales)),
                   key=lambda b: b[0])
    return best
