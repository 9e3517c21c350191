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
- `skyscale.cube` and `skyscale.visibility`: cubes on Dask distributed, and major
  cycles against the visibilities;
- `skyscale.wideband`: multi-term (Taylor) multi-scale deconvolution of many channels
  and spectral-index maps;
- `skyscale.cli`: the command line and the file-level job runner.

Names and module paths of release 0.1 that moved still work for one release, with a
`DeprecationWarning` naming the new place (`skyscale._moved`).  See the README for
worked examples.
"""

import logging as _logging
from importlib.metadata import PackageNotFoundError, version as _version

# OpenMP's idle spin is set before any kernel runs (see skyscale.core.threads).
from skyscale.core.threads import set_openmp_spin_default as _set_openmp_spin_default

_set_openmp_spin_default()

from skyscale import _moved  # noqa: E402
from skyscale.advisor.suggest import check_scales, suggest_scales  # noqa: E402
from skyscale.cli.job import run_files  # noqa: E402
from skyscale.core.beam import Beam  # noqa: E402
from skyscale.core.defaults import DEFAULTS, CleanOptions  # noqa: E402
from skyscale.core.driver import deconvolve  # noqa: E402
from skyscale.core.engine import Engine, MinorCycleResult  # noqa: E402
from skyscale.core.operators import (FunctionOperator, ImagePlaneOperator,  # noqa: E402
                                     ResidualOperator)
from skyscale.core.result import (COMPONENT_DTYPE, CycleRecord, DeconvolutionResult)  #noqa: E402
from skyscale.core.scales import SCALE_SHAPES, ScaleSet  # noqa: E402
from skyscale.core.stops import STOP_REASONS  # noqa: E402
from skyscale.core.validate import InputError  # noqa: E402
from skyscale.cost.planner import plan_run  # noqa: E402
from skyscale.cube.run import deconvolve_cube  # noqa: E402
from skyscale.io.fits import read_image, write_image  # noqa: E402
from skyscale.masks.emission import EmissionMask  # noqa: E402
from skyscale.visibility.file import read_visibilities, write_visibilities  # noqa: E402
from skyscale.visibility.operator import VisibilityOperator  # noqa: E402
from skyscale.wideband.driver import deconvolve_wideband  # noqa: E402
from skyscale.wideband.result import WidebandResult  # noqa: E402

_moved.install()
_logging.getLogger(__name__).addHandler(_logging.NullHandler())

try:
    __version__ = _version("skyscale")
except PackageNotFoundError:  # running from a source tree
    __version__ = "unknown"

__all__ = [
    "__version__",
    # the algorithm, its options and results
    "deconvolve", "Engine", "MinorCycleResult", "CleanOptions", "DEFAULTS", "ScaleSet",
    "SCALE_SHAPES", "EmissionMask", "Beam", "InputError",
    "DeconvolutionResult", "CycleRecord", "COMPONENT_DTYPE", "STOP_REASONS",
    # residual operators (a pipeline's own major cycles)
    "ResidualOperator", "ImagePlaneOperator", "FunctionOperator", "VisibilityOperator",
    # entry points
    "read_image", "write_image", "plan_run", "suggest_scales", "check_scales", "run_files",
    "deconvolve_cube", "read_visibilities", "write_visibilities",
    # wideband continuum: multi-term (Taylor) deconvolution of many channels
    "deconvolve_wideband", "WidebandResult",
]


def __getattr__(name):          # names of 0.1 that moved to a subpackage
    return _moved.old_name(name)
