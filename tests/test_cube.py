"""Cubes plane by plane on Dask distributed: equal to serial runs, resumable, robust.

Every cluster here listens on 127.0.0.1 only, every wait has a timeout, and every
cluster is closed at the end of its test or module.
"""

import json
import os
import signal
import socket
import time

import numpy as np
import pytest
from astropy.io import fits

import skyscale
from skyscale.cli.commands import main

from cubedata import plane_sigmas, write_cube

distributed = pytest.importorskip("distributed")

#: Options of every cube run here (kept small so the tests stay fast).
# the serial reference below is a plain deconvolve: no automatic mask (on by default in
# run and cube since issue 19)
PARAMS = dict(scales=[0, 4], max_components=300, max_major_cycles=5, threads=1,
              emission_mask=False)
NPLANES = 6
TIMEOUT = 120   # seconds: no single wait in these tests lasts longer


@pytest.fixture(scope="module")
def cluster():
    """Two worker processes, one thread each, on loopback; closed after the module."""
    from conftest import gaussian_psf
    psf = gaussian_psf(32, sigma=2.0)     # compile here first: workers load the cache
    skyscale.deconvolve(psf[16:48, 16:48].copy(), psf, scales=PARAMS["scales"],
                        max_components=5, threads=1)
    lc = distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                  host="127.0.0.1", dashboard_address="127.0.0.1:0",
                                  worker_dashboard_address=None,
                                  env={"NUMBA_NUM_THREADS": "1"})
    client = distributed.Client(lc, timeout=TIMEOUT, set_as_default=False)
    client.wait_for_workers(2, timeout=TIMEOUT)
    yield client
    client.close(timeout=TIMEOUT)
    lc.close(timeout=TIMEOUT)


@pytest.fixture(scope="module")
def data(tmp_path_factory):
    folder = tmp_path_factory.mktemp("cube")
    cube, psf, dirty, psfs = write_cube(folder, nplanes=NPLANES)
    return dict(folder=folder, cube=cube, psf=psf, dirty=dirty, psfs=psfs)


def serial_planes(dirty, psfs, beam):
    """Each plane deconvolved in this process with skyscale.deconvolve, one by one."""
    out = {"model": [], "residual": [], "restored": []}
    for d, p in zip(dirty, psfs):
        r = skyscale.deconvolve(d, p, scales=PARAMS["scales"], loop_gain=0.1, threshold=0.0,
                                max_components=PARAMS["max_components"],
                                max_major_cycles=PARAMS["max_major_cycles"], cycle_depth=0.2,
                                size_penalty=0.6, threads=1, beam=beam)
        for k in out:
            out[k].append(r.__dict__[k])
    return {k: np.stack(v) for k, v in out.items()}


def cube_data(path):
    with fits.open(path) as h:
        return h[0].data[0].copy(), h[0].header.copy()


@pytest.fixture(scope="module")
def reference(data, cluster, tmp_path_factory):
    """One uninterrupted distributed run, and the serial planes with its common beam."""
    out = tmp_path_factory.mktemp("ref") / "out"
    events = []
    result = skyscale.deconvolve_cube(data["cube"], data["psf"], out, PARAMS, client=cluster,
                                      plane_timeout=TIMEOUT, callback=events.append)
    serial = serial_planes(data["dirty"], data["psfs"], result.common_beam)
    return dict(result=result, out=out, events=events, serial=serial)


def test_distributed_equals_serial_to_the_bit(reference):
    result = reference["result"]
    assert result.complete and result.computed == list(range(NPLANES))
    for kind in ("model", "residual", "restored"):
        cube, header = cube_data(reference["out"] / f"{kind}.fits")
        assert cube.dtype == np.dtype(">f4") and cube.shape == (NPLANES, 64, 64)
        assert np.array_equal(cube, reference["serial"][kind]), kind
        # common practice: the output keeps the input's spectral axis.
        assert header["CTYPE3"] == "FREQ" and header["NAXIS3"] == NPLANES


def test_progress_reaches_every_plane(reference):
    events = reference["events"]
    assert events[0]["stage"] == "cluster" and events[0]["address"].startswith("tcp://127.0.0.1:")
    planes = [e for e in events if e["stage"] == "plane"]
    assert sorted(e["plane"] for e in planes) == list(range(NPLANES))
    assert [e["done"] for e in planes] == list(range(1, NPLANES + 1))
    assert planes[-1]["eta_s"] == 0.0 and all(0 <= e["running"] <= 2 for e in planes)


