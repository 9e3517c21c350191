"""skyscale: multi-scale CLEAN deconvolution for radio interferometric images.

The public API is re-exported here; see the README for worked examples.
"""

import logging as _logging
from importlib.metadata import PackageNotFoundError, version as _version

from .cycles import deconvolve, run_cycles
from .minor import Engine, MinorCycleResult
from .noise import robust_noise
from .operators import FunctionOperator, ImagePlaneOperator, ResidualOperator
from .result import COMPONENT_DTYPE, STOP_REASONS, CycleRecord, DeconvolutionResult
from .scales import SCALE_SHAPES, ScaleSet, scale_kernel, size_penalty_weights

_logging.getLogger(__name__).addHandler(_logging.NullHandler())

try:
    __version__ = _version("skyscale")
except PackageNotFoundError:  # running from a source tree
    __version__ = "0.1.0+source"

__all__ = [
    "__version__",
    "deconvolve", "run_cycles", "Engine", "MinorCycleResult",
    "ImagePlaneOperator", "FunctionOperator", "ResidualOperator",
    "DeconvolutionResult", "CycleRecord", "COMPONENT_DTYPE", "STOP_REASONS",
    "ScaleSet", "SCALE_SHAPES", "scale_kernel", "size_penalty_weights",
    "robust_noise",
]
