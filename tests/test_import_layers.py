"""The package's layers import only downward and no package's modules import round a
circle: the contracts in ``.importlinter``, checked with the import-linter package
(its ``layers`` and ``acyclic_siblings`` contracts), on this tree and on copies of it
with one import that breaks a contract.  Guards of the layout (common practice).
"""

import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

pytest.importorskip("importlinter", reason="import-linter (the test extra) checks the layers")

ROOT = Path(__file__).resolve().parents[1]
LINT = ("import sys; from importlinter.cli import lint_imports; "
        "sys.exit(lint_imports(config_filename='.importlinter', no_cache=True, no_logo=True))")


def _lint(root):
    env = dict(os.environ, PYTHONPATH=str(root / "engine"))
    return subprocess.run([sys.executable, "-c", LINT], cwd=root, env=env,
                          capture_output=True, text=True, timeout=300)


def _copy_with(tmp_path, module, line):
    """A copy of the package and its contracts with ``line`` appended to ``module``."""
    shutil.copytree(ROOT / "engine" / "skyscale", tmp_path / "engine" / "skyscale",
                    ignore=shutil.ignore_patterns("__pycache__"))
    shutil.copy(ROOT / ".importlinter", tmp_path / ".importlinter")
    path = tmp_path / "engine" / "skyscale" / module
    path.write_text(path.read_text() + f"\n{line}\n")
    return tmp_path


def test_this_tree_keeps_every_contract():
    done = _lint(ROOT)
    assert done.returncode == 0, done.stdout + done.stderr
    assert "2 kept, 0 broken" in done.stdout


@pytest.mark.parametrize("module, line", [
    ("core/scales.py", "import skyscale.cli.console"),      # the algorithm imports the CLI
    ("core/noise.py", "import skyscale.cost.planner"),      # core imports a layer above it
    ("io/report.py", "import skyscale.job.files"),          # io imports the job above it
    ("job/files.py", "import skyscale.cube.run"),           # the job imports cubes
])
def test_an_upward_import_breaks_the_layers(tmp_path, module, line):
    done = _lint(_copy_with(tmp_path, module, line))
    assert done.returncode != 0
    assert "Each layer imports only the layers below it BROKEN" in done.stdout


def test_a_circle_inside_a_layer_breaks_the_contract(tmp_path):
    # core.driver imports core.validate; the reverse closes a circle inside core
    done = _lint(_copy_with(tmp_path, "core/validate.py", "import skyscale.core.driver"))
    assert done.returncode != 0
    assert "No import circles between the modules of a package BROKEN" in done.stdout
