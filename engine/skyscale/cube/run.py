"""Many-channel cubes, plane by plane, on Dask distributed: `deconvolve_cube`.

Each plane is one task that deconvolves it with its own PSF plane exactly as
``skyscale run`` deconvolves an image: the same options (`skyscale.job.options.RUN_DEFAULTS`),
turned into `deconvolve` keywords by the same function.  What is decided once for
the whole cube:

- the scales: the user's set, fixed for every plane; with ``scales='auto'`` the
  advisor chooses them once, from the brightest plane, and every plane uses them;
- the restoring beam: a beam is fitted to every PSF plane (recorded in the report)
  and the restored cube uses one common beam, the largest fitted (by area) or the
  user's, so that planes are comparable;
- the mask (``mask``, ``mask_regions``): the same for every plane.

Planes stream: the client holds a few planes at a time, writes each finished plane
into the output cubes as it arrives and records it (`skyscale.cube.record`), so an
interrupted run started again with the same inputs and options resumes, checks the
finished planes' bytes and computes only the others.
"""

import datetime as _dt
import logging
import os
import time
from dataclasses import dataclass, field

import numpy as np

from skyscale.core.beam import fit_beam
from skyscale.cost.planner import plan_run
from skyscale.cube.cluster import cube_client
from skyscale.cube.fits import CubeOutput, check_psf_cube, open_cube
from skyscale.cube.record import RECORD_NAME, RunRecord
from skyscale.cube.tasks import finite_reason, stream_planes
from skyscale.io.fits import provenance_history
from skyscale.job.files import build_mask, merge_params, restoring_beam, scales_in_pixels
from skyscale.io.report import beam_record, machine_record, software_record, write_report

__all__ = ["CUBE_OUTPUTS", "CubeResult", "deconvolve_cube"]

logger = logging.getLogger(__name__)

#: File names inside the output folder.
CUBE_OUTPUTS = {"model": "model.fits", "residual": "residual.fits",
                "restored": "restored.fits", "report": "report.json"}
_UNFINISHED_REPORT = "report-unfinished.json"
_UNITS = {"model": "Jy/pixel", "residual": "Jy/beam", "restored": "Jy/beam"}


@dataclass
class CubeResult:
    """What a cube run did.

    Attributes
    ----------
    complete : bool
        Every plane is done or skipped; the outputs have their final names.
    written : dict
        Output kind -> path.
    report : dict
        The report as written.
    computed, reused, skipped, failed : list of int
        Planes computed in this call, taken from an earlier interrupted run, skipped
        (bad input, with the reason in the report) and failed (not written; a rerun
        tries them again).
    beams : list of Beam or None
        The beam fitted to each plane's PSF.
    common_beam : Beam
        The restoring beam of the restored cube.
    """

    complete: bool
    written: dict
    report: dict
    computed: list = field(default_factory=list)
    reused: list = field(default_factory=list)
    skipped: list = field(default_factory=list)
    failed: list = field(default_factory=list)
    beams: list = field(default_factory=list)
    common_beam: object = None


def _fit_beams(psf):
    """Fit each PSF plane (one fit when one PSF serves all); None and a reason on failure."""
    beams, reasons = [], []
    for i in range(psf.nplanes):
        plane = psf.read_plane(i)
        try:
            if not np.all(np.isfinite(plane)):
                raise ValueError("the PSF plane has NaN or infinite pixels")
            beams.append(fit_beam(plane))
            reasons.append(None)
        except ValueError as exc:
            beams.append(None)
            reasons.append(f"no beam could be fitted to its PSF: {exc}")
    return beams, reasons


def _common_beam(beams, user):
    if user is not None:
        return user, "user", None
    fitted = [(b.area, i) for i, b in enumerate(beams) if b is not None]
    if not fitted:
        raise ValueError("no PSF plane gives a beam (all NaN or no main lobe); check the "
                         "psf cube, or give the restoring beam (beam=, --beam)")
    _, index = max(fitted, key=lambda t: (t[0], -t[1]))
    return beams[index], "largest fitted", index


def _brightest_plane(cube):
    peaks = []
    for i in range(cube.nplanes):
        plane = cube.read_plane(i)
        finite = np.isfinite(plane)
        peaks.append(float(np.abs(plane[finite]).max()) if finite.all() else -1.0)
    best = int(np.argmax(peaks))
    if peaks[best] < 0:
        raise ValueError("every plane of the cube has NaN or infinite pixels; nothing to "
                         "choose scales from (give --scales)")
    return best


