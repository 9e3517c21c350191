"""`skyscale.wideband.plan.plan_wideband` and ``skyscale plan --terms``.

The memory check is against tracemalloc's peak of a real run (Python standard library);
times are measured in benchmarks/wideband_terms.py, never asserted here.
"""

import json
import tracemalloc

import numpy as np
import pytest

import skyscale
from skyscale.cli import main
from skyscale.wideband.plan import plan_wideband
from wideband_fields import band, observe, power_law, psf_cube

SHAPE = (64, 64)


def test_plan_memory_covers_a_measured_run():
    freqs = band(8)
    psfs = psf_cube(freqs, n=128).astype(np.float32)
    sky = np.zeros((8,) + SHAPE)
    sky[:, 30, 34] = power_law(freqs, 0.5, -0.8)
    dirty = observe(sky, psfs, 1e-3, freqs)
    plan = plan_wideband(SHAPE, psfs.shape[1:], 8, 2, [0, 4, 8], threads=1)
    skyscale.deconvolve_wideband(dirty, psfs, freqs, terms=2, scales=[0, 4, 8],
                                 noise_threshold=3, threads=1)          # compiled
    tracemalloc.start()
    skyscale.deconvolve_wideband(dirty, psfs, freqs, terms=2, scales=[0, 4, 8],
                                 noise_threshold=3, threads=1)
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    assert peak <= plan["memory"]["total"] <= 2.0 * peak
    assert set(plan["seconds"]) >= {"updates", "loop", "major", "channels", "total"}
    assert plan["seconds"]["total"] == pytest.approx(
        sum(v for k, v in plan["seconds"].items() if k != "total"))
    # more terms: more beams and more transforms
    three = plan_wideband(SHAPE, psfs.shape[1:], 8, 3, [0, 4, 8], threads=1)
    assert three["memory"]["total"] > plan["memory"]["total"]
    assert three["seconds"]["total"] > plan["seconds"]["total"]


def test_plan_command_with_terms(capsys):
    code = main(["plan", "--size", "128", "--terms", "2", "--channels", "16", "--threads",
                 "1", "--json"])
    assert code == 0
    out = json.loads(capsys.readouterr().out)
    assert out["memory"]["total"] > 0 and out["seconds"]["total"] > 0
    assert any("joint loop" in a for a in out["assumptions"])
    code = main(["plan", "--size", "128", "--terms", "2"])
    assert code == 2
    assert "--channels" in capsys.readouterr().err
