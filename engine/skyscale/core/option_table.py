"""Every option of a run, once: its name, default, kind, bounds and help.

`OPTIONS` is the table the rest is built from: the Python API's defaults
(`skyscale.core.defaults.CleanOptions`), the bounds every check uses
(`skyscale.core.validate.NUMBER_RULES`), how the command line and TOML files read each
option (`skyscale.job.options.RUN_OPTION_KINDS`), the file-level job's defaults
(`skyscale.job.options.RUN_DEFAULTS`), the command line's help and the planner's
defaults.  It imports nothing of skyscale, so every layer may read it.

Examples
--------
>>> from skyscale.core.option_table import OPTION
>>> OPTION["loop_gain"].default, OPTION["max_components"].bounds["low"]
(0.1, 1)
"""

from dataclasses import dataclass, field

__all__ = ["Option", "OPTIONS", "OPTION", "KINDS", "algorithm_options", "run_options",
           "number_rules"]

#: How a user's text is read (`skyscale.job.options.coerce_option`); a tuple of
#: words is a choice among them.
KINDS = ("number", "integer", "flux", "sigma", "bool", "text", "scales", "beam")

_SAME = object()


@dataclass(frozen=True)
class Option:
    """One option of a run.

    Attributes
    ----------
    name : str
        Its name in Python and TOML files (``--name-with-dashes`` on the command line).
    default : object
        The Python API's default (`skyscale.deconvolve`, `skyscale.core.defaults.DEFAULTS`).
    kind : str or tuple of str
        How the command line and TOML files read it (one of `KINDS`, or the choices).
    help : str
        One line for ``--help`` (the default is added in brackets).
    bounds : dict
        Keywords of `skyscale.core.validate.check_number` (``low``, ``high``,
        ``low_open``, ``high_open``, ``integer``, ``allow_none``) for a number; empty
        for anything else.
    hint : str
        The fix a refusal of a number out of bounds suggests.
    algorithm : bool
        An option of the algorithm (a field of `CleanOptions`).
    run : bool
        Settable in a file-level run (command line, TOML file, ``run_files``, cubes).
    run_default : object
        The file-level run's default where it differs from ``default``.
    """

    name: str
    default: object
    kind: object
    help: str
    bounds: dict = field(default_factory=dict)
    hint: str = ""
    algorithm: bool = False
    run: bool = True
    run_default: object = _SAME

    @property
    def default_in_run(self):
        """The file-level run's default."""
        return self.default if self.run_default is _SAME else self.run_default


#: Every option, in the order the command line and the report list them.
OPTIONS = (
    Option("scales", (0.0, 4.0, 8.0, 16.0), "scales",
           "scale diameters, 0 = delta, separated by commas or spaces (0,4,16), in pixels "
           "or with a unit (0,8arcsec,16arcsec); 'auto' asks the scale advisor",
           algorithm=True, run_default="auto"),
    Option("scale_unit", "pixel", ("pixel", "arcsec"),
           "unit of --scales: pixel, or arcsec through the WCS"),
    Option("scale_shape", "paraboloid", ("paraboloid", "gaussian"),
           "scale kernel shape: paraboloid or gaussian", algorithm=True),
    Option("loop_gain", 0.1, "number", "fraction of a component taken per step, in (0, 1]",
           dict(low=0.0, high=1.0, low_open=True), "0.1 is the usual choice", algorithm=True),
    Option("threshold", 0.0, "flux",
           "stop at this peak residual, Jy/beam; a unit may be written (0.1mJy).  Given "
           "without --noise-threshold it is a fixed level and the noise stop is off; given "
           "with it, each scale stops at the larger of the two",
           dict(low=0.0), "a peak residual in Jy/beam (0 for none); for a multiple of the "
           "noise use the noise threshold", algorithm=True),
    Option("noise_threshold", None, "sigma",
           "stop each scale at this multiple of its own measured noise (robust, 1.4826 MAD, "
           "where there is no emission), e.g. 3 or 3sigma; 'off' for no noise stop",
           dict(low=0.0, low_open=True, allow_none=True),
           "a multiple of the robust noise such as 3, or off", algorithm=True,
           run_default=3.0),
    Option("max_components", 20000, "integer", "component budget, >= 1",
           dict(low=1, integer=True), "the most components the run may find, e.g. 20000",
           algorithm=True),
    Option("max_major_cycles", 20, "integer", "major-cycle budget, >= 1",
           dict(low=1, integer=True), "the most major cycles, e.g. 20", algorithm=True),
    Option("cycle_depth", 0.2, "number",
           "each minor cycle cleans to this fraction of its start peak",
           dict(low=0.0, high=1.0, high_open=True), "0.2 is the usual choice", algorithm=True),
    Option("size_penalty", 0.3, "number",
           "bias toward small scales, weight 1 - p s/s_max, p in [0, 1)",
           dict(low=0.0, high=1.0, high_open=True), "0.3 is the default", algorithm=True),
    Option("extended_depth", 0.25, "number",
           "inside a mask, finite scales stop at this fraction of the noise multiple, "
           "in (0, 1]",
           dict(low=0.0, high=1.0, low_open=True),
           "a fraction of the noise multiple, 0.25 is the default", algorithm=True),
    Option("scale_loop_depth", 0.5, "number",
           "a sub-loop works on the pixels above this fraction of its scale's peak, "
           "in [0, 1)",
           dict(low=0.0, high=1.0, high_open=True), "0.5 is the default", algorithm=True),
    Option("mask", None, "text", "FITS mask on the image grid, non-zero = may clean"),
    Option("mask_regions", None, "text", "regions where components may go"),
    Option("emission_mask", True, "bool", "renew an automatic mask at each major cycle"),
    Option("emission_mask_sigma", None, "sigma",
           "automatic-mask level, multiples of the robust noise",
           dict(low=0.0, low_open=True, allow_none=True),
           "a multiple of the robust noise such as 5"),
    Option("threads", None, "integer", "threads for kernels and FFTs",
           dict(low=1, integer=True, allow_none=True), "or leave it out for all cores"),
    Option("beam", None, "beam", "restoring beam MAJOR,MINOR,PA"),
    Option("plots", True, "bool", "write convergence.png and panels.png"),
    Option("overwrite", False, "bool", "replace existing outputs"),
    Option("nonfinite", "refuse", ("refuse", "mask"),
           "NaN/inf pixels in the dirty image: refuse, or mask (leave them out of "
           "cleaning, blank in the outputs)"),
    # the Python API only
    Option("cell_arcsec", None, "number", "the pixel size, arcsec",
           dict(low=0.0, low_open=True, allow_none=True), "the pixel size in arcsec",
           run=False),
    Option("psf_patch", None, "integer", "no longer used",
           dict(low=0, integer=True, allow_none=True),
           "a half-width in pixels, or leave it out for automatic", run=False),
)

#: The options by name.
OPTION = {o.name: o for o in OPTIONS}


def algorithm_options():
    """The options of the algorithm (the fields of `CleanOptions`), in table order."""
    return [o for o in OPTIONS if o.algorithm]


def run_options():
    """The options a file-level run takes (command line, TOML file), in table order."""
    return [o for o in OPTIONS if o.run]


def number_rules():
    """``{name: check_number keywords with the hint}`` for every option with bounds."""
    return {o.name: dict(o.bounds, hint=o.hint) for o in OPTIONS if o.bounds}
