"""The JSON run report: what was run, on what, with which software, and what happened.

`build_report` turns a `~skyscale.core.result.DeconvolutionResult` into a dict of plain
Python values (str, int, float, bool, None, list, dict) that `json` can write
without help; `write_report` writes it atomically.  Non-finite floats (NaN, inf)
become ``None`` so that the file is strict JSON that any reader accepts.

The report holds summaries, not images: per-cycle history, per-scale counts and
flux, final residual statistics and the restoring beam.  The component table and the
images belong in their own files (FITS).

Every figure carries its unit: in its key (``_px``, ``_arcsec``, ``_deg``, ``_jy``,
``_s``), beside it (``unit``) or, for the per-cycle history, in the report's ``units``.
A None (JSON null) means "not applicable" (no mask, no cell size); where a default
stood for a value (all cores, the emission mask's sigma) the value used is recorded.
"""

import dataclasses
import datetime
import enum
import hashlib
import importlib.metadata
import json
import logging
import math
import os
import pathlib
import platform
import sys
from collections.abc import Mapping

import numpy as np

from skyscale.io.atomic import atomic_write_bytes
from skyscale.core.beam import gaussian_area
from skyscale.core.noise import robust_noise
from skyscale.io.components import merge_components
from skyscale.io.report_records import (REPORT_UNITS, emission_mask_record, scales_record,
                                        timings_record)

__all__ = ["REPORT_SCHEMA_VERSION", "build_report", "file_sha256", "write_report", "beam_record",
           "machine_record", "software_record", "plain_json",
           "REPORT_UNITS"]

log = logging.getLogger(__name__)

#: Version of the report layout; raised whenever a key is renamed or removed.
#: 2: ``per_scale`` rows say ``scale_px`` and ``flux_jy`` (were ``scale``, ``flux``).
REPORT_SCHEMA_VERSION = 2

#: Distributions whose versions the report records (looked up, never imported).
_DEPENDENCIES = ("numpy", "numba", "scipy", "astropy", "pyfftw", "rich",
                 "matplotlib", "dask", "ducc0")

#: Read size for `file_sha256`.
_CHUNK_BYTES = 1 << 20