def test_per_plane_beams_follow_the_psf_widths(reference):
    # analytic: Gaussian FWHM = 2 sqrt(2 ln 2) sigma = 2.354820045 sigma (REFERENCES.md).
    result = reference["result"]
    expected = 2.354820045 * plane_sigmas(NPLANES)
    majors = np.array([b.major for b in result.beams])
    minors = np.array([b.minor for b in result.beams])
    np.testing.assert_allclose(majors, expected, rtol=2e-3)
    np.testing.assert_allclose(minors, expected, rtol=2e-3)
    assert result.common_beam == result.beams[int(np.argmax(majors * minors))]
    assert result.common_beam.major == pytest.approx(expected.max(), rel=2e-3)
    report = json.loads((reference["out"] / "report.json").read_text())
    assert [p["beam"]["major_px"] for p in report["planes"]] == pytest.approx(list(majors))
    assert report["restoring_beam"]["source"] == "largest fitted"
    # common practice: BMAJ/BMIN in degrees (FWHM) on the restored cube.
    _, header = cube_data(reference["out"] / "restored.fits")
    assert header["BMAJ"] * 3600 / 2.0 == pytest.approx(result.common_beam.major, rel=1e-9)
    assert "BMAJ" not in cube_data(reference["out"] / "model.fits")[1]


class Stop(Exception):
    """Raised by a progress callback to interrupt a run."""


def test_interrupted_run_resumes_without_recomputing(data, reference, cluster, tmp_path):
    out = tmp_path / "out"

    def stop_after_three(event):
        if event["stage"] == "plane" and event["done"] >= 3:
            raise Stop

    with pytest.raises(Stop):
        skyscale.deconvolve_cube(data["cube"], data["psf"], out, PARAMS, client=cluster,
                                 plane_timeout=TIMEOUT, callback=stop_after_three)
    assert not (out / "model.fits").exists() and (out / "model.fits.partial").exists()
    lines = (out / "cube-progress.jsonl").read_text().splitlines()
    first = sorted(json.loads(line)["plane"] for line in lines[1:])
    assert len(first) >= 3
    # Damage one finished plane on disk: the resumed run must notice and redo it.
    damaged = first[0]
    partial = out / "model.fits.partial"
    with fits.open(partial) as h:
        header_bytes = len(h[0].header.tostring())
    with open(partial, "r+b") as fh:
        fh.seek(header_bytes + damaged * 64 * 64 * 4 + 100)
        fh.write(b"\x7f\x7f\x7f\x7f")
    events = []
    result = skyscale.deconvolve_cube(data["cube"], data["psf"], out, PARAMS, client=cluster,
                                      plane_timeout=TIMEOUT, callback=events.append)
    assert result.complete
    assert result.reused == first[1:]
    assert result.computed == sorted(set(range(NPLANES)) - set(first[1:]))
    done_events = [e["plane"] for e in events if e.get("status") == "done"]
    assert sorted(done_events) == result.computed
    for kind in ("model", "residual", "restored"):
        assert np.array_equal(cube_data(out / f"{kind}.fits")[0],
                              cube_data(reference["out"] / f"{kind}.fits")[0]), kind
    assert any(f"plane {damaged}" in n for n in result.report["notes"])


def test_resume_with_other_options_is_refused(data, cluster, tmp_path):
    out = tmp_path / "out"
    with pytest.raises(Stop):
        skyscale.deconvolve_cube(data["cube"], data["psf"], out, PARAMS, client=cluster,
                                 plane_timeout=TIMEOUT, callback=_raise_on_first_plane)
    with pytest.raises(ValueError, match="loop_gain: 0.1 -> 0.2"):
        skyscale.deconvolve_cube(data["cube"], data["psf"], out, dict(PARAMS, loop_gain=0.2),
                                 client=cluster, plane_timeout=TIMEOUT)


def _raise_on_first_plane(event):
    if event["stage"] == "plane":
        raise Stop


def test_killed_worker_still_gives_the_serial_planes(data, reference, cluster, tmp_path):
    killed = []

    def kill_a_busy_worker(event):
        if event["stage"] != "plane" or killed:
            return
        busy = [w for w, keys in cluster.processing().items() if keys]
        if busy:
            keys = cluster.processing()[busy[0]]
            pid = cluster.run(os.getpid, workers=busy[:1])[busy[0]]
            os.kill(pid, signal.SIGKILL)
            killed.append(keys)

    result = skyscale.deconvolve_cube(data["cube"], data["psf"], tmp_path / "out", PARAMS,
                                      client=cluster, plane_timeout=TIMEOUT,
                                      callback=kill_a_busy_worker)
    assert killed and any(str(k).startswith("skyscale-plane-") for k in killed[0])
    assert result.complete and not result.failed
    for kind in ("model", "residual", "restored"):
        assert np.array_equal(cube_data(tmp_path / "out" / f"{kind}.fits")[0],
                              reference["serial"][kind]), kind
    cluster.wait_for_workers(2, timeout=TIMEOUT)   # the nanny restarts it for later tests


