"""skyscale: multi-scale CLEAN deconvolution for radio interferometric images.

The top level holds the algorithm, its options and result types, and a few entry
points; everything else is imported from its subpackage, whose folders follow the data
flow:

- `skyscale.core`: scales, PSF checks, precompute, the `Engine` and its minor cycle,
  the driver `deconvolve`, residual operators, stop reasons, defaults, result types;
- `skyscale.io`: FITS, the component table, the JSON report, figures, atomic writes;
- `skyscale.masks` and `skyscale.advisor`: masks (regions, FITS, the emission mask)
  and suggesting and checking scale sets;
- `skyscale.cost`: the cost model, the planner, the sweep and its calibration;
- `skyscale.job`: the file-level job (FITS in, outputs out), `run_files`;
- `skyscale.cube` and `skyscale.visibility`: cubes on Dask distributed, and major
  cycles against the visibilities;
- `skyscale.wideband`: multi-term (Taylor) multi-scale deconvolution of many channels
  and spectral-index maps;
- `skyscale.cli`: the command line.

Importing skyscale loads nothing of it and changes nothing in the environment: each
name is imported from its module when first used.  See the README for worked examples.
"""

import importlib as _importlib
import logging as _logging
from importlib.metadata import PackageNotFoundError as _PackageNotFoundError
from importlib.metadata import version as _version

from skyscale._exports import lazy_exports as _lazy_exports

_logging.getLogger(__name__).addHandler(_logging.NullHandler())

try:
    __version__ = _version("skyscale")
except _PackageNotFoundError:  # running from a source tree
    __version__ = "unknown"

_names, _name_getattr, _name_dir = _lazy_exports(__name__, {
    # the algorithm, its options and results
    "core.driver": ["deconvolve"],
    "core.engine": ["Engine", "MinorCycleResult"],
    "core.defaults": ["CleanOptions", "DEFAULTS"],
    "core.scales": ["ScaleSet", "SCALE_SHAPES"],
    "masks.emission": ["EmissionMask"],
    "core.beam": ["Beam"],
    "core.validate": ["InputError"],
    "core.result": ["DeconvolutionResult", "CycleRecord", "COMPONENT_DTYPE"],
    "core.stops": ["STOP_REASONS"],
    # residual operators (a pipeline's own major cycles)
    "core.operators": ["ResidualOperator", "ImagePlaneOperator", "FunctionOperator"],
    "visibility.operator": ["VisibilityOperator"],
    # entry points
    "io.fits": ["read_image", "write_image"],
    "cost.planner": ["plan_run"],
    "advisor.suggest": ["suggest_scales", "check_scales"],
    "job.files": ["run_files"],
    "cube.run": ["deconvolve_cube"],
    "visibility.file": ["read_visibilities", "write_visibilities"],
    # wideband continuum: multi-term (Taylor) deconvolution of many channels
    "wideband.driver": ["deconvolve_wideband"],
    "wideband.result": ["WidebandResult"],
})
__all__ = ["__version__", *_names]

_SUBPACKAGES = ("core", "io", "masks", "advisor", "cost", "job", "cube", "visibility",
                "wideband", "cli")


def __getattr__(name):
    """A name of `__all__` or a subpackage (``skyscale.masks``), imported on first use."""
    if name in _SUBPACKAGES:
        return _importlib.import_module(f"{__name__}.{name}")
    return _name_getattr(name)


def __dir__():
    return sorted(set(_name_dir()) | set(_SUBPACKAGES) | {"__version__"})
