"""Run options as users write them (command line, TOML file) turned into typed values.

One reader for both sources, so ``--loop-gain 0.1`` and ``loop_gain = "0.1"`` in a
configuration file mean the same, and a value that cannot be read gets one line naming
the option, where it came from, the value and the form expected.  Values that are
unambiguous are read as meant: booleans as text (``"false"``), numbers as text,
fluxes with units (``"0.1mJy"``), scales separated by spaces, angles with units.
"""

import re

from skyscale.core.option_table import run_options
from skyscale.core.validate import NUMBER_RULES, InputError, check_number

__all__ = ["RUN_OPTION_KINDS", "RUN_DEFAULTS", "OFF_WORDS", "parse_bool", "parse_number", "parse_flux", "parse_sigma",
           "parse_scales",
           "parse_beam", "coerce_option", "coerce_params", "option_label", "load_config"]

#: How each run option is read (from the option table, `skyscale.core.option_table`).
RUN_OPTION_KINDS = {o.name: o.kind for o in run_options()}

#: Every run parameter with its default (the keys a configuration file may hold), from
#: the option table (`skyscale.core.option_table`).  A run stops at
#: `skyscale.core.defaults.RUN_NOISE_THRESHOLD` times the noise unless told otherwise: a
#: ``threshold`` given without ``noise_threshold`` is a fixed level with no noise stop
#: (`skyscale.job.files.merge_params`), and ``noise_threshold = "off"`` turns the noise
#: stop off.  Scales are chosen for the image by the scale advisor (``"auto"``) and the
#: automatic mask is on (kept inside a user's mask): what a careful user would choose
#: (CHANGELOG, issue 19).
RUN_DEFAULTS = {o.name: o.default_in_run for o in run_options()}


#: Words that turn the noise stop off (``--noise-threshold off``, ``noise_threshold = "off"``).
OFF_WORDS = ("off", "none", "no", "false")

_TRUE = {"true", "yes", "on", "1"}
_FALSE = {"false", "no", "off", "0"}
_SEP = re.compile(r"[,;\s]+")
_ANGLE_UNITS = {"arcsec": 1.0, "asec": 1.0, '"': 1.0, "arcmin": 60.0, "amin": 60.0,
                "'": 60.0, "deg": 3600.0, "mas": 1e-3}
_PIXEL_UNITS = ("px", "pix", "pixel", "pixels")
_FLUX_UNITS = {"jy": 1.0, "mjy": 1e-3, "ujy": 1e-6, "\u00b5jy": 1e-6, "njy": 1e-9}
_NUMBER = r"[-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?|[-+]?(?:nan|inf)"
_VALUE_UNIT = re.compile(rf"^\s*({_NUMBER})\s*([^\d\s].*?)?\s*$", re.IGNORECASE)


def option_label(name, source=None):
    """How an option is named in messages: ``--loop-gain`` or ``loop_gain in run.toml``."""
    if source is None:
        return name
    if source == "cli":
        return "--" + name.replace("_", "-")
    return f"{name} in {source}"


def _fail(label, value, expected):
    raise InputError(f"{label} is {value!r}; {expected}")


def parse_bool(value, label):
    """True/False from a bool or from text such as "false", "yes", "0"."""
    if isinstance(value, bool):
        return value
    if isinstance(value, int) and value in (0, 1):
        return bool(value)
    if isinstance(value, str) and value.strip().lower() in _TRUE | _FALSE:
        return value.strip().lower() in _TRUE
    _fail(label, value, "give true or false")


def _split_value(text):
    m = _VALUE_UNIT.match(text)
    if not m:
        return None, None
    return float(m.group(1)), (m.group(2) or "").strip()


def parse_number(value, label, *, integer=False, hint=""):
    """A number from a number or its text; ``integer`` accepts 3.0 as 3."""
    if isinstance(value, str):
        number, unit = _split_value(value)
        if number is None or unit:
            _fail(label, value, f"give a {'whole ' if integer else ''}number{hint}")
        value = number
    if isinstance(value, bool):
        _fail(label, value, "give a number, not true/false")
    return value