def _children():
    psutil = pytest.importorskip("psutil")
    return {p.pid for p in psutil.Process().children(recursive=True)}


def test_all_nan_plane_is_skipped_on_a_local_cluster_that_is_closed_after(reference, tmp_path):
    cube, psf, dirty, psfs = write_cube(tmp_path, nplanes=NPLANES, nan_planes=(2,))
    before = _children()
    result = skyscale.deconvolve_cube(cube, psf, tmp_path / "out", PARAMS, workers=2,
                                      timeout=TIMEOUT, plane_timeout=TIMEOUT)
    deadline = time.monotonic() + 30
    while _children() - before and time.monotonic() < deadline:
        time.sleep(0.2)
    assert not _children() - before, "the local cluster left processes behind"
    assert result.complete and result.skipped == [2]
    assert result.report["cluster"]["kind"] == "local"
    assert result.report["cluster"]["address"].startswith("tcp://127.0.0.1:")
    # the threads of a plane in effect are recorded, not left null (the local cluster
    # gives each of its 2 workers cores // 2 threads, at least 1)
    threads = result.report["cluster"]["threads"]
    assert isinstance(threads, int) and threads >= 1
    assert result.report["parameters"]["threads"] == threads
    assert result.report["machine"]["threads"] == threads
    row = result.report["planes"][2]
    assert row["status"] == "skipped" and "NaN" in row["reason"]
    model = cube_data(tmp_path / "out" / "model.fits")[0]
    assert np.isnan(model[2]).all()
    keep = [k for k in range(NPLANES) if k != 2]
    assert np.array_equal(model[keep], reference["serial"]["model"][keep])


@pytest.mark.parametrize("change, message", [
    (dict(psf_planes=NPLANES - 1), "has 5 planes but the cube has 6"),
    (dict(freq0=3.1e9 + 1.0e6), "make the PSF cube on the cube's spectral axis"),
])
def test_psf_cube_that_does_not_match_is_refused(tmp_path, change, message, capsys):
    cube, psf, _, _ = write_cube(tmp_path, nplanes=NPLANES, **change)
    with pytest.raises(ValueError, match=message):
        skyscale.deconvolve_cube(cube, psf, tmp_path / "out", PARAMS, timeout=5)
    code = main(["cube", str(cube), str(psf), "--out", str(tmp_path / "cli")])
    err = capsys.readouterr().err.strip().splitlines()
    assert code == 2 and len(err) == 1 and message in err[0]
    assert not (tmp_path / "out").exists()


def test_scheduler_that_does_not_answer_is_one_line_exit_2(data, tmp_path, capsys):
    with socket.socket() as s:      # a loopback port nothing listens on
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]
    code = main(["--quiet", "cube", str(data["cube"]), str(data["psf"]), "--out",
                 str(tmp_path / "out"), "--scheduler", f"tcp://127.0.0.1:{port}",
                 "--connect-timeout", "2"])
    err = capsys.readouterr().err.strip().splitlines()
    assert code == 2 and len(err) == 1
    assert f"tcp://127.0.0.1:{port}" in err[0] and "dask scheduler" in err[0]


def test_command_line_writes_the_cubes_and_the_report(data, reference, cluster, tmp_path,
                                                      capsys):
    out = tmp_path / "out"
    code = main(["--quiet", "cube", str(data["cube"]), str(data["psf"]), "--out", str(out),
                 "--scales", "0,4", "--max-components", "300", "--max-major-cycles", "5",
                 "--threads", "1", "--no-emission-mask", "--scheduler",
                 cluster.scheduler.address])
    assert code == 0
    for kind in ("model", "residual", "restored"):
        assert np.array_equal(cube_data(out / f"{kind}.fits")[0], reference["serial"][kind])
    report = json.loads((out / "report.json").read_text())
    assert report["counts"]["done"] == NPLANES and report["cluster"]["kind"] == "address"
    assert report["scales"]["chosen"] == "given, fixed for every plane"
    assert main(["--quiet", "cube", str(data["cube"]), str(data["psf"]), "--out", str(out),
                 "--scheduler", cluster.scheduler.address]) == 2   # no clobbering
    assert "already holds a complete run" in capsys.readouterr().err


