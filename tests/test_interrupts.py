"""Faults, as subprocesses: Ctrl-C and SIGTERM during a run, a second Ctrl-C while the
outputs are written, SIGKILL while writing, and resuming from a written model.

The run is real (``skyscale.cli.main`` in a fresh interpreter, real signals); a small
driver only makes the timing deterministic: it announces the end of major cycle 1 (or
the start of the table write) on stdout and then waits, so the signal lands there.
FITS integrity is checked with astropy's CHECKSUM/DATASUM verification (FITS Standard
4.0, appendix J).
"""

import json
import os
import signal
import subprocess
import sys
import textwrap
import time

import numpy as np
import pytest
from astropy.io import fits

import skyscale
from skyscale.io.atomic import INCOMPLETE_MARKER, remove_stale_temps
from skyscale.cli.commands import main
from smallfits import write_small_pair

ENGINE = os.path.join(os.path.dirname(os.path.dirname(os.path.abspath(__file__))), "engine")

DRIVER = textwrap.dedent("""
    import sys, time
    import skyscale.cli.console as console
    import skyscale.job.files as job
    hooks, argv = sys.argv[1].split(","), sys.argv[2:]
    def update(self, event, _done=[]):
        if "cycle" in hooks and event.get("stage") == "major" and event["cycle"] >= 1 \\
                and not _done:
            _done.append(1)
            print(f"CYCLE {event['cycle']} {event['components']}", flush=True)
            time.sleep(60)
    console.RunProgress.update = update
    if "engine" in hooks:
        import skyscale.core.engine
        real_init = skyscale.core.engine.Engine.__init__
        def slow_init(self, *a, **k):
            print("ENGINE", flush=True)
            time.sleep(60)
            real_init(self, *a, **k)
        skyscale.core.engine.Engine.__init__ = slow_init
    if "write" in hooks:
        real = job.write_table_csv
        def slow(*a, **k):
            import signal
            print("WRITING", flush=True)
            handler = signal.getsignal(signal.SIGINT)    # a deferred first interrupt
            for _ in range(600):                         # ends the wait at once
                if getattr(handler, "interrupted", False):
                    break
                time.sleep(0.1)
            return real(*a, **k)
        job.write_table_csv = slow
    from skyscale.cli.commands import main
    sys.exit(main(argv))
""")


@pytest.fixture(scope="module")
def inputs(tmp_path_factory):
    return write_small_pair(str(tmp_path_factory.mktemp("faults")))


def _start(hooks, args, tmp_path):
    script = tmp_path / "driver.py"
    script.write_text(DRIVER)
    env = dict(os.environ, PYTHONPATH=ENGINE)
    return subprocess.Popen([sys.executable, str(script), hooks, "--quiet"] + args,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env)


def _wait_for(proc, word, timeout=120):
    t0 = time.monotonic()
    while time.monotonic() - t0 < timeout:
        line = proc.stdout.readline()
        if line.startswith(word):
            return line.split()
        if not line and proc.poll() is not None:
            break
    proc.kill()
    pytest.fail(f"no {word!r} from the run; stderr: {proc.stderr.read()}")


def _fits_ok(path):
    with fits.open(path, checksum=True) as h:        # raises on a bad checksum
        h.verify("exception")
        return np.isfinite(h[0].data).all()


def _run_args(inputs, out, *extra):
    return ["run", inputs[0], inputs[1], "--out", str(out), "--loop-gain", "0.05",
            "--max-components", "100000", "--max-major-cycles", "50", *extra]


@pytest.mark.parametrize("sig", [signal.SIGINT, signal.SIGTERM], ids=["ctrl-c", "sigterm"])
def test_interrupt_writes_every_output_labelled_and_exits_3(sig, inputs, tmp_path):
    out = tmp_path / "out"
    proc = _start("cycle", _run_args(inputs, out, "--no-plots"), tmp_path)
    _, cycle, components = _wait_for(proc, "CYCLE")
    proc.send_signal(sig)
    _, err = proc.communicate(timeout=120)
    assert proc.returncode == 3, err
    assert "interrupted" in err and "Traceback" not in err
    rep = json.load(open(out / "report.json"))
    assert rep["stop"]["reason"] == "interrupted"
    assert rep["final"]["components"] == int(components)        # the last complete cycle
    assert len(rep["history"]) == int(cycle) + 1
    for name in ("model.fits", "residual.fits", "restored.fits"):
        assert _fits_ok(out / name)
    assert not (out / INCOMPLETE_MARKER).exists()
    assert not [p for p in os.listdir(out) if p.endswith(".tmp")]


def test_interrupt_before_any_result_writes_nothing_and_exits_4(inputs, tmp_path):
    out = tmp_path / "out"
    proc = _start("engine", _run_args(inputs, out, "--no-plots"), tmp_path)
    _wait_for(proc, "ENGINE")
    proc.send_signal(signal.SIGINT)
    _, err = proc.communicate(timeout=120)
    assert proc.returncode == 4, err
    assert "before any output was written" in err and "Traceback" not in err
    assert not out.exists()                      # not even the output folder was made


