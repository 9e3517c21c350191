"""Major cycles against the visibilities.

`operator.VisibilityOperator` computes the residual image from the data with a
gridding library; `weights` makes the imaging weights, `file` reads and writes
skyscale's visibility file; `run` is the file-level job from a visibility file;
`channels` makes one operator per channel for wideband runs.
"""

from skyscale._exports import lazy_exports

__all__, __getattr__, __dir__ = lazy_exports(__name__, {
    "operator": ["VisibilityOperator", "check_visibilities", "largest_cell_arcsec",
                 "DEFAULT_EPSILON", "MAX_BASELINE_M"],
    "weights": ["WEIGHTINGS", "imaging_weights"],
    "file": ["VisibilityData", "read_visibilities", "write_visibilities"],
    "run": ["run_visibilities"],
    "channels": ["channel_operators", "channel_operators_from_file", "wideband_inputs"],
})
