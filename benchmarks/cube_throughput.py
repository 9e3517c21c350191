"""Cube throughput: serial against a local Dask cluster, scheduler overhead, client memory.

    PYTHONPATH=engine python benchmarks/cube_throughput.py --out cube-bench.json
    PYTHONPATH=engine python benchmarks/cube_throughput.py --planes 8,32 --size 128

Measures, side by side in one run on invented cubes (tests/cubedata.py):

Serial and cluster runs alternate ``--repeat`` times and the best of each is kept,
because the machine's load drifts; the client's peak memory is the worst of them.

* planes per minute: a serial loop in this process (read a plane, `skyscale.deconvolve`,
  1 thread and all cores), the same at 1 thread in a fresh process with the local
  workers' malloc settings (`skyscale.cube.cluster.WORKER_MALLOC`), and
  `skyscale.deconvolve_cube` on the local cluster that ``skyscale cube`` starts
  (``cores`` workers x 1 thread; its start-up timed apart);
* the scheduler overhead per task: worker-slot seconds of a cube run not spent inside
  `deconvolve` per plane, and the round trip of an empty task carrying a plane;
* the client's own time per plane (read two planes, write and hash three), which
  bounds the planes per second any number of workers can reach;
* the client's peak memory above its baseline during runs of growing cubes (sampled
  every 10 ms with psutil), against the cube's size on disk.
"""

import argparse
import contextlib
import json
import os
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path[:0] = [str(ROOT / "engine"), str(ROOT / "tests")]

import numpy as np  # noqa: E402

#: Every plane to the noise (3 sigma, the automatic mask), as a user's cube runs: the
#: planes per minute of a run, not of planes cut short by a component or cycle cap.
PARAMS = dict(scales=[0, 4, 8], noise_threshold=3.0, emission_mask=True, threads=1)


def make_cube(folder, nplanes, size):
    """Write the cube in a child process, so that its arrays never sit in this one."""
    folder.mkdir(parents=True, exist_ok=True)
    code = ("import sys, pathlib; sys.path[:0] = [sys.argv[1]]; from cubedata import write_cube; "
            "write_cube(pathlib.Path(sys.argv[2]), n=int(sys.argv[3]), nplanes=int(sys.argv[4]))")
    subprocess.run([sys.executable, "-c", code, str(ROOT / "tests"), str(folder), str(size),
                    str(nplanes)], check=True, timeout=600)
    return folder / "cube.fits", folder / "psf.fits"


class PeakRSS:
    """Peak resident memory of this process above its level at entry (psutil, 10 ms)."""

    def __enter__(self):
        import psutil
        self._proc = psutil.Process()
        self.base = self.peak = self._proc.memory_info().rss
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._watch, daemon=True)
        self._thread.start()
        return self

    def _watch(self):
        while not self._stop.wait(0.01):
            self.peak = max(self.peak, self._proc.memory_info().rss)

    def __exit__(self, *exc):
        self._stop.set()
        self._thread.join(timeout=5)
        self.peak = max(self.peak, self._proc.memory_info().rss)
        return False

    @property
    def above(self):
        return self.peak - self.base


def serial(cube, psf, threads):
    import skyscale
    from skyscale.cube.fits import open_cube
    c, p = open_cube(cube), open_cube(psf)
    t0 = time.perf_counter()
    for i in range(c.nplanes):
        skyscale.deconvolve(c.read_plane(i), p.read_plane(i), scales=PARAMS["scales"],
                            noise_threshold=PARAMS["noise_threshold"], mask="auto",
                            threads=threads)
    c.close()
    p.close()
    return time.perf_counter() - t0


def serial_tuned(cube, psf):
    """`serial` at 1 thread in a fresh process with the local workers' malloc settings."""
    from skyscale.cube.cluster import WORKER_MALLOC
    code = ("import sys; sys.path[:0] = sys.argv[1:3]; from cube_throughput import serial; "
            "serial(sys.argv[3], sys.argv[4], 1); print(serial(sys.argv[3], sys.argv[4], 1))")
    out = subprocess.run([sys.executable, "-c", code, str(ROOT / "engine"),
                          str(ROOT / "benchmarks"), str(cube), str(psf)], check=True,
                         timeout=1200, capture_output=True, text=True,
                         env=dict(os.environ, **WORKER_MALLOC))
    return float(out.stdout.split()[-1])