def parse_flux(value, label):
    """A flux density in Jy/beam: a number, or a number with Jy, mJy, uJy (``/beam`` optional).

    A multiple of the noise (``"3sigma"``) is refused with a pointer to the noise threshold.
    """
    if not isinstance(value, str):
        return value
    number, unit = _split_value(value)
    if number is None:
        _fail(label, value, "give a flux density in Jy/beam such as 1e-4 or 0.1mJy")
    key = unit.lower().replace(" ", "")
    if key.endswith("/beam"):
        key = key[:-5]
    if key in ("", *_FLUX_UNITS):
        return number * _FLUX_UNITS.get(key, 1.0)
    if key in ("sigma", "s", "rms", "x", "noise"):
        where = "--noise-threshold" if label.startswith("--") else "noise_threshold"
        _fail(label, value, f"a multiple of the noise goes in the noise threshold: use "
                            f"{where} {number:g} (the threshold is a flux density in Jy/beam)")
    _fail(label, value, "give a flux density in Jy/beam such as 1e-4, 0.1mJy or 100uJy")


def parse_sigma(value, label, *, allow_off=False):
    """A multiple of the robust noise: a number, or a number followed by "sigma".

    With ``allow_off``, one of `OFF_WORDS` (or False) gives None: no noise stop.
    """
    if allow_off and (value is False or (isinstance(value, str)
                                         and value.strip().lower() in OFF_WORDS)):
        return None
    if not isinstance(value, str):
        return value
    number, unit = _split_value(value)
    if number is not None and unit.lower() in ("", "sigma", "x", "rms"):
        return number
    if number is not None and unit.lower().replace("/beam", "") in _FLUX_UNITS:
        where = "--threshold" if label.startswith("--") else "threshold"
        _fail(label, value, f"a flux density goes in the absolute threshold: use {where} "
                            f"{value.strip()} (this option is a multiple of the noise, e.g. 3)")
    _fail(label, value, "give a multiple of the robust noise such as 3 (or 3sigma)" +
          (", or off for no noise stop" if allow_off else ""))


def _angle_token(token, label, given):
    number, unit = _split_value(token)
    if number is None:
        _fail(label, given, "give numbers separated by commas, such as 0,4,16")
    u = unit.lower()
    if u in ("", *_PIXEL_UNITS):
        return number, ("pixel" if u else None)
    if u in _ANGLE_UNITS:
        return number * _ANGLE_UNITS[u], "arcsec"
    _fail(label, given, f"cannot read the unit {unit!r}; give pixels (4 or 4px) or an angle "
                        "(8arcsec, 0.5arcmin)")


def parse_scales(value, label):
    """Scale diameters from "0,4,8", "0 4 8", [0, 4, 8] or "0,8arcsec,16arcsec"; or "auto".

    Returns
    -------
    scales : list of float or "auto"
    unit : {"pixel", "arcsec", None}
        The unit written with the numbers (None when they were plain numbers).
    """
    if isinstance(value, str):
        if value.strip().lower() == "auto":
            return "auto", None
        tokens = [t for t in _SEP.split(value.strip()) if t]
    elif isinstance(value, (list, tuple)):
        tokens = list(value)
    else:
        tokens = [value]
    if not tokens:
        _fail(label, value, "give at least one diameter, such as 0,4,16, or auto")
    out, units = [], set()
    for tok in tokens:
        if isinstance(tok, bool):
            _fail(label, value, "give numbers such as 0,4,16")
        if isinstance(tok, (int, float)):
            out.append(float(tok))
            continue
        number, unit = _angle_token(str(tok), label, value)
        out.append(number)
        units.add(unit)
    units.discard(None)
    if len(units) > 1:
        _fail(label, value, "mixes pixels and angles; give every scale in one unit")
    return out, (units.pop() if units else None)


def parse_beam(value, label):
    """Restoring beam MAJOR,MINOR,PA: FWHMs in arcsec (or with an angle unit), PA in degrees.

    Returns
    -------
    [major_arcsec, minor_arcsec, pa_deg], units_given : list of float, bool
    """
    tokens = [t for t in _SEP.split(value.strip()) if t] if isinstance(value, str) else \
        list(value) if isinstance(value, (list, tuple)) else [value]
    if len(tokens) != 3:
        _fail(label, value, "give MAJOR,MINOR,PA: FWHMs in arcsec (or with a unit, e.g. "
                            "0.0012deg) and the position angle in degrees east of north")
    vals, given = [], False
    for i, tok in enumerate(tokens):
        number, unit = (float(tok), "") if isinstance(tok, (int, float)) and \
            not isinstance(tok, bool) else _split_value(str(tok))
        if number is None:
            _fail(label, value, "give three numbers MAJOR,MINOR,PA")
        u = unit.lower()
        if i < 2:
            if u and u not in _ANGLE_UNITS:
                _fail(label, value, f"cannot read the unit {unit!r} of the beam size; use "
                                    "arcsec, arcmin or deg")
            given = given or bool(u)
            vals.append(number * _ANGLE_UNITS.get(u, 1.0))
        else:
            if u not in ("", "deg"):
                _fail(label, value, "give the position angle in degrees")
            vals.append(number)
    if not vals[0] >= vals[1] > 0:
        _fail(label, value, "give MAJOR >= MINOR > 0 (FWHMs), then the position angle")
    return vals, given