def test_a_plane_that_fails_leaves_the_run_unfinished_and_resumable(data, cluster, tmp_path,
                                                                   capsys):
    cube, psf, _, _ = write_cube(tmp_path, nplanes=NPLANES)
    with fits.open(psf, mode="update") as h:       # plane 3: a PSF peak off the centre
        h[0].data[0, 3, 10, 10] = 2.0
    with pytest.warns(UserWarning, match="not at the centre"):
        result = skyscale.deconvolve_cube(cube, psf, tmp_path / "out", PARAMS, client=cluster,
                                          plane_timeout=TIMEOUT)
    assert not result.complete and result.failed == [3]
    assert sorted(result.computed) == [0, 1, 2, 4, 5]
    assert "psf peak is at [y, x] (10, 10)" in result.report["planes"][3]["error"]
    assert (tmp_path / "out" / "report-unfinished.json").exists()
    assert not (tmp_path / "out" / "model.fits").exists()
    code = main(["--quiet", "cube", str(cube), str(psf), "--out", str(tmp_path / "out"),
                 "--scales", "0,4", "--max-components", "300", "--max-major-cycles", "5",
                 "--threads", "1", "--no-emission-mask", "--scheduler",
                 cluster.scheduler.address])
    err = capsys.readouterr().err
    assert code == 1 and "1 planes failed" in err and "rerun the same command" in err, err


def test_auto_scales_are_chosen_once_on_the_brightest_plane(data, cluster, tmp_path):
    result = skyscale.deconvolve_cube(data["cube"], data["psf"], tmp_path / "out",
                                      dict(PARAMS, scales="auto"), client=cluster,
                                      plane_timeout=TIMEOUT)
    peaks = np.abs(data["dirty"]).max(axis=(1, 2))
    scales = result.report["scales"]
    assert scales["reference_plane"] == int(np.argmax(peaks))
    assert scales["chosen"].startswith("advisor") and scales["reasons"]
    suggested = skyscale.suggest_scales(data["dirty"][int(np.argmax(peaks))],
                                        data["psfs"][int(np.argmax(peaks))], cell_arcsec=2.0)
    assert scales["pixels"] == [float(p) for p in suggested.pixels]


def test_tls_cluster_as_the_readme_says(data, reference, tmp_path):
    """A TLS scheduler and worker on loopback; the command line finds its certificate in
    Dask's configuration variables, as the README tells users to set them."""
    import shutil
    import subprocess
    import sys
    if shutil.which("openssl") is None:
        pytest.skip("openssl is needed to make a test certificate")
    cert, key = tmp_path / "cert.pem", tmp_path / "key.pem"
    subprocess.run(["openssl", "req", "-x509", "-newkey", "rsa:2048", "-nodes", "-keyout",
                    str(key), "-out", str(cert), "-days", "1", "-subj", "/CN=127.0.0.1",
                    "-addext", "subjectAltName=IP:127.0.0.1"], check=True, timeout=60,
                   capture_output=True)
    from distributed.security import Security
    sec = Security(tls_ca_file=str(cert), tls_scheduler_cert=str(cert),
                   tls_scheduler_key=str(key), tls_worker_cert=str(cert),
                   tls_worker_key=str(key), tls_client_cert=str(cert), tls_client_key=str(key),
                   require_encryption=True)
    lc = distributed.LocalCluster(n_workers=1, threads_per_worker=1, processes=True,
                                  host="127.0.0.1", protocol="tls", security=sec,
                                  dashboard_address="127.0.0.1:0",
                                  worker_dashboard_address=None, env={"NUMBA_NUM_THREADS": "1"})
    try:
        address = lc.scheduler_address
        assert address.startswith("tls://127.0.0.1:")
        env = dict(os.environ, DASK_DISTRIBUTED__COMM__TLS__CA_FILE=str(cert),
                   DASK_DISTRIBUTED__COMM__TLS__CLIENT__CERT=str(cert),
                   DASK_DISTRIBUTED__COMM__TLS__CLIENT__KEY=str(key),
                   PYTHONPATH=os.pathsep.join(p for p in sys.path if p))
        out = tmp_path / "out"
        proc = subprocess.run(
            [sys.executable, "-m", "skyscale.cli", "--quiet", "cube", str(data["cube"]),
             str(data["psf"]), "--out", str(out), "--scales", "0,4", "--max-components", "300",
             "--max-major-cycles", "5", "--threads", "1", "--no-emission-mask",
             "--scheduler", address,
             "--connect-timeout", "30"], env=env, timeout=TIMEOUT, capture_output=True,
            text=True)
        assert proc.returncode == 0, proc.stderr
        assert np.array_equal(cube_data(out / "restored.fits")[0],
                              reference["serial"]["restored"])
    finally:
        lc.close(timeout=TIMEOUT)