def _choose_scales(merged, cube, psf, cell):
    reasons, reference = [], None
    if isinstance(merged["scales"], str) and merged["scales"] == "auto":
        reference = _brightest_plane(cube)
        scales = scales_in_pixels(merged, cell, cube.read_plane(reference),
                                  psf.read_plane(min(reference, psf.nplanes - 1)), reasons)
    else:
        scales = scales_in_pixels(merged, cell, None, None, reasons)
    return [float(s) for s in scales], reasons, reference


def _plane_memory(merged, cubef, psff, scales_px):
    """Predicted peak memory of one plane's run (the cost model) and the memory free."""
    try:
        plan = plan_run(cubef.plane_shape, psff.plane_shape, scales_px,
                        max_components=merged["max_components"], threads=merged["threads"] or 1)
    except ValueError as exc:   # sizing only: the plane itself reports the problem
        logger.info("no memory plan for the planes: %s", exc)
        return {}
    return {"plane_bytes": plan.memory_bytes, "memory_bytes": plan.memory_available}


def _resume(record, outputs, log):
    """Load the record and check every finished plane's bytes; return the planes kept."""
    entries = record.load()
    if not all(out.usable() for out in outputs.values()):
        log.append("the partial output cubes are missing or of the wrong size; every plane "
                   "is computed again")
        for out in outputs.values():
            out.create()
        record.start()
        return {}
    kept = {}
    for index, entry in sorted(entries.items()):
        digests = entry.get("sha256", {})
        if all(outputs[k].read_digest(index) == digests.get(k) for k in outputs):
            kept[index] = entry
        else:
            record.forget(index)
            log.append(f"plane {index}: its bytes in the partial outputs changed since it was "
                       "recorded; computed again")
    return kept