def coerce_option(name, value, source=None):
    """Read one run option; return its typed value (None stays None)."""
    if name not in RUN_OPTION_KINDS:
        raise InputError(f"{option_label(name, source)} is not a run option; valid ones are "
                         f"{', '.join(sorted(RUN_OPTION_KINDS))}")
    if value is None:
        return None
    label = option_label(name, source)
    kind = RUN_OPTION_KINDS[name]
    if isinstance(kind, tuple):
        text = value.strip().lower() if isinstance(value, str) else value
        if text not in kind:
            _fail(label, value, f"valid values are {', '.join(kind)}")
        return text
    if kind == "bool":
        return parse_bool(value, label)
    if kind == "text":
        if name == "mask_regions" and isinstance(value, (list, tuple)) and \
                all(isinstance(v, str) for v in value):
            return "; ".join(value)                  # one region a line in a TOML list
        if not isinstance(value, str):
            _fail(label, value, "give text (a path or region list)")
        return value
    if kind == "scales":
        return parse_scales(value, label)[0]
    if kind == "beam":
        return parse_beam(value, label)[0]
    given = value
    if kind == "flux":
        value = parse_flux(value, label)
    elif kind == "sigma":
        value = parse_sigma(value, label, allow_off=name == "noise_threshold")
        if value is None:
            return None
    else:
        value = parse_number(value, label, integer=kind == "integer")
    rule = dict(NUMBER_RULES.get(name, {}))
    return check_number(value, label, given=given, **rule)


def coerce_params(params, sources=None):
    """Typed copy of the options a user gave; ``sources`` maps a key to where it came from.

    Scales written with a unit (``"0,8arcsec,16arcsec"``) also set ``scale_unit``; an
    explicit ``scale_unit`` that disagrees is refused.
    """
    sources = sources or {}
    out = {key: coerce_option(key, value, sources.get(key)) for key, value in params.items()}
    scales = params.get("scales")
    if scales is not None and out["scales"] != "auto":
        label = option_label("scales", sources.get("scales"))
        unit = parse_scales(scales, label)[1]
        if unit is not None:
            if out.get("scale_unit") not in (None, unit):
                raise InputError(f"{label} is {scales!r}, in {unit}, but scale_unit is "
                                 f"{out['scale_unit']!r}; drop one of the two")
            out["scale_unit"] = unit
    return out


def load_config(path):
    """The run options of a TOML file (top level or a ``[run]`` table), keys with ``_``.

    Raises
    ------
    InputError
        If the file is missing, not valid TOML (the message names the file and the
        line), or holds an unknown option.
    """
    try:
        import tomllib
    except ImportError:  # Python < 3.11
        import tomli as tomllib
    try:
        with open(path, "rb") as fh:
            data = tomllib.load(fh)
    except FileNotFoundError:
        raise InputError(f"--config {path} does not exist; check the path") from None
    except IsADirectoryError:
        raise InputError(f"--config {path} is a folder; give the TOML file") from None
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"--config {path} is not valid TOML: {exc}; fix that line "
                         "(strings need quotes, e.g. scale_unit = \"arcsec\")") from None
    except UnicodeDecodeError:
        raise InputError(f"--config {path} is not a text file; give a TOML file") from None
    table = data.get("run", data)
    if not isinstance(table, dict):
        raise InputError(f"--config {path}: [run] is not a table; put the options under "
                         "[run] or at the top level")
    table = {k.replace("-", "_"): v for k, v in table.items() if k != "run"}
    unknown = sorted(set(table) - set(RUN_OPTION_KINDS))
    if unknown:
        raise InputError(f"--config {path}: unknown options {unknown}; valid ones are "
                         f"{', '.join(sorted(RUN_OPTION_KINDS))}")
    return table
