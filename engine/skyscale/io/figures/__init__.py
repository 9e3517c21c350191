"""The figures of a run: `panels.plot_panels` (dirty, model, residual, restored) and
`convergence.plot_convergence` (residual and per-scale flux against components), on the
helpers they share (`common`).
"""

from skyscale._exports import lazy_exports

__all__, __getattr__, __dir__ = lazy_exports(__name__, {
    "panels": ["PANELS_SIZE_PX", "plot_panels"],
    "convergence": ["CONVERGENCE_SIZE_PX", "plot_convergence"],
    "common": ["DPI"],
})
