"""Old import paths of the flat layout (release 0.1), kept for one release.

``import skyscale.fitsio`` (and every other module of 0.1 that moved into a
subpackage) still works, gives a `DeprecationWarning` naming the new path, and returns
the new module itself, so monkeypatching and ``isinstance`` checks see one object.
Names that left the top-level ``skyscale`` namespace are served the same way by
`old_name`.  Both go in the next release.
"""

import importlib
import importlib.abc
import importlib.util
import sys
import warnings

__all__ = ["MOVED_MODULES", "MOVED_NAMES", "install", "old_name"]

#: Old module (under ``skyscale.``) -> its new home.
MOVED_MODULES = {
    "_atomic": "io.atomic", "_config": "core.kernels.config",
    "_threads": "core.threads", "_validate": "core.validate", "beam": "core.beam",
    "calibration": "cost.calibration", "cli_cost": "cli.cost_commands",
    "cluster": "cube.cluster", "console": "cli.console", "cubefits": "cube.fits",
    "cuberecord": "cube.record", "cubetasks": "cube.tasks", "cycles": "core.driver",
    "detect": "masks.detect", "extent": "advisor.extent", "fft": "core.fft",
    "fitsio": "io.fits", "job": "cli.job", "job_vis": "cli.job_visibilities",
    "kernels": "core.kernels", "kernels.scale_loop": "core.kernels.scale_loop",
    "kernels.stamp": "core.kernels.stamp", "levels": "core.levels",
    "mask_emission": "masks.emission", "mask_file": "masks.loading",
    "minor": "core.engine", "noise": "core.noise", "operators": "core.operators",
    "options": "cli.options", "planner": "cost.planner", "plots": "io.figures",
    "precompute": "core.precompute", "preflight": "cli.preflight", "psf": "core.psf",
    "regions": "masks.regions", "report": "io.report", "result": "core.result",
    "scale_rules": "advisor.rules", "scales": "core.scales", "sweep": "cost.sweep",
    "sweepfit": "cost.sweepfit", "uvweights": "visibility.weights",
    "visfile": "visibility.file",
}

#: Names that were in the top-level namespace of 0.1 -> the module that has them now.
MOVED_NAMES = {
    "mask_nonfinite": "core.validate",
    "run_cycles": "core.driver",
    "scale_kernel": "core.scales",
    "size_penalty_weights": "core.scales",
    "robust_noise": "core.noise",
    "fit_beam": "core.beam",
    "beam_area": "core.beam",
    "beam_kernel": "core.beam",
    "restore": "core.beam",
    "jy_per_pixel_to_jy_per_beam": "core.beam",
    "jy_per_beam_to_jy_per_pixel": "core.beam",
    "resolve_scales": "advisor.suggest",
    "measure_emission_extent": "advisor.suggest",
    "ScaleSuggestion": "advisor.suggest",
    "EmissionExtent": "advisor.suggest",
    "ScaleChoiceWarning": "advisor.suggest",
    "detect_emission": "masks.detect",
    "Detection": "masks.detect",
    "emission_mask": "masks",
    "load_mask": "masks",
    "regions_to_mask": "masks",
    "FitsImage": "io.fits",
    "cell_size_arcsec": "io.grid",
    "check_same_grid": "io.fits",
    "write_table_csv": "io.fits",
    "build_report": "io.report",
    "write_report": "io.report",
    "file_sha256": "io.report",
    "plot_convergence": "io.figures.convergence",
    "plot_panels": "io.figures.panels",
    "CubeResult": "cube.run",
    "VisibilityData": "visibility.file",
    "imaging_weights": "visibility.weights",
    "WEIGHTINGS": "visibility.weights",
    "run_visibilities": "cli.job_visibilities",
    "Plan": "cost.planner",
    "check_fits_memory": "cost.planner",
    "InsufficientMemoryError": "cost.planner",
    "max_affordable_scales": "cost.planner",
}


class _OldPathFinder(importlib.abc.MetaPathFinder, importlib.abc.Loader):
    """Serves ``skyscale.<old>`` as the module now at ``skyscale.<new>``."""

    def __init__(self):
        self._specs = {}

    def find_spec(self, fullname, path=None, target=None):
        if not fullname.startswith("skyscale."):
            return None
        new = MOVED_MODULES.get(fullname[len("skyscale."):])
        if new is None:
            return None
        return importlib.util.spec_from_loader(fullname, self, origin=f"skyscale.{new}")

    def create_module(self, spec):
        new = spec.origin
        warnings.warn(f"{spec.name} moved to {new}; import it from there "
                      "(the old path goes in the next release)", DeprecationWarning,
                      stacklevel=_caller_level())
        module = importlib.import_module(new)
        self._specs[new] = module.__spec__
        return module

    def exec_module(self, module):
        module.__spec__ = self._specs.get(module.__name__, module.__spec__)


def _caller_level():
    """Stack level of the first frame outside the import machinery."""
    frame, level = sys._getframe(1), 1
    while frame is not None and (frame.f_code.co_filename.startswith("<frozen")
                                 or frame.f_code.co_filename == __file__):
        frame, level = frame.f_back, level + 1
    return level


def install():
    """Put the old-path finder first on ``sys.meta_path`` (once).

    First, so that ``skyscale.kernels.stamp`` is served as the module already loaded
    at ``skyscale.core.kernels.stamp`` rather than found again under the old name.
    """
    if not any(isinstance(f, _OldPathFinder) for f in sys.meta_path):
        sys.meta_path.insert(0, _OldPathFinder())


def old_name(name):
    """A name that left ``skyscale``'s namespace, with a `DeprecationWarning`."""
    module = MOVED_NAMES.get(name)
    if module is None:
        raise AttributeError(f"module 'skyscale' has no attribute {name!r}")
    warnings.warn(f"skyscale.{name} moved to skyscale.{module}.{name}; import it from "
                  "there (the old name goes in the next release)", DeprecationWarning,
                  stacklevel=3)
    return getattr(importlib.import_module(f"skyscale.{module}"), name)