def test_second_interrupt_while_writing_leaves_the_marker_and_exits_4(inputs, tmp_path):
    out = tmp_path / "out"
    proc = _start("cycle,write", _run_args(inputs, out, "--no-plots"), tmp_path)
    _wait_for(proc, "CYCLE")
    proc.send_signal(signal.SIGINT)
    _wait_for(proc, "WRITING")
    proc.send_signal(signal.SIGINT)
    _, err = proc.communicate(timeout=120)
    assert proc.returncode == 4, err
    assert INCOMPLETE_MARKER in err and "Traceback" not in err
    assert (out / INCOMPLETE_MARKER).exists()
    assert not (out / "report.json").exists() and not (out / "components.csv").exists()
    for name in ("model.fits", "residual.fits", "restored.fits"):   # complete, or absent
        assert _fits_ok(out / name)
    assert not [p for p in os.listdir(out) if p.endswith(".tmp")]
    # a later run refuses the folder without --overwrite, and names the marker
    again = ["--quiet", "run", inputs[0], inputs[1], "--out", str(out), "--max-components",
             "20", "--no-plots"]
    assert main(again) == 2
    assert main(again + ["--overwrite"]) == 0
    assert not (out / INCOMPLETE_MARKER).exists() and (out / "report.json").exists()


def test_first_interrupt_while_writing_finishes_the_outputs_and_exits_3(inputs, tmp_path):
    # The run had finished: one Ctrl-C while its outputs are written must not throw it
    # away (README: only a second Ctrl-C abandons the outputs).
    out = tmp_path / "out"
    proc = _start("write", ["run", inputs[0], inputs[1], "--out", str(out),
                            "--max-components", "30", "--no-plots"], tmp_path)
    _wait_for(proc, "WRITING")
    proc.send_signal(signal.SIGINT)
    _, err = proc.communicate(timeout=120)
    assert proc.returncode == 3, err
    assert "interrupted while writing" in err and "Traceback" not in err
    rep = json.load(open(out / "report.json"))
    assert rep["stop"]["reason"] != "interrupted"
    assert not (out / INCOMPLETE_MARKER).exists() and (out / "components.csv").exists()
    for name in ("model.fits", "residual.fits", "restored.fits"):
        assert _fits_ok(out / name)


def test_hard_kill_while_writing_keeps_outputs_complete_and_marked(inputs, tmp_path):
    out = tmp_path / "out"
    proc = _start("write", ["run", inputs[0], inputs[1], "--out", str(out),
                            "--max-components", "30", "--no-plots"], tmp_path)
    _wait_for(proc, "WRITING")
    proc.kill()
    proc.communicate(timeout=60)
    assert (out / INCOMPLETE_MARKER).exists()
    for name in ("model.fits", "residual.fits", "restored.fits"):
        assert _fits_ok(out / name)
    assert not (out / "report.json").exists()


KILL_WRITER = textwrap.dedent("""
    import sys
    import numpy as np
    from skyscale.io.fits import write_image
    data = np.random.default_rng(1).random((4000, 4000))
    print("GO", flush=True)
    write_image(sys.argv[1], data, bunit="Jy/beam", overwrite=True)
    print("DONE", flush=True)
""")


@pytest.mark.parametrize("previous", [True, False], ids=["over-an-old-file", "new-file"])
def test_sigkill_during_a_large_write_never_leaves_a_half_file(previous, tmp_path):
    target = tmp_path / "model.fits"
    if previous:
        skyscale.write_image(target, np.ones((8, 8)), bunit="Jy/pixel")
        before = target.read_bytes()
    script = tmp_path / "writer.py"
    script.write_text(KILL_WRITER)
    proc = subprocess.Popen([sys.executable, str(script), str(target)], stdout=subprocess.PIPE,
                            text=True, env=dict(os.environ, PYTHONPATH=ENGINE))
    assert proc.stdout.readline().startswith("GO")
    t0 = time.monotonic()
    temps = []
    while not temps and time.monotonic() - t0 < 60:
        temps = [p for p in os.listdir(tmp_path) if p.startswith(".model.fits.")]
        time.sleep(0.002)
    assert temps and proc.poll() is None, "the write finished before it could be killed"
    proc.kill()
    proc.wait(timeout=60)
    if previous:
        assert target.read_bytes() == before and _fits_ok(target)
    else:
        assert not target.exists()
    assert remove_stale_temps(str(tmp_path)) == temps        # the dead writer's leftovers
    assert not [p for p in os.listdir(tmp_path) if p.endswith(".tmp")]


def test_resume_continues_from_the_written_model(inputs, tmp_path):
    out = tmp_path / "out"
    first = ["--quiet", "run", inputs[0], inputs[1], "--out", str(out), "--scales", "0,4",
             "--max-components", "40", "--no-plots"]
    assert main(first) == 0
    rep1 = json.load(open(out / "report.json"))
    flux1 = float(fits.getdata(out / "model.fits").sum(dtype=np.float64))
    assert main(["--quiet", "run", "--resume", str(out), "--max-components", "40"]) == 0
    rep2 = json.load(open(out / "report.json"))
    assert rep2["inputs"]["resumed_from"]["path"].endswith("model.fits")
    assert rep2["parameters"]["scales"] == [0.0, 4.0]            # taken from the first run
    flux2 = float(fits.getdata(out / "model.fits").sum(dtype=np.float64))
    assert flux2 > flux1
    assert rep2["final"]["peak_residual"] < rep1["final"]["peak_residual"]
