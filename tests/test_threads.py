"""OpenMP's idle spin: set where threads are set up (skyscale.core.threads), readable back.

The rule checked is libgomp's documented behaviour (GCC manual, "GOMP_SPINCOUNT" and
"OMP_WAIT_POLICY"; from memory): the spin count is read from the environment when the
library loads, and a passive wait policy makes idle threads sleep at once.
"""

import json
import os
import subprocess
import sys

import pytest

from skyscale.core import threads as _threads

from skyscale.cost import planner
CHILD = ("import json, os, skyscale, skyscale.core.threads as t; "
         "before = os.environ.get('GOMP_SPINCOUNT'); "
         "t.thread_limit(1).__enter__(); "
         "print(json.dumps([before, os.environ.get('GOMP_SPINCOUNT'), t.openmp_wait()]))")


def _run_in_child(**env):
    full = {k: v for k, v in os.environ.items() if k != "GOMP_SPINCOUNT"}
    full.update(env)
    full["PYTHONPATH"] = os.pathsep.join(p for p in sys.path if p)
    out = subprocess.run([sys.executable, "-c", CHILD], env=full, check=True,
                         capture_output=True, text=True).stdout
    return json.loads(out.strip().splitlines()[-1])


def test_the_import_leaves_the_environment_and_a_run_sets_the_default():
    before, value, wait = _run_in_child()
    assert before is None                     # import skyscale changed nothing
    assert value == str(_threads.DEFAULT_GOMP_SPINCOUNT)
    assert wait["set_by_skyscale"] and wait["short"]


def test_a_users_spin_count_wins():
    before, value, wait = _run_in_child(GOMP_SPINCOUNT="infinite")
    assert before == value == "infinite"
    assert not wait["set_by_skyscale"] and not wait["short"]


@pytest.mark.parametrize("env, short", [
    ({"GOMP_SPINCOUNT": "20000"}, True),
    ({"GOMP_SPINCOUNT": str(_threads.SHORT_SPIN)}, True),
    ({"GOMP_SPINCOUNT": "30000000000"}, False),
    ({"GOMP_SPINCOUNT": "infinite"}, False),
    ({"GOMP_SPINCOUNT": "infinite", "OMP_WAIT_POLICY": "PASSIVE"}, True),
])
def test_openmp_wait_reads_what_is_in_effect(monkeypatch, env, short):
    monkeypatch.delenv("OMP_WAIT_POLICY", raising=False)
    for k, v in env.items():
        monkeypatch.setenv(k, v)
    wait = _threads.openmp_wait()
    assert wait["short"] is short
    assert wait["spin_count"] == env["GOMP_SPINCOUNT"]
    if short:                      # the planner's own check agrees where the spin is short
        assert planner._spinning_threads() is False
