"""Dask distributed for cubes: a local cluster sized to the machine, or one by address.

A local cluster listens on the loopback interface only (127.0.0.1).  It has
``workers x threads = cores``: each worker process runs one plane at a time and that
plane's kernels and FFTs use ``threads`` threads (NUMBA_NUM_THREADS and
OMP_NUM_THREADS are set in the workers to match; see `WORKER_MALLOC` for the memory
allocator).  Fewer workers are started when
memory would not hold that many planes at once.
"""

import contextlib
import importlib.util
import logging
import os
import warnings
from dataclasses import dataclass

from skyscale.core.threads import usable_cores
from skyscale.core.warmup import warm_up

__all__ = ["WORKER_MALLOC", "ClusterInfo", "size_local_cluster", "plane_threads",
           "cube_client"]

logger = logging.getLogger(__name__)

#: glibc malloc settings of local workers.  Dask's default trim threshold (64 KiB)
#: fixes the mmap threshold at 128 KiB, so every plane-sized array is mapped and
#: unmapped and its pages fault in again: planes ran 1.4 to 2.4 times slower
#: (side by side, 256 x 256 planes).  Arrays up to 32 MiB now come from the heap
#: and up to 128 MiB of freed heap stays for the next plane.
WORKER_MALLOC = {"MALLOC_MMAP_THRESHOLD_": str(32 * 2**20),
                 "MALLOC_TRIM_THRESHOLD_": str(128 * 2**20)}


@dataclass
class ClusterInfo:
    """Where the planes run."""

    kind: str                 #: 'local' (started here), 'address' or 'client' (given)
    address: str              #: the scheduler's address
    dashboard: str            #: the dashboard's address, or why there is none
    workers: int              #: worker processes when the run started
    slots: int                #: planes that can run at once (sum of worker threads)
    threads: int = None       #: kernel and FFT threads per plane (None: each worker decides)

    def as_dict(self):
        return dict(self.__dict__)


def _require_distributed():
    try:
        import distributed  # noqa: F401
    except ImportError:
        raise ImportError("cube runs need dask.distributed; pip install "
                          "'skyscale[cluster]'") from None


