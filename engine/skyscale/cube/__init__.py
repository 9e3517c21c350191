"""Spectral-line cubes, deconvolved plane by plane on Dask distributed.

`run.deconvolve_cube` drives a cube; `tasks` is what a worker runs for one plane,
`fits` streams planes in and out of FITS cubes, `record` keeps the record of finished
planes for resuming, `cluster` starts the local cluster.
"""

from skyscale._exports import lazy_exports

__all__, __getattr__, __dir__ = lazy_exports(__name__, {
    "run": ["CUBE_OUTPUTS", "CubeResult", "deconvolve_cube"],
})
