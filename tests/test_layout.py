"""The package layout: subpackages offer their names, and the paths and names of the
flat layout (release 0.1) still work for one release with a DeprecationWarning that
names the new place.  These guard the layout (common practice), not a published value.
"""

import importlib
import subprocess
import sys
import warnings

import pytest

import skyscale
from skyscale import _moved

SUBPACKAGES = ["core", "core.kernels", "io", "io.figures", "masks", "advisor", "cost",
               "cube", "visibility", "cli"]


@pytest.mark.parametrize("name", SUBPACKAGES)
def test_every_name_a_subpackage_offers_resolves(name):
    package = importlib.import_module(f"skyscale.{name}")
    for attr in package.__all__:
        assert getattr(package, attr) is not None, attr


def test_the_top_level_is_the_algorithm_and_a_few_entry_points():
    assert len(skyscale.__all__) <= 30
    for name in skyscale.__all__:
        assert getattr(skyscale, name) is not None
    assert skyscale.deconvolve.__module__ == "skyscale.core.driver"


def test_old_module_paths_are_the_new_modules_with_a_warning():
    # in a fresh interpreter, so that no old path has been imported yet
    code = """
import importlib, json, sys, warnings
from skyscale._moved import MOVED_MODULES
bad = []
for old, new in sorted(MOVED_MODULES.items()):
    with warnings.catch_warnings(record=True) as w:
        warnings.simplefilter("always")
        a = importlib.import_module("skyscale." + old)
    b = importlib.import_module("skyscale." + new)
    said = [str(x.message) for x in w if issubclass(x.category, DeprecationWarning)]
    if a is not b or not any("skyscale." + new in s for s in said):
        bad.append([old, new, said])
print(json.dumps(bad))
"""
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
    assert done.returncode == 0, done.stderr
    assert done.stdout.strip() == "[]"


@pytest.mark.parametrize("name, module", sorted(_moved.MOVED_NAMES.items()))
def test_old_top_level_names_warn_and_are_the_same_object(name, module):
    with pytest.warns(DeprecationWarning, match=f"skyscale.{module}.{name}"):
        old = getattr(skyscale, name)
    assert old is getattr(importlib.import_module(f"skyscale.{module}"), name)


def test_an_unknown_name_is_still_an_attribute_error():
    with pytest.raises(AttributeError, match="no attribute 'no_such_name'"):
        skyscale.no_such_name   # noqa: B018


def test_old_kernel_submodule_path_is_the_loaded_module():
    import skyscale.core.kernels.stamp as new
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DeprecationWarning)
        old = importlib.import_module("skyscale.kernels.stamp")
    assert old is new
