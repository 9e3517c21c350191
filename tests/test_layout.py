"""The package layout: each name a subpackage (or the top level) offers is the object of
the module that defines and lists it, and nothing of the flat layout's module paths or
names is left.  These guard the layout (common practice), not a published value.
"""

import importlib
import json
import os
import pkgutil
import subprocess
import sys

import pytest

import skyscale

SUBPACKAGES = ["core", "core.kernels", "io", "io.figures", "masks", "advisor", "cost",
               "job", "cube", "visibility", "wideband", "cli"]


def _modules_of(package):
    """The package and every module directly inside it."""
    yield package
    for info in pkgutil.iter_modules(package.__path__):
        if info.name == "__main__":           # runs the command line when imported
            continue
        yield importlib.import_module(f"{package.__name__}.{info.name}")


def _homes(package, name, obj):
    """Modules of ``package`` (searched to its sub-packages) that list ``name`` in their
    ``__all__`` and hold this very object under it."""
    found = []
    for module in _modules_of(package):
        if module is package:
            continue
        if hasattr(module, "__path__"):
            found += _homes(module, name, obj)
        elif name in getattr(module, "__all__", ()) and getattr(module, name, None) is obj:
            found.append(module.__name__)
    return found


@pytest.mark.parametrize("name", SUBPACKAGES)
def test_every_name_a_subpackage_offers_is_a_listed_name_of_one_of_its_modules(name):
    package = importlib.import_module(f"skyscale.{name}")
    assert package.__all__, f"skyscale.{name} offers nothing"
    unhomed = [attr for attr in package.__all__
               if not _homes(package, attr, getattr(package, attr))]
    assert unhomed == [], f"skyscale.{name} offers names no module of it lists: {unhomed}"


def test_the_top_level_is_the_algorithm_and_a_few_entry_points():
    assert len(skyscale.__all__) <= 30
    unhomed = [name for name in skyscale.__all__ if name != "__version__"
               and not _homes(skyscale, name, getattr(skyscale, name))]
    assert unhomed == []
    public = {n for n in set(vars(skyscale)) | set(dir(skyscale)) if not n.startswith("_")
              and not hasattr(getattr(skyscale, n), "__path__")}     # subpackages aside
    assert public == set(skyscale.__all__) - {"__version__"}
    assert skyscale.deconvolve.__module__ == "skyscale.core.driver"


@pytest.mark.parametrize("old", ["fitsio", "cycles", "minor", "job_vis", "kernels.stamp",
                                 "_moved"])
def test_the_flat_layouts_module_paths_are_gone(old):
    # in a fresh interpreter: nothing may serve an old path once skyscale is imported
    code = f"import skyscale, importlib; importlib.import_module('skyscale.{old}')"
    env = dict(os.environ, PYTHONPATH=os.pathsep.join(p for p in sys.path if p))
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                          env=env)
    assert done.returncode != 0
    assert "ModuleNotFoundError" in done.stderr


@pytest.mark.parametrize("name", ["fit_beam", "robust_noise", "Plan", "no_such_name"])
def test_names_that_are_not_offered_are_attribute_errors(name):
    with pytest.raises(AttributeError, match=f"no attribute '{name}'"):
        getattr(skyscale, name)


def test_import_skyscale_loads_nothing_yet_every_name_and_subpackage_resolves():
    # in a fresh interpreter: what the import loads, and what a user reaches from it
    code = ("import json, os, sys; import skyscale; "
            "loaded = sorted(m for m in sys.modules if m.startswith('skyscale')); "
            "spin = os.environ.get('GOMP_SPINCOUNT'); "
            "heavy = [m for m in ('numba', 'rich', 'matplotlib', 'dask', 'astropy') "
            "if m in sys.modules]; "
            "skyscale.masks.regions_to_mask, skyscale.cost.plan_run, skyscale.Engine; "
            "print(json.dumps([loaded, spin, heavy]))")
    env = {k: v for k, v in os.environ.items() if k != "GOMP_SPINCOUNT"}
    env["PYTHONPATH"] = os.pathsep.join(p for p in sys.path if p)
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                          env=env)
    assert done.returncode == 0, done.stderr
    loaded, spin, heavy = json.loads(done.stdout.strip().splitlines()[-1])
    assert loaded == ["skyscale", "skyscale._exports"]
    assert spin is None and heavy == []