def client_time_per_plane(cube, psf, out, repeat=8):
    """Seconds the client spends per plane outside the cluster: read 2 planes, write 3."""
    from skyscale.cube.fits import CubeOutput, open_cube
    c, p = open_cube(cube), open_cube(psf)
    outs = [CubeOutput(out / f"{k}.fits", c, bunit="Jy/beam") for k in ("a", "b", "e")]
    for o in outs:
        o.create()
    t0 = time.perf_counter()
    for i in range(repeat):
        d = c.read_plane(i % c.nplanes)
        p.read_plane(i % p.nplanes)
        for o in outs:
            o.write_plane(i % c.nplanes, d)
    elapsed = (time.perf_counter() - t0) / repeat
    for o in outs:
        o.discard()
    c.close()
    p.close()
    return elapsed


def _empty(index, dirty, psf):
    return index


def round_trip(client, size, count=60):
    """Seconds per empty task carrying a plane and its PSF, two in flight per slot."""
    dirty = np.zeros((size, size), np.float32)
    psf = np.zeros((2 * size, 2 * size), np.float32)
    t0 = time.perf_counter()
    futs = [client.submit(_empty, i, dirty, psf, pure=False) for i in range(count)]
    client.gather(futs)
    return (time.perf_counter() - t0) / count


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--planes", default="8,32,96", help="plane counts of the cubes [8,32,96]")
    ap.add_argument("--size", type=int, default=256, help="plane size, pixels [256]")
    ap.add_argument("--repeat", type=int, default=3,
                    help="interleaved repeats of serial and cluster runs, best kept [3]")
    ap.add_argument("--out", help="write the figures as JSON here")
    args = ap.parse_args(argv)
    import skyscale
    from skyscale.cube.cluster import cube_client
    counts = [int(v) for v in args.planes.split(",")]
    cores = len(os.sched_getaffinity(0))
    results = {"size": args.size, "cores": cores, "params": PARAMS, "runs": []}
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        warm = make_cube(tmp / "warm", 2, 64)
        serial(*warm, 1)                                          # compile here
        t0 = time.perf_counter()
        stack = contextlib.ExitStack()
        client, _ = stack.enter_context(cube_client(workers=cores, threads=1, timeout=60))
        results["cluster_start_s"] = time.perf_counter() - t0
        try:
            skyscale.deconvolve_cube(*warm, tmp / "warm" / "out", PARAMS, client=client,
                                     plane_timeout=300)          # compile in the workers
            results["empty_task_round_trip_s"] = round_trip(client, args.size)
            for n in counts:
                cube, psf = make_cube(tmp / f"c{n}", n, args.size)
                run = {"planes": n, "cube_bytes": cube.stat().st_size + psf.stat().st_size}
                run["client_s_per_plane"] = client_time_per_plane(cube, psf, tmp / f"c{n}")
                run["serial_all_threads_s"] = serial(cube, psf, cores)
                serial_s, tuned_s, cluster_s, peaks, overheads = [], [], [], [], []
                for rep in range(args.repeat):      # interleaved, best of: the load drifts
                    serial_s.append(serial(cube, psf, 1))
                    tuned_s.append(serial_tuned(cube, psf))
                    with PeakRSS() as mem:
                        t1 = time.perf_counter()
                        res = skyscale.deconvolve_cube(cube, psf, tmp / f"c{n}" / f"out{rep}",
                                                       PARAMS, client=client, plane_timeout=300)
                        cluster_s.append(time.perf_counter() - t1)
                    peaks.append(mem.above)
                    compute = res.report["timings_s"]["planes_compute"]
                    overheads.append((cluster_s[-1] * cores - compute) / n)
                    if cluster_s[-1] == min(cluster_s):
                        run["compute_in_tasks_s"] = compute
                run["serial_1_thread_s"] = min(serial_s)
                run["serial_1_thread_worker_malloc_s"] = min(tuned_s)
                run["cluster_s"] = min(cluster_s)
                run["client_peak_above_baseline_bytes"] = max(peaks)
                run["overhead_s_per_task"] = min(overheads)
                for key in ("serial_1_thread", "serial_1_thread_worker_malloc",
                            "serial_all_threads", "cluster"):
                    run[f"{key}_planes_per_min"] = 60.0 * n / run[f"{key}_s"]
                results["runs"].append(run)
                print(json.dumps(run), flush=True)
        finally:
            stack.close()
    last = results["runs"][-1]
    t_plane = last["compute_in_tasks_s"] / last["planes"]
    t_task = t_plane + max(last["overhead_s_per_task"], 0.0)
    results["expected_planes_per_min"] = {
        str(w): 60.0 * min(w / t_task, 1.0 / last["client_s_per_plane"])
        for w in (1, 2, 4, 8, 16, 32, 64)}
    results["client_bound_workers"] = t_task / last["client_s_per_plane"]
    print(json.dumps({k: v for k, v in results.items() if k != "runs"}, indent=1))
    if args.out:
        Path(args.out).write_text(json.dumps(results, indent=1) + "\n")


if __name__ == "__main__":
    main()
