"""The algorithm's options and their defaults: one home for every default value.

`CleanOptions` names every option of a deconvolution with its default, made from the
option table (`skyscale.core.option_table`); `DEFAULTS` is the instance the Python API
(`skyscale.deconvolve`, `skyscale.Engine`, the planner) and the report take their
defaults from, and the command line and its TOML files read the same table
(`skyscale.job.options.RUN_DEFAULTS`), so they cannot drift apart.  The command line
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

from skyscale.core.option_table import OPTION, algorithm_options

__all__ = ["CleanOptions", "DEFAULTS", "RUN_NOISE_THRESHOLD", "RUN_SCALES"]


def _replace(self, **changes):
    """A copy with ``changes`` (option names as keywords)."""
    return dataclasses.replace(self, **changes)


def _as_dict(self):
    """``{option: value}``, JSON-ready (scales as a list)."""
    d = dataclasses.asdict(self)
    d["scales"] = [float(s) for s in self.scales]
    return d


#: Every option of a multi-scale CLEAN run with its default: a frozen dataclass made
#: from the algorithm's rows of `skyscale.core.option_table.OPTIONS`.  Pass them on as
#: keywords: ``skyscale.deconvolve(dirty, psf, **opts.as_dict())``.
CleanOptions = dataclasses.make_dataclass(
    "CleanOptions",
    [(o.name, type(o.default) if o.default is not None else object,
      dataclasses.field(default=o.default, metadata={"help": o.help}))
     for o in algorithm_options()],
    namespace={"replace": _replace, "as_dict": _as_dict,
               "__doc__": "Every option of a multi-scale CLEAN run, with its default.\n\n"
                          "Fields (`skyscale.core.option_table.OPTIONS`): "
                          + "; ".join(f"``{o.name}`` ({o.default!r}): {o.help}"
                                      for o in algorithm_options()) + "."},
    frozen=True)
CleanOptions.__module__ = __name__


#: The defaults everything takes.
DEFAULTS = CleanOptions()

#: The command line's (and TOML files', `run_files`', cubes') default noise stop.
RUN_NOISE_THRESHOLD = OPTION["noise_threshold"].default_in_run

#: The command line's (and TOML files', `run_files`', cubes') default scales: the scale
#: advisor's set for the image (a fixed set suits few images; CHANGELOG, issue 19).
RUN_SCALES = OPTION["scales"].default_in_run
