"""skyscale: multi-scale CLEAN deconvolution for radio interferometric images.

The public API is re-exported here; see the README for worked examples.
"""

import logging as _logging

# OpenMP's idle spin is set before any kernel runs (see skyscale._threads).
from ._threads import set_openmp_spin_default as _set_openmp_spin_default

_set_openmp_spin_default()
from importlib.metadata import PackageNotFoundError, version as _version

from ._validate import InputError, mask_nonfinite
from .advisor import (EmissionExtent, ScaleChoiceWarning, ScaleSuggestion, check_scales,
                      measure_emission_extent, resolve_scales, suggest_scales)
from .beam import (Beam, beam_area, beam_kernel, fit_beam, jy_per_beam_to_jy_per_pixel,
                   jy_per_pixel_to_jy_per_beam, restore)
from .cycles import deconvolve, run_cycles
from .defaults import DEFAULTS, CleanOptions
from .detect import Detection, detect_emission
from .planner import (InsufficientMemoryError, Plan, check_fits_memory, max_affordable_scales,
                      plan_run)
from .cube import CubeResult, deconvolve_cube
from .fitsio import (FitsImage, cell_size_arcsec, check_same_grid, read_image, write_image,
                     write_table_csv)
from .job import run_files
from .job_vis import run_visibilities
from .masks import EmissionMask, emission_mask, load_mask, regions_to_mask
from .minor import Engine, MinorCycleResult
from .noise import robust_noise
from .plots import plot_convergence, plot_panels
from .report import build_report, file_sha256, write_report
from .operators import FunctionOperator, ImagePlaneOperator, ResidualOperator
from .result import COMPONENT_DTYPE, STOP_REASONS, CycleRecord, DeconvolutionResult
from .scales import SCALE_SHAPES, ScaleSet, scale_kernel, size_penalty_weights
from .uvweights import WEIGHTINGS, imaging_weights
from .visfile import VisibilityData, read_visibilities, write_visibilities
from .visibility import VisibilityOperator

_logging.getLogger(__name__).addHandler(_logging.NullHandler())

try:
    __version__ = _version("skyscale")
except PackageNotFoundError:  # running from a source tree
    __version__ = "unknown"

__all__ = [
    "__version__", "InputError", "mask_nonfinite",
    "deconvolve", "run_cycles", "CleanOptions", "DEFAULTS", "Engine", "MinorCycleResult", "deconvolve_cube", "CubeResult",
    "ImagePlaneOperator", "FunctionOperator", "ResidualOperator",
    "DeconvolutionResult", "CycleRecord", "COMPONENT_DTYPE", "STOP_REASONS",
    "ScaleSet", "SCALE_SHAPES", "scale_kernel", "size_penalty_weights",
    "robust_noise",
    "suggest_scales", "check_scales", "resolve_scales", "measure_emission_extent",
    "ScaleSuggestion", "EmissionExtent", "ScaleChoiceWarning", "detect_emission", "Detection",
    "Beam", "fit_beam", "beam_area", "beam_kernel", "restore", "jy_per_pixel_to_jy_per_beam",
    "jy_per_beam_to_jy_per_pixel",
    "FitsImage", "read_image", "write_image", "cell_size_arcsec", "check_same_grid",
    "write_table_csv", "run_files",
    "EmissionMask", "emission_mask", "load_mask", "regions_to_mask",
    "build_report", "write_report", "file_sha256", "plot_convergence", "plot_panels",
    "VisibilityOperator", "VisibilityData", "read_visibilities", "write_visibilities",
    "imaging_weights", "WEIGHTINGS", "run_visibilities",
    "plan_run", "Plan", "check_fits_memory", "InsufficientMemoryError", "max_affordable_scales",
]