def deconvolve_cube(cube, psf, out_dir, params=None, *, client=None, scheduler=None,
                    workers=None, timeout=30.0, plane_timeout=None, callback=None):
    """Deconvolve a FITS cube plane by plane on Dask distributed.

    Parameters
    ----------
    cube : str or os.PathLike
        FITS cube, Jy/beam: 3 axes, or 4 with a degenerate one; planes along the one
        non-celestial axis longer than 1.
    psf : str or os.PathLike
        FITS PSF cube on the same spectral axis (one PSF per plane), or one PSF for
        all planes; each PSF plane the cube plane's size or larger, peak 1 at the centre.
    out_dir : str or os.PathLike
        Output folder: ``model.fits``, ``residual.fits``, ``restored.fits`` (cubes on the
        input's grid) and ``report.json``.
    params : dict, optional
        Any of `skyscale.job.options.RUN_DEFAULTS`, as for ``skyscale run``.  ``threads`` is
        the threads per plane.  ``scales='auto'`` asks the advisor once, on the
        brightest plane.  ``overwrite`` replaces earlier outputs (and an unfinished run).
    client : distributed.Client, optional
        An existing client; used as it is and left open.
    scheduler : str, optional
        Address of a running scheduler (``'tcp://host:8786'``); default a local cluster
        on 127.0.0.1 sized to this machine (see `skyscale.cube.cluster`).
    workers : int, optional
        Worker processes of the local cluster.
    timeout : float
        Seconds to wait for a scheduler to answer or local workers to start.
    plane_timeout : float, optional
        Give up when no plane finishes for this many seconds; default wait for ever.
    callback : callable, optional
        Progress: dicts with ``stage`` ``'cluster'`` (where the planes run, the
        dashboard address) and ``'plane'`` (``plane``, ``status``, ``done``,
        ``running``, ``total``, ``eta_s``, ``elapsed_s``).

    Returns
    -------
    CubeResult

    Raises
    ------
    ValueError
        Bad input (PSF on another spectral axis or with another plane count, a
        scheduler that does not answer, an unfinished run of other options in
        ``out_dir``).
    FileExistsError
        If the outputs exist and ``overwrite`` is not set.

    Notes
    -----
    A plane whose pixels are not all finite is skipped: NaN in every output, the
    reason in the report; the others go on.  A plane that raises is reported as
    failed and left out of the record, so a rerun tries it again; the outputs keep
    their ``.partial`` names until every plane is done or skipped.  If the run is
    interrupted (an exception, also from ``callback``), every plane finished so far
    stays on disk and in the record.
    """
    t_start = time.perf_counter()
    start = _dt.datetime.now(_dt.timezone.utc)
    merged = merge_params(params)
    out_dir = os.fspath(out_dir)
    cubef, psff = open_cube(cube, name="cube"), open_cube(psf, name="psf")
    check_psf_cube(cubef, psff)
    cell = cubef.cell_arcsec
    paths = {k: os.path.join(out_dir, v) for k, v in CUBE_OUTPUTS.items()}
    overwrite = bool(merged["overwrite"])
    if not overwrite:
        clash = [p for p in paths.values() if os.path.exists(p)]
        if clash and os.path.exists(paths["report"]):
            raise FileExistsError(f"{out_dir} already holds a complete run "
                                  f"({os.path.basename(paths['report'])} is written): "
                                  "nothing to resume; choose another output folder, or "
                                  "rerun with --overwrite to compute it again")
        if clash:
            raise FileExistsError(f"{clash[0]} exists; choose another output folder or "
                                  "rerun with --overwrite")
    beams, beam_reasons = _fit_beams(psff)
    common, beam_source, beam_plane = _common_beam(beams, restoring_beam(merged, cell, wcs=cubef.wcs))
    scales_px, scale_reasons, reference = _choose_scales(merged, cubef, psff, cell)
    mask = build_mask(merged, cubef, cubef.plane_shape)
    t_prepare = time.perf_counter() - t_start
    identity = {"cube": cubef.identity(), "psf": psff.identity(),
                "parameters": dict(merged, overwrite=None, threads=None, plots=None),
                "scales_px": scales_px,
                "common_beam": common.as_dict()}
    os.makedirs(out_dir, exist_ok=True)
    record = RunRecord(out_dir, identity)
    history = provenance_history(dict(merged, scales=scales_px), start)
    outputs = {k: CubeOutput(paths[k], cubef, bunit=_UNITS[k], history=history,
                             beam=None if k == "model" or cubef.wcs is None else common)
               for k in ("model", "residual", "restored")}
    notes = []
    if record.exists() and not overwrite:
        done = _resume(record, outputs, notes)
    else:
        for out in outputs.values():
            out.create()
        record.start()
        done = {}
    reused = sorted(done)
    state = {"computed": [], "skipped": [], "failed": {}, "t0": time.perf_counter()}
    total = cubef.nplanes
    todo = [i for i in range(total) if i not in done]

    def read(index):
        if beams[min(index, psff.nplanes - 1)] is None:
            return None, None, beam_reasons[min(index, psff.nplanes - 1)]
        dirty = cubef.read_plane(index)
        reason = finite_reason(dirty)
        if reason is not None:
            return None, None, reason
        return dirty, psff.read_plane(min(index, psff.nplanes - 1)), None

    def write(index, planes, entry):
        entry["sha256"] = {k: out.write_plane(index, planes[k]) for k, out in outputs.items()}
        record.add(entry)

    def on_result(index, output):
        write(index, output, {"plane": index, "status": "done", "summary": output["summary"]})
        state["computed"].append(index)

    def on_skip(index, reason):
        nan = np.full(cubef.plane_shape, np.nan, np.float32)
        write(index, {k: nan for k in outputs}, {"plane": index, "status": "skipped",
                                                 "reason": reason})
        state["skipped"].append(index)

    def on_failure(index, message):
        logger.warning("plane %d failed: %s", index, message)
        state["failed"][index] = message

    def on_progress(index, status, running):
        finished = len(record.planes) + len(state["failed"])
        elapsed = time.perf_counter() - state["t0"]
        n = len(state["computed"])
        left = total - finished
        eta = elapsed / n * left if n else None
        _notify(callback, stage="plane", plane=index, status=status, done=finished,
                running=running, total=total, eta_s=eta, elapsed_s=elapsed)

    sizing = {}
    if client is None and scheduler is None:
        sizing = _plane_memory(merged, cubef, psff, scales_px)
    try:
        with cube_client(client, scheduler, threads=merged["threads"], workers=workers,
                         timeout=timeout, **sizing) as (cl, info):
            _notify(callback, stage="cluster", total=total, reused=len(reused), **info.as_dict())
            for index in reused:
                _notify(callback, stage="plane", plane=index, status="reused",
                        done=len(done), running=0, total=total, eta_s=None, elapsed_s=0.0)
            stream_planes(cl, todo, read, (merged, cell, scales_px, mask, common),
                          on_result=on_result, on_skip=on_skip, on_failure=on_failure,
                          on_progress=on_progress, slots=info.slots,
                          plane_timeout=plane_timeout)
    finally:
        for out in outputs.values():
            out.close()
        record.close()
        cubef.close()
        psff.close()
    complete = not state["failed"]
    written = {}
    if complete:
        written = {k: out.finish(overwrite) for k, out in outputs.items()}
    else:
        written = {k: out.partial for k, out in outputs.items()}
    written["record"] = record.path
    report = _cube_report(
        cubef=cubef, psff=psff, merged=merged, scales_px=scales_px, reasons=scale_reasons,
        reference=reference, beams=beams, common=common, beam_source=beam_source,
        beam_plane=beam_plane, cell=cell, record=record, state=state, reused=reused,
        info=info, notes=notes, written=written, complete=complete,
        timings={"prepare": t_prepare, "total": time.perf_counter() - t_start},
        start=start)
    name = paths["report"] if complete else os.path.join(out_dir, _UNFINISHED_REPORT)
    written["report"] = str(write_report(name, report, overwrite=overwrite or not complete))
    return CubeResult(complete=complete, written=written, report=report,
                      computed=sorted(state["computed"]), reused=reused,
                      skipped=sorted(state["skipped"]), failed=sorted(state["failed"]),
                      beams=beams, common_beam=common)


