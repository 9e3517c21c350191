"""Wideband continuum: multi-term (Taylor) multi-scale deconvolution of many channels.

Modules, one job each: `taylor` (channel weights, Taylor-weighted images and spectral
PSFs), `hessian` (each scale's Hessian and its inverse), `kernels` (the compiled joint
sub-loop), `joint_cycle` (the `WidebandEngine` and its minor cycle), `driver`
(`deconvolve_wideband`, major cycles from the channels), `spectral` (spectral index and
curvature maps), `result`, `memory` (the run's memory, predicted), `outputs` (files and
the figure).

References
----------
.. [1] Rau, U. & Cornwell, T. J. 2011, A&A 532, A71.
"""

from skyscale._exports import lazy_exports

__all__, __getattr__, __dir__ = lazy_exports(__name__, {
    "driver": ["deconvolve_wideband"],
    "joint_cycle": ["WidebandEngine", "WIDEBAND_COMPONENT_DTYPE"],
    "result": ["WidebandResult"],
    "spectral": ["spectral_maps"],
    "memory": ["wideband_memory"],
})
