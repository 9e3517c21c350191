"""Planes as Dask tasks: the task itself and the loop that streams planes through a cluster.

The client reads a plane, submits it, and keeps at most twice as many planes in
flight as the cluster has task slots; each finished plane goes straight to the
writer and is released.  Its memory therefore depends on the plane size and the
cluster size, never on the number of planes.  The plane data travel inside the task,
so when a worker dies the scheduler can run the task again elsewhere.
"""

import logging
import queue
import time
import uuid
import warnings
from collections import deque

import numpy as np

from skyscale.core.driver import deconvolve
from skyscale.cube.cluster import plane_threads
from skyscale.io.report import build_report
from skyscale.job.files import deconvolve_options

__all__ = ["plane_task", "stream_planes", "finite_reason"]

logger = logging.getLogger(__name__)

#: Seconds one wait for a finished plane lasts before the loop looks again.
POLL_SECONDS = 0.5


def plane_task(index, dirty, psf, params, cell, scales_px, mask, beam):
    """Deconvolve one plane exactly as ``skyscale run`` would; runs on a worker.

    Parameters
    ----------
    index : int
        The plane (for the summary).
    dirty, psf : (ny, nx), (py, px) float32 ndarray
    params : dict
        Merged run parameters (`skyscale.job.files.merge_params`).
    cell : float or None
    scales_px : list of float
    mask : (ny, nx) bool ndarray or None
    beam : Beam
        The cube's common restoring beam.

    Returns
    -------
    dict
        ``model``, ``residual``, ``restored`` (float32 planes) and ``summary`` (the
        plane's stop reason, residual statistics, per-scale flux, timings, warnings).
    """
    t0 = time.perf_counter()
    threads = plane_threads(params["threads"])
    opts = deconvolve_options(dict(params, threads=threads), psf, cell, scales_px, mask, beam)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        result = deconvolve(dirty, psf, **opts)
    result.warnings.extend(str(w.message) for w in caught)
    rep = build_report(result, cell_arcsec=cell, threads=threads)
    summary = {key: rep[key] for key in ("final", "stop", "per_scale", "timings_s", "warnings")}
    summary.update(plane=int(index), threads=threads, seconds=time.perf_counter() - t0)
    return {"model": result.model, "residual": result.residual, "restored": result.restored,
            "summary": summary}


def _slots(client, fallback):
    try:
        workers = client.scheduler_info()["workers"]
        return max(1, sum(int(w.get("nthreads", 1)) for w in workers.values()))
    except Exception:  # noqa: BLE001 - only sizes the queue
        return fallback


def stream_planes(client, todo, read, task_args, *, on_result, on_skip, on_failure,
                  on_progress, slots, plane_timeout=None):
    """Run ``plane_task`` for the planes in ``todo``, a bounded number at a time.

    Parameters
    ----------
    client : distributed.Client
    todo : sequence of int
        Planes to compute.
    read : callable
        ``read(index) -> (dirty, psf, reason)``; ``reason`` (a string) skips the plane.
    task_args : tuple
        ``(params, cell, scales_px, mask, beam)`` for `plane_task`.
    on_result, on_skip, on_failure : callable
        ``on_result(index, output)``, ``on_skip(index, reason)``,
        ``on_failure(index, message)``.
    on_progress : callable
        ``on_progress(index, status, running)`` after each plane.
    slots : int
        Planes the cluster runs at once when the loop starts.
    plane_timeout : float, optional
        Give up when no plane has finished for this many seconds.

    Raises
    ------
    TimeoutError
        When ``plane_timeout`` passes without a finished plane.
    """
    token = uuid.uuid4().hex[:12]
    pending = deque(todo)
    running = {}
    finished_queue = queue.Queue()
    last = time.monotonic()
    try:
        while pending or running:
            window = 2 * slots
            while pending and len(running) < window:
                index = pending.popleft()
                dirty, psf, reason = read(index)
                if reason is not None:
                    on_skip(index, reason)
                    on_progress(index, "skipped", min(len(running), slots))
                    continue
                with warnings.catch_warnings():
                    warnings.simplefilter("ignore")   # "large object in the task graph"
                    fut = client.submit(plane_task, index, dirty, psf, *task_args,
                                        key=f"skyscale-plane-{token}-{index}", pure=False)
                running[fut.key] = (fut, index)
                fut.add_done_callback(finished_queue.put)
                del dirty, psf
            if not running:
                continue
            try:
                finished = [finished_queue.get(timeout=POLL_SECONDS)]
            except queue.Empty:
                if plane_timeout is not None and time.monotonic() - last > plane_timeout:
                    raise TimeoutError(f"no plane finished in {plane_timeout:g} s; the cluster "
                                       "may have no workers left (see its dashboard)") from None
                continue
            last = time.monotonic()
            for fut in finished:
                if fut.key not in running:
                    continue
                fut, index = running.pop(fut.key)
                try:    # a result lost with its worker is computed again: wait, bounded
                    output = fut.result(timeout=plane_timeout)
                except Exception as exc:  # noqa: BLE001 - the plane fails, the others go on
                    on_failure(index, f"{type(exc).__name__}: {exc}")
                    status = "failed"
                else:
                    on_result(index, output)
                    status = "done"
                fut.release()
                slots = _slots(client, slots)
                on_progress(index, status, min(len(running), slots))
    finally:
        if running:
            client.cancel([fut for fut, _ in running.values()])
            logger.info("cancelled %d planes in flight", len(running))


def finite_reason(dirty):
    """Why a plane cannot be deconvolved (non-finite pixels), or None."""
    bad = int(np.count_nonzero(~np.isfinite(dirty)))
    if bad == dirty.size:
        return "every pixel is NaN or infinite"
    if bad:
        return f"{bad} pixels are NaN or infinite; replace them (for example with 0)"
    return None