def _notify(callback, **event):
    if callback is not None:
        callback(event)


def _cube_report(*, cubef, psff, merged, scales_px, reasons, reference, beams, common,
                 beam_source, beam_plane, cell, record, state, reused, info, notes, written,
                 complete, timings, start):
    planes = []
    for i in range(cubef.nplanes):
        row = {"plane": i, "status": "failed" if i in state["failed"] else "not run"}
        if cubef.spectral is not None:
            row["spectral"] = float(cubef.spectral[i])
        row["beam"] = beam_record(beams[min(i, psff.nplanes - 1)], cell)
        entry = record.planes.get(i)
        if entry is not None:
            row["status"] = entry["status"]
            row["reused"] = i in reused
            for key in ("reason", "summary", "sha256"):
                if key in entry:
                    row[key] = entry[key]
        if i in state["failed"]:
            row["error"] = state["failed"][i]
        planes.append(row)
    done = [p for p in planes if p["status"] == "done"]
    # the threads of one plane in effect: the user's, else what the cluster gave each plane
    threads = merged["threads"] if merged["threads"] is not None else info.threads
    return {
        "schema_version": 1, "kind": "cube", "complete": complete,
        "created_utc": _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds"),
        "start_utc": start.isoformat(timespec="seconds"),
        "software": software_record(), "machine": machine_record(threads),
        "inputs": {"cube": cubef.identity(), "psf": psff.identity()},
        "cube": {"shape": list(cubef.shape), "planes": cubef.nplanes,
                 "plane_shape": list(cubef.plane_shape), "spectral_axis": cubef.spectral_type,
                 "cell_arcsec": cell, "psf_planes": psff.nplanes},
        "parameters": dict(merged, scales=scales_px, threads=threads),
        "scales": {"pixels": scales_px,
                   "chosen": "advisor, once, on the brightest plane" if reference is not None
                   else "given, fixed for every plane",
                   "reference_plane": reference, "reasons": reasons},
        "restoring_beam": {"common": beam_record(common, cell), "source": beam_source,
                           "plane": beam_plane},
        "cluster": info.as_dict(),
        "counts": {"planes": cubef.nplanes, "done": len(done),
                   "computed": len(state["computed"]), "reused": len(reused),
                   "skipped": len(state["skipped"]), "failed": len(state["failed"])},
        "timings_s": dict(timings, planes_compute=sum(
            p["summary"]["seconds"] for p in done if p.get("summary"))),
        "planes": planes, "notes": notes, "outputs": written,
        "record": RECORD_NAME,
    }
