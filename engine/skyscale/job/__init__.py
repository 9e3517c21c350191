"""The file-level job: FITS in, deconvolution, every output out.

`files.run_files` is the one library function the command line and cubes call (and a
pipeline that holds FITS files may call): it reads the options as users write them
(`options`), checks everything it can before any work (`preflight`), deconvolves,
restores and writes the model, residual, restored image, component table, report and
figures.  It sits above `core`, `masks`, `advisor`, `cost` and `io` and below `cube`,
`visibility` and `cli`.
"""

from skyscale._exports import lazy_exports

__all__, __getattr__, __dir__ = lazy_exports(__name__, {
    "files": ["OUTPUT_NAMES", "run_files", "run_images", "merge_params"],
    "options": ["RUN_DEFAULTS", "RUN_OPTION_KINDS", "coerce_params", "load_config"],
})
