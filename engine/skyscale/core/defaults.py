"""The algorithm's options and their defaults: one home for every default value.

`CleanOptions` names every option of a deconvolution with its default; `DEFAULTS` is
the instance the Python API (`skyscale.deconvolve`, `skyscale.Engine`, the planner),
the command line and its TOML files (`skyscale.job.files.RUN_DEFAULTS` is built from it) and
the report all take their defaults from, so they cannot drift apart.  The command line
differs in two stated places: it stops at `RUN_NOISE_THRESHOLD` times the noise unless
told otherwise, where the API's default is no noise stop, and it asks the scale advisor
for the image's scales (`RUN_SCALES`) where the API's default is a fixed set.

Examples
--------
>>> from skyscale.core.defaults import DEFAULTS
>>> DEFAULTS.loop_gain, DEFAULTS.max_components
(0.1, 20000)
>>> opts = DEFAULTS.replace(loop_gain=0.05)
>>> opts.as_dict()["loop_gain"]
0.05
"""

import dataclasses

__all__ = ["CleanOptions", "DEFAULTS", "RUN_NOISE_THRESHOLD", "RUN_SCALES"]


@dataclasses.dataclass(frozen=True)
class CleanOptions:
    """Every option of a multi-scale CLEAN run, with its default.

    Pass them on as keywords: ``skyscale.deconvolve(dirty, psf, **opts.as_dict())``.
    """

    #: Scale diameters in pixels (0 is the delta scale).
    scales: tuple = (0.0, 4.0, 8.0, 16.0)
    #: Scale kernel profile (`skyscale.core.scales.SCALE_SHAPES`).
    scale_shape: str = "paraboloid"
    #: Fraction of a component taken per step.
    loop_gain: float = 0.1
    #: Absolute stop level, Jy/beam.
    threshold: float = 0.0
    #: Stop at this multiple of each scale's own noise; None: no noise stop.
    noise_threshold: float | None = None
    #: Inside a mask, the largest scale stops at this fraction of the noise multiple.
    extended_depth: float = 0.25
    #: Component budget of the run.
    max_components: int = 20000
    #: Major-cycle budget of the run.
    max_major_cycles: int = 20
    #: Each minor cycle cleans to this fraction of its starting peak.
    cycle_depth: float = 0.2
    #: Bias toward small scales: weight ``1 - p s / s_max``.
    size_penalty: float = 0.3
    #: A sub-loop's active pixels are those above this fraction of its scale's peak.
    scale_loop_depth: float = 0.5

    def replace(self, **changes):
        """A copy with ``changes`` (option names as keywords)."""
        return dataclasses.replace(self, **changes)

    def as_dict(self):
        """``{option: value}``, JSON-ready (scales as a list)."""
        d = dataclasses.asdict(self)
        d["scales"] = [float(s) for s in self.scales]
        return d


#: The defaults everything takes.
DEFAULTS = CleanOptions()

#: The command line's (and TOML files', `run_files`', cubes') default noise stop.
RUN_NOISE_THRESHOLD = 3.0

#: The command line's (and TOML files', `run_files`', cubes') default scales: the scale
#: advisor's set for the image (a fixed set suits few images; CHANGELOG, issue 19).
RUN_SCALES = "auto"
