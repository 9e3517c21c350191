"""The algorithm.

Data flow: `scales` (scale kernels and the size penalty) and `psf` (checks and
measures) feed `precompute` (scale beams by FFT, `fft`); `engine.Engine` holds them and
runs the minor cycle (compiled `kernels`, per-scale `noise` and stop `levels`);
`driver.deconvolve` runs major cycles through a residual operator (`operators`) with
the stop rules (`stops`) and returns a `result.DeconvolutionResult`; `beam` fits the
restoring beam and restores.  `defaults` holds every option's default, `validate` is
the one place inputs are checked and `InputError` raised, `threads` sets thread counts
for a call.
"""

from skyscale._exports import lazy_exports

__all__, __getattr__, __dir__ = lazy_exports(__name__, {
    "driver": ["deconvolve", "run_cycles"],
    "engine": ["Engine", "MinorCycleResult"],
    "operators": ["ResidualOperator", "ImagePlaneOperator", "FunctionOperator"],
    "result": ["DeconvolutionResult", "CycleRecord", "COMPONENT_DTYPE"],
    "scales": ["ScaleSet", "SCALE_SHAPES", "scale_kernel", "size_penalty_weights"],
    "beam": ["Beam", "fit_beam", "beam_area", "beam_kernel", "restore"],
    "validate": ["InputError"],
    "defaults": ["CleanOptions", "DEFAULTS"],
    "stops": ["STOP_REASONS"],
})