def size_local_cluster(threads=None, *, cores=None, plane_bytes=None, memory_bytes=None):
    """Workers and threads per worker for a local cluster.

    Parameters
    ----------
    threads : int, optional
        Threads per plane; default 1 (many planes at once use cores best).
    cores : int, optional
        Default the cores this process may use.
    plane_bytes : int, optional
        Predicted peak memory of one plane's run; with ``memory_bytes`` it caps the
        worker count.
    memory_bytes : int, optional
        Memory available.

    Returns
    -------
    (workers, threads) : tuple of int
        ``workers * threads <= cores``, equal when memory allows.
    """
    if cores is None:
        cores = usable_cores()
    threads = 1 if threads is None else int(threads)
    if threads < 1:
        raise ValueError(f"threads is {threads}; pass a positive number of threads per plane")
    threads = min(threads, cores)
    workers = max(1, cores // threads)
    if plane_bytes and memory_bytes:
        fit = int(memory_bytes // (1.5 * plane_bytes))
        if fit < workers:
            logger.info("memory holds %d planes at once, not %d: %d workers", fit, workers,
                        max(fit, 1))
            workers = max(fit, 1)
    return workers, threads


def plane_threads(threads=None):
    """Threads one plane uses on the worker it runs on.

    ``threads`` if given; otherwise NUMBA_NUM_THREADS of the worker (set by a local
    cluster) divided by the worker's task slots.
    """
    if threads is not None:
        return int(threads)
    import numba
    slots = 1
    with contextlib.suppress(Exception):
        from distributed import get_worker
        slots = max(1, int(get_worker().state.nthreads))
    return max(1, int(numba.config.NUMBA_NUM_THREADS) // slots)


def _ignore_interrupt():
    """In a local worker: leave Ctrl-C to the client, which closes the cluster itself."""
    import signal
    with contextlib.suppress(ValueError):   # not the main thread: nothing to change
        signal.signal(signal.SIGINT, signal.SIG_IGN)


@contextlib.contextmanager
def _worker_malloc():
    """Spawn workers with `WORKER_MALLOC`: glibc reads it at process start, so it has to
    be in this process's environment when the nannies spawn (as Dask does with its own)."""
    import dask
    old = {k: os.environ.get(k) for k in WORKER_MALLOC}
    os.environ.update(WORKER_MALLOC)
    try:
        with dask.config.set({f"distributed.nanny.pre-spawn-environ.{k}": v
                              for k, v in WORKER_MALLOC.items()}):
            yield
    finally:
        for key, value in old.items():
            if value is None:
                os.environ.pop(key, None)
            else:
                os.environ[key] = value


def _dashboard(client):
    if importlib.util.find_spec("bokeh") is None:
        return "none (it needs bokeh: pip install bokeh)"
    try:
        return str(client.dashboard_link)
    except Exception:  # noqa: BLE001 - a dashboard is optional
        return "none"


def _info(client, kind, threads):
    workers = client.scheduler_info(n_workers=-1)["workers"] if _takes_n_workers(client) \
        else client.scheduler_info()["workers"]
    slots = sum(int(w.get("nthreads", 1)) for w in workers.values())
    return ClusterInfo(kind=kind, address=str(client.scheduler.address),
                       dashboard=_dashboard(client), workers=len(workers),
                       slots=max(slots, 1), threads=threads)


def _takes_n_workers(client):
    import inspect
    return "n_workers" in inspect.signature(client.scheduler_info).parameters


@contextlib.contextmanager
def cube_client(client=None, scheduler=None, *, threads=None, workers=None, timeout=30.0,
                plane_bytes=None, memory_bytes=None):
    """Yield ``(client, ClusterInfo)``: the given client, one by address, or a local cluster.

    Parameters
    ----------
    client : distributed.Client, optional
        Used as it is and left open.
    scheduler : str, optional
        Address of a running scheduler, for example ``'tcp://10.0.0.5:8786'``.
    threads : int, optional
        Threads per plane (see `size_local_cluster`).
    workers : int, optional
        Worker processes of a local cluster; default sized to the machine.
    timeout : float
        Seconds to wait for a scheduler to answer, or a local cluster's workers to start.

    Raises
    ------
    ValueError
        If the scheduler at ``scheduler`` does not answer within ``timeout``.
    """
    if client is not None:
        client.run(warm_up)          # each worker loads the kernels once, not per plane
        yield client, _info(client, "client", threads)
        return
    _require_distributed()
    from distributed import Client, LocalCluster
    if scheduler is not None:
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                own = Client(scheduler, timeout=timeout, set_as_default=False)
        except (OSError, TimeoutError) as exc:
            raise ValueError(f"scheduler {scheduler!r} did not answer within {timeout:g} s "
                             f"({exc}); start one with 'dask scheduler' and its workers with "
                             "'dask worker ADDRESS', or leave the scheduler out to use a "
                             "local cluster") from None
        try:
            own.run(warm_up)
            yield own, _info(own, "address", threads)
        finally:
            own.close(timeout=timeout)
        return
    n, t = size_local_cluster(threads, plane_bytes=plane_bytes, memory_bytes=memory_bytes)
    if workers is not None:
        n = max(1, int(workers))
    env = {name: str(t) for name in ("NUMBA_NUM_THREADS", "OMP_NUM_THREADS",
                                     "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS")}
    with warnings.catch_warnings(), _worker_malloc():
        warnings.simplefilter("ignore")
        cluster = LocalCluster(n_workers=n, threads_per_worker=1, processes=True,
                               host="127.0.0.1", dashboard_address="127.0.0.1:0",
                               worker_dashboard_address=None, env=env, silence_logs=logging.ERROR)
    try:
        own = Client(cluster, timeout=timeout, set_as_default=False)
        try:
            own.wait_for_workers(n, timeout=timeout)
            own.run(_ignore_interrupt)
            own.run(warm_up)
            yield own, _info(own, "local", t)
        finally:
            own.close(timeout=timeout)
    finally:
        cluster.close(timeout=timeout)
