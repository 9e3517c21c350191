"""Tests of the merged component table (skyscale.io.components and components.csv).

Check values come from outside the code under test: sums in pure Python
(``math.fsum`` over a ``dict`` of lists), ``numpy.unique`` on the run's own component
list, the model image read back with astropy, the sky position from astropy's WCS, and
the file read back with ``numpy.genfromtxt``, ``astropy.table`` and ``csv``.
"""

import csv
import math
import os

import numpy as np
import pytest
from astropy.io import fits
from astropy.table import Table
from astropy.wcs import WCS

from skyscale.io.components import MERGED_COMPONENT_DTYPE, merge_components
from skyscale.job.files import run_files
from skyscale.io.components import component_fields, component_rows
from skyscale.core.result import empty_components

from smallfits import CELL, write_small_pair


def _table(rows):
    comps = empty_components(len(rows))
    for i, (y, x, s, f) in enumerate(rows):
        comps[i] = (y, x, s, f)
    return comps


#: A field with known repeats: (y, x, scale, flux); the pairs (5, 2, 0), (5, 2, 4) and
#: (9, 1, 0) repeat, (5, 2) on two scales must stay two rows.
REPEATS = [(5, 2, 0, 0.5), (9, 1, 0, 1.0), (5, 2, 0, 0.25), (5, 2, 4, 2.0),
           (5, 2, 0, 0.125), (9, 1, 0, -0.5), (3, 3, 8, 0.75), (5, 2, 4, 1.0)]


def test_merging_sums_flux_per_pixel_and_scale():
    merged = merge_components(_table(REPEATS))
    # Reference: the same grouping in pure Python, summed with math.fsum.
    groups = {}
    for y, x, s, f in REPEATS:
        groups.setdefault((y, x, float(s)), []).append(f)
    assert merged.dtype == MERGED_COMPONENT_DTYPE
    assert len(merged) == len(groups) == 4
    got = {(int(r["y"]), int(r["x"]), float(r["scale"])): (float(r["flux"]), int(r["iterations"]))
           for r in merged}
    assert got == {k: (math.fsum(v), len(v)) for k, v in groups.items()}
    # Rows keep the order in which cleaning first found each pair.
    assert [(int(r["y"]), int(r["x"]), float(r["scale"])) for r in merged] == list(groups)
    # The total flux and the iteration count are unchanged by merging.
    assert math.fsum(merged["flux"]) == pytest.approx(math.fsum(f for *_, f in REPEATS))
    assert int(merged["iterations"].sum()) == len(REPEATS)


def test_merging_an_empty_table_and_a_wrong_one():
    assert merge_components(empty_components(0)).size == 0
    with pytest.raises(TypeError, match="flux"):
        merge_components(np.zeros(3, dtype=[("y", int), ("x", int), ("scale", float)]))


def test_rows_carry_sky_position_scale_in_arcsec_and_the_count():
    w = WCS(naxis=2)
    w.wcs.ctype = ["RA---SIN", "DEC--SIN"]
    w.wcs.crval, w.wcs.crpix = [150.0, -30.0], [8.0, 8.0]
    w.wcs.cdelt = [-CELL / 3600.0, CELL / 3600.0]
    rows = component_rows(_table(REPEATS), w, CELL)
    assert list(rows[0]) == component_fields(w, CELL) == [
        "y", "x", "ra_deg", "dec_deg", "scale_px", "scale_arcsec", "flux_jy",
        "merged_iterations"]
    assert len(rows) == 4
    first = rows[0]
    # Reference: astropy's WCS for the sky position of pixel (x, y) = (2, 5).
    ra, dec = w.pixel_to_world_values(2.0, 5.0)
    assert float(first["ra_deg"]) == pytest.approx(float(ra), abs=1e-7)
    assert float(first["dec_deg"]) == pytest.approx(float(dec), abs=1e-7)
    assert first["merged_iterations"] == 3
    assert float(first["flux_jy"]) == pytest.approx(0.875, rel=1e-9)
    scale4 = next(r for r in rows if r["scale_px"] == "4")
    assert float(scale4["scale_arcsec"]) == pytest.approx(4 * CELL)
    assert component_fields() == ["y", "x", "scale_px", "flux_jy", "merged_iterations"]


@pytest.fixture(scope="module")
def run(tmp_path_factory):
    folder = tmp_path_factory.mktemp("table")
    dirty, psf = write_small_pair(str(folder))
    out = os.path.join(folder, "out")
    result, written, report = run_files(dirty, psf, out, {
        "scales": [0, 4], "max_components": 300, "noise_threshold": 3.0, "plots": False})
    return result, out, report


def test_written_table_has_one_row_per_pixel_and_scale(run):
    result, out, report = run
    path = os.path.join(out, "components.csv")
    comps = result.components
    # Reference: numpy.unique over the run's own (iteration by iteration) component list.
    pairs, counts = np.unique(np.stack([comps["y"], comps["x"], comps["scale"]]), axis=1,
                              return_counts=True)
    assert counts.max() > 1                      # the bright point source is hit repeatedly
    rows = list(csv.DictReader(open(path)))
    assert len(rows) == pairs.shape[1] < comps.size
    assert report["final"]["component_table_rows"] == len(rows)
    # Read as a pipeline would: numpy and astropy.table see the same columns.
    arr = np.genfromtxt(path, delimiter=",", names=True, dtype=None, encoding="utf-8")
    tab = Table.read(path, format="ascii.csv")
    assert arr.size == len(tab) == len(rows)
    assert "merged_iterations" in tab.colnames and "merged_iterations" in arr.dtype.names
    assert int(np.sum(tab["merged_iterations"])) == comps.size == report["final"]["components"]
    assert sorted(tab["merged_iterations"].tolist()) == sorted(counts.tolist())
    # The total flux is unchanged: the model written by the run, read with astropy.
    model = fits.getdata(os.path.join(out, "model.fits")).astype(np.float64)
    assert float(np.sum(tab["flux_jy"])) == pytest.approx(float(model.sum()), rel=1e-6)
    assert float(np.sum(arr["flux_jy"])) == pytest.approx(float(comps["flux"].sum()),
                                                          rel=1e-8)
    # Scale in arcsec from the dirty image's WCS (2 arcsec cells).
    assert np.allclose(tab["scale_arcsec"], tab["scale_px"] * CELL)