def plain_json(value):
    """Return ``value`` as plain JSON-ready Python (recursively).

    numpy scalars and arrays become Python numbers and lists, Quantities become
    ``{"value", "unit"}``, paths and enums become strings or their values,
    dataclasses and objects with ``as_dict()`` become dicts, and non-finite floats
    become None.  Anything else is recorded by its type name (never its ``repr``,
    which may hold a memory address).
    """
    if value is None or isinstance(value, (bool, str)):
        return value
    if isinstance(value, np.bool_):
        return bool(value)
    if isinstance(value, (int, np.integer)):
        return int(value)
    if isinstance(value, (float, np.floating)):
        value = float(value)
        return value if math.isfinite(value) else None
    if isinstance(value, (complex, np.complexfloating)):
        return {"real": plain_json(value.real), "imag": plain_json(value.imag)}
    if hasattr(value, "unit") and hasattr(value, "value") and hasattr(value, "to"):
        return {"value": plain_json(np.asarray(value.value)), "unit": str(value.unit)}
    if isinstance(value, np.ndarray):
        if value.dtype.names:
            return [{name: plain_json(row[name]) for name in value.dtype.names}
                    for row in value.ravel()]
        return plain_json(value.tolist())
    if isinstance(value, np.generic):
        return plain_json(value.item())
    if isinstance(value, Mapping):
        return {str(k): plain_json(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [plain_json(v) for v in value]
    if isinstance(value, (set, frozenset)):
        return sorted((plain_json(v) for v in value), key=repr)
    if isinstance(value, os.PathLike):
        return os.fspath(value)
    if isinstance(value, enum.Enum):
        return plain_json(value.value)
    if isinstance(value, (datetime.datetime, datetime.date)):
        return value.isoformat()
    if callable(getattr(value, "as_dict", None)):
        return plain_json(value.as_dict())
    if dataclasses.is_dataclass(value) and not isinstance(value, type):
        return plain_json(dataclasses.asdict(value))
    kind = value if hasattr(value, "__qualname__") else type(value)
    name = f"{getattr(kind, '__module__', '?')}.{kind.__qualname__}"
    log.debug("report: %s recorded by its name only", name)
    return f"<{name}>"


def _version(distribution):
    """Installed version of ``distribution``, or "not installed"."""
    try:
        return importlib.metadata.version(distribution)
    except importlib.metadata.PackageNotFoundError:
        return "not installed"


def software_record():
    """Versions of Python, skyscale and its dependencies, without importing them."""
    skyscale = _version("skyscale")
    versions = {"skyscale": "unknown" if skyscale == "not installed" else skyscale,
                "python": platform.python_version()}
    versions.update({name: _version(name) for name in _DEPENDENCIES})
    return versions


def machine_record(threads):
    """Platform, CPU counts and the thread count in use."""
    if threads is None and "numba" in sys.modules:      # only if already loaded
        try:
            threads = int(sys.modules["numba"].get_num_threads())
        except Exception:                                # noqa: BLE001 - report, not engine
            threads = None
    usable = getattr(os, "process_cpu_count", None)
    if usable is not None:
        usable = usable()
    elif hasattr(os, "sched_getaffinity"):
        usable = len(os.sched_getaffinity(0))
    return {"platform": platform.platform(), "machine": platform.machine(),
            "python_implementation": platform.python_implementation(),
            "cpu_count": os.cpu_count(), "cpu_count_usable": usable,
            "threads": threads}


def _threads_record(result, threads, parameters):
    """The threads in effect (from the result, else the caller's count) and the request."""
    requested = parameters.get("threads")
    out = {"requested": "all cores (not set)" if requested is None else plain_json(requested)}
    used = getattr(result, "threads", None)
    if isinstance(used, Mapping):
        out.update(plain_json(dict(used)))
    else:
        out["numba"] = threads if threads is not None else machine_record(None)["threads"]
        out["fft_backend"] = out["fft_threads"] = "not recorded"
    return out


def _check_result(result):
    needed = ("model", "residual", "components", "stop_reason", "history", "scales")
    missing = [name for name in needed if not hasattr(result, name)]
    if missing:
        raise TypeError(f"result is a {type(result).__name__} without "
                        f"{', '.join(missing)}; pass the DeconvolutionResult of a run")


def _check_cell(cell_arcsec):
    if cell_arcsec is None:
        return None
    if hasattr(cell_arcsec, "to_value"):                 # an astropy Quantity
        cell_arcsec = cell_arcsec.to_value("arcsec")
    try:
        cell = float(cell_arcsec)
    except (TypeError, ValueError):
        cell = float("nan")
    if not (math.isfinite(cell) and cell > 0):
        raise ValueError(f"cell_arcsec is {cell_arcsec!r}; pass the pixel size in "
                         "arcseconds as a positive finite number (or None)")
    return float(f"{cell:.12g}")   # 2.0, not the degrees' rounding 1.999999999999989


def _check_threads(threads):
    if threads is None:
        return None
    if isinstance(threads, (bool, np.bool_)) or not isinstance(threads, (int, np.integer)) \
            or threads < 1:
        raise ValueError(f"threads is {threads!r}; pass the number of threads used "
                         "as a positive integer (or None)")
    return int(threads)


def _check_inputs(inputs):
    if inputs is None:
        return {}
    if not isinstance(inputs, Mapping):
        raise TypeError(f"inputs is a {type(inputs).__name__}; pass a dict of name -> "
                        '{"path": ..., "shape": ..., "sha256": ...}')
    out = {}
    for name, info in inputs.items():
        if not isinstance(info, Mapping):
            raise TypeError(f"inputs[{name!r}] is {info!r}; pass a dict with keys "
                            '"path", "shape" and "sha256"')
        out[str(name)] = plain_json(dict(info))
    return out


def _per_scale(result, cell):
    """Per-scale counts and flux, including any scale found only in the table."""
    rows = [{"scale_px": row["scale"], "components": row["components"],
             "flux_jy": row["flux"], "listed": True} for row in result.per_scale()]
    comps = result.components
    listed = {np.float32(row["scale_px"]) for row in rows}
    for s in np.unique(comps["scale"]) if len(comps) else ():
        if np.float32(s) not in listed:                   # inconsistent, but report it
            sel = comps["scale"] == s
            rows.append({"scale_px": float(s), "components": int(sel.sum()),
                         "flux_jy": float(comps["flux"][sel].sum()), "listed": False})
    total = float(np.sum(comps["flux"])) if len(comps) else 0.0
    for row in rows:
        row["flux_fraction"] = row["flux_jy"] / total if total != 0.0 else None
        if cell is not None:
            row["scale_arcsec"] = row["scale_px"] * cell
    return rows


def _residual_stats(result):
    """Peak |residual|, rms and robust noise of the final residual."""
    residual = np.asarray(result.residual, dtype=np.float64)
    mask = getattr(result, "mask", None)
    region = "image"
    values = residual
    if mask is not None:
        mask = np.asarray(mask, dtype=bool)
        if mask.shape == residual.shape and mask.any():
            values, region = residual[mask], "mask"
    values = values[np.isfinite(values)]
    if values.size == 0:
        peak = rms = None
    else:
        peak = float(np.max(np.abs(values)))
        rms = float(np.sqrt(np.mean(values * values)))
    noise = robust_noise(residual, mask if region == "mask" else None)
    whole = residual[np.isfinite(residual)]
    where = (f"inside the mask ({int(mask.sum())} pixels)" if region == "mask"
             else "the whole image (no mask)")
    return {"peak_residual": peak, "rms_residual": rms, "region": region,
            "measured_in": where,
            "peak_residual_image": float(np.max(np.abs(whole))) if whole.size else None,
            "robust_noise": noise, "unit": "Jy/beam"}


def beam_record(beam, cell, source=None):
    """A restoring beam's FWHMs (pixels, and arcsec with a cell size), angle and area.

    ``pa_deg`` is measured from +y (north) towards -x (east), as `skyscale.core.beam.Beam`;
    ``source`` (optional text) says where the beam came from.
    """
    if beam is None:
        return None
    major, minor, pa = float(beam.major), float(beam.minor), float(beam.pa)
    out = {"major_px": major, "minor_px": minor, "pa_deg": pa,
           "pa_from": "+y (north) towards -x (east)",
           "area_px": gaussian_area(major, minor)}
    if cell is not None:
        out["major_arcsec"] = major * cell
        out["minor_arcsec"] = minor * cell
        out["area_arcsec2"] = out["area_px"] * cell * cell
    if source is not None:
        out["source"] = str(source)
    return out


def _scale_noise(result, cell):
    """Per-scale noise, stop level and final peak (Jy/beam), and where noise was measured."""
    noise = getattr(result, "scale_noise", None)
    if noise is None:
        return None
    active = set(getattr(result, "active_scales", None) or ())
    rows = [{"scale_px": float(s), "noise": float(n), "level": float(lv), "peak": float(p),
             "active": float(s) in active}
            for s, n, lv, p in zip(result.scales, noise, result.scale_levels,
                                   result.scale_peaks)]
    if cell is not None:
        for row in rows:
            row["scale_arcsec"] = row["scale_px"] * cell
    return {"unit": "Jy/beam", "per_scale": rows,
            "measured_where": plain_json(getattr(result, "noise_region", None))}


def build_report(result, *, inputs=None, parameters=None, cell_arcsec=None,
                 threads=None, extra=None, major_cycle=None, started=None, deconvolved=None,
                 finished=None):
    """Summarise a run as a JSON-ready dict.

    Parameters
    ----------
    result : DeconvolutionResult
        The run's result.
    inputs : dict, optional
        ``name -> {"path": str, "shape": (ny, nx), "sha256": str}`` for each input
        file (see `file_sha256`).
    parameters : dict, optional
        The merged run parameters; default ``result.parameters``.
    cell_arcsec : float or Quantity, optional
        Pixel size in arcseconds; adds angular scale sizes and beam widths.
    threads : int, optional
        Numba threads used, when ``result.threads`` does not say (a result of
        `skyscale.deconvolve` does); default the Numba thread count if Numba is loaded.
    extra : dict, optional
        Anything else the caller wants kept; stored under ``"extra"``.
    major_cycle : dict, optional
        Which residual operator ran the major cycles and how (for example
        ``VisibilityOperator.describe()``); stored under ``"major_cycle"``, which says
        ``{"operator": "not recorded"}`` when this is not given.
    started, deconvolved, finished : datetime, optional
        When the run started, when the deconvolution (restoring included) ended and
        when the outputs were written.  With ``started`` and ``finished``,
        ``timings_s`` gains ``total`` (and, with ``deconvolved``, ``other`` and
        ``outputs``) so that the timings add up to the run's time.

    Returns
    -------
    report : dict
        Plain Python values only.  Top-level keys: ``schema_version``, ``created_utc``,
        ``software``, ``machine``, ``threads``, ``inputs``, ``image``, ``scales``,
        ``parameters``, ``timings_s``, ``timings_about``, ``clock_utc``, ``history``,
        ``per_scale``, ``final``, ``stop``, ``scale_noise``, ``emission_mask``,
        ``beam``, ``warnings``, ``major_cycle``, ``units``, ``extra``.  ``final`` holds
        ``peak_residual`` and ``rms_residual`` (Jy/beam, inside the mask when there is
        one: ``region`` and ``measured_in`` say), ``peak_residual_image`` (the whole
        image), ``robust_noise``, ``model_flux`` (Jy), ``components`` and
        ``major_cycles``.  ``scales`` gives the scales in pixels and arcsec,
        ``threads`` the Numba and FFT threads in effect, ``emission_mask`` its
        detection level (sigma multiple and Jy/beam per scale).  In ``parameters``
        the scales are in pixels (``scale_unit`` says so; ``scales.requested_unit``
        keeps the unit they were given in), and ``threads`` and
        ``emission_mask_sigma``, when unset, hold the values in effect.

    Raises
    ------
    TypeError
        If ``result``, ``inputs`` or ``extra`` is of the wrong kind.
    ValueError
        If ``cell_arcsec`` or ``threads`` is not positive.

    Examples
    --------
    >>> report = build_report(result, cell_arcsec=1.5)      # doctest: +SKIP
    >>> write_report("run/report.json", report)              # doctest: +SKIP
    """
    _check_result(result)
    cell = _check_cell(cell_arcsec)
    threads = _check_threads(threads)
    inputs = _check_inputs(inputs)
    for name, value in (("extra", extra), ("major_cycle", major_cycle)):
        if value is not None and not isinstance(value, Mapping):
            raise TypeError(f"{name} is a {type(value).__name__}; pass a dict (or None)")
    if parameters is None:
        parameters = getattr(result, "parameters", None) or {}
    if not isinstance(parameters, Mapping):
        raise TypeError(f"parameters is a {type(parameters).__name__}; pass a dict "
                        "of parameter name -> value (or None)")

    model = np.asarray(result.model)
    params = plain_json(dict(parameters))
    thread_rec = _threads_record(result, threads, params)
    requested_unit = params.get("scale_unit")
    listed = params.get("scales")
    if "scale_unit" in params and isinstance(listed, list) and \
            len(listed) == len(result.scales) and \
            np.allclose(np.asarray(listed, dtype=float), np.asarray(result.scales, dtype=float)):
        params["scale_unit"] = "pixel"                   # the values listed are pixels
    if "threads" in params and params["threads"] is None and \
            isinstance(thread_rec.get("numba"), int):
        params["threads"] = thread_rec["numba"]
    em = emission_mask_record(result, cell)
    if params.get("emission_mask_sigma", 0) is None and em["used"]:
        params["emission_mask_sigma"] = em["sigma"]
    timings, timing_notes = timings_record(result, started, deconvolved, finished)
    machine = machine_record(thread_rec["numba"] if isinstance(thread_rec.get("numba"), int)
                             else threads)
    history = [plain_json(rec) for rec in result.history]
    final = _residual_stats(result)
    final.update(model_flux=float(np.sum(model, dtype=np.float64)),
                 model_flux_unit="Jy",
                 components=int(len(result.components)),
                 component_table_rows=int(merge_components(result.components).size),
                 major_cycles=sum(1 for rec in history if rec.get("cycle", 0) > 0))
    report = {
        "schema_version": REPORT_SCHEMA_VERSION,
        "created_utc": datetime.datetime.now(datetime.timezone.utc)
                               .isoformat(timespec="seconds"),
        "software": software_record(),
        "machine": machine,
        "threads": thread_rec,
        "inputs": inputs,
        "image": {"shape": list(model.shape), "dtype": str(model.dtype),
                  "cell_arcsec": cell},
        "scales": scales_record(result, cell, requested_unit),
        "parameters": params,
        "timings_s": plain_json(timings),
        "timings_about": timing_notes,
        "clock_utc": {name: t.isoformat() for name, t in (
            ("start", started), ("deconvolved", deconvolved), ("outputs_written", finished))
            if t is not None},
        "history": history,
        "per_scale": _per_scale(result, cell),
        "final": final,
        "stop": {"reason": str(result.stop_reason),
                 "description": str(getattr(result, "stop_description",
                                            result.stop_reason)),
                 "active_scales_px": plain_json(getattr(result, "active_scales", None)),
                 "rollbacks": int(getattr(result, "rollbacks", 0) or 0),
                 "sub_loops": int(getattr(result, "sub_loops", 0) or 0),
                 "rejected_sub_loops": int(getattr(result, "rejected_sub_loops", 0) or 0),
                 "fft_updates": int(getattr(result, "fft_updates", 0) or 0),
                 "direct_updates": int(getattr(result, "direct_updates", 0) or 0)},
        "scale_noise": _scale_noise(result, cell),
        "emission_mask": em,
        "beam": beam_record(getattr(result, "beam", None), cell,
                            source=None if "beam" not in params else
                            ("given by the user" if params["beam"] is not None
                             else "fitted to the PSF")),
        "warnings": [str(w) for w in (getattr(result, "warnings", None) or [])],
        "major_cycle": plain_json(dict(major_cycle)) if major_cycle is not None
        else {"operator": "not recorded"},
        "units": dict(REPORT_UNITS),
        "extra": plain_json(dict(extra)) if extra is not None else {},
    }
    log.debug("report built: %d components, %d history records",
              final["components"], len(history))
    return report


def file_sha256(path):
    """SHA-256 of a file's bytes, read in 1 MiB chunks, as a hex string.

    Parameters
    ----------
    path : str or os.PathLike

    Returns
    -------
    str
        64 lowercase hex digits.
    """
    path = pathlib.Path(path)
    if not path.is_file():
        raise FileNotFoundError(f"path {str(path)!r} is not a file; pass the path of "
                                "an existing input file")
    digest = hashlib.sha256()
    with open(path, "rb") as fh:
        for chunk in iter(lambda: fh.read(_CHUNK_BYTES), b""):
            digest.update(chunk)
    return digest.hexdigest()


def write_report(path, report, *, overwrite=False):
    """Write ``report`` as indented UTF-8 JSON, atomically.

    Parameters
    ----------
    path : str or os.PathLike
        Destination file.
    report : dict
        Usually from `build_report`; numpy values are converted as there.
    overwrite : bool
        Replace an existing file.  Default False: an existing file is refused.

    Returns
    -------
    pathlib.Path
        The path written.

    Raises
    ------
    FileExistsError
        If ``path`` exists and ``overwrite`` is False.
    """
    if not isinstance(report, Mapping):
        raise TypeError(f"report is a {type(report).__name__}; pass the dict from "
                        "build_report")
    text = json.dumps(plain_json(dict(report)), indent=2, allow_nan=False) + "\n"
    path = pathlib.Path(atomic_write_bytes(path, text.encode("utf-8"), overwrite=overwrite))
    log.info("report written to %s", path)
    return path
