"""The visibility operator against outside references: the measurement equation, the
analytic visibilities of point sources, the adjoint identity, the definitions of
uniform and robust weighting; then the demo's visibilities end to end."""

import json
import os
import pathlib
import subprocess
import sys

import numpy as np
import pytest
from astropy.io import fits

pytest.importorskip("ducc0")

import skyscale  # noqa: E402
from skyscale.cli.commands import main as cli_main  # noqa: E402
from skyscale.masks import EmissionMask  # noqa: E402
from skyscale.core.noise import robust_noise  # noqa: E402
from skyscale.visibility.file import read_visibilities, write_visibilities  # noqa: E402
from skyscale.visibility.operator import VisibilityOperator, largest_cell_arcsec  # noqa: E402
import skyscale.core.beam  # noqa: E402

C = 299792458.0                      # m/s, SI definition
ARCSEC = np.pi / 180 / 3600
DEMO = pathlib.Path(__file__).resolve().parents[1] / "demo_data"
ENGINE = pathlib.Path(__file__).resolve().parents[1] / "engine"


# ------------------------------------------------------------------ references
def direction_cosines(shape, cell_rad):
    """l, m, n of every pixel: y (rows) north = +m, x (columns) west = -l, centre n // 2."""
    ny, nx = shape
    y, x = np.mgrid[0:ny, 0:nx].astype(np.float64)
    l = -(x - nx // 2) * cell_rad
    m = (y - ny // 2) * cell_rad
    return l, m, np.sqrt(1.0 - l ** 2 - m ** 2)


def direct_dirty(uvw, freqs, vis, weights, shape, cell_rad):
    """Dirty image by the direct Fourier sum of the measurement equation (TMS 2017 ch. 3):
    Re sum_k w_k V_k exp(+2 pi i (u l + v m + w (n - 1))) / sum_k w_k."""
    l, m, n = direction_cosines(shape, cell_rad)
    out = np.zeros(shape)
    for c, f in enumerate(freqs):
        ul = uvw * f / C
        for k in range(uvw.shape[0]):
            if weights[k, c] == 0:
                continue
            phase = 2 * np.pi * (ul[k, 0] * l + ul[k, 1] * m + ul[k, 2] * (n - 1))
            out += weights[k, c] * np.real(vis[k, c] * np.exp(1j * phase))
    return out / weights.sum()


def point_source_vis(uvw, freqs, sources, shape, cell_rad):
    """Analytic visibilities of point sources: sum S exp(-2 pi i (u l + v m + w (n - 1)))."""
    l, m, n = direction_cosines(shape, cell_rad)
    out = np.zeros((uvw.shape[0], len(freqs)), dtype=np.complex128)
    for (y, x, s) in sources:
        for c, f in enumerate(freqs):
            ul = uvw * f / C
            out[:, c] += s * np.exp(-2j * np.pi * (ul[:, 0] * l[y, x] + ul[:, 1] * m[y, x]
                                                    + ul[:, 2] * (n[y, x] - 1)))
    return out


def l2_error(a, b):
    """Relative L2 error, the measure the gridder's accuracy epsilon refers to (Arras et al.
    2021, A&A 646, A58, from memory)."""
    return float(np.linalg.norm(a - b) / np.linalg.norm(b))


@pytest.fixture(scope="module")
def wide():
    """A small, wide field where the w-term matters: 64 px of 20 arcsec, w up to ~3 km."""
    rng = np.random.default_rng(11)
    nrow = 300
    uvw = rng.normal(scale=[250.0, 250.0, 1000.0], size=(nrow, 3))
    freqs = np.array([1.2e9, 1.4e9])
    vis = rng.normal(size=(nrow, 2)) + 1j * rng.normal(size=(nrow, 2))
    weights = rng.uniform(0.5, 2.0, size=(nrow, 2))
    flags = rng.uniform(size=(nrow, 2)) < 0.1
    return dict(uvw=uvw, freqs=freqs, vis=vis, weights=weights, flags=flags, npix=64,
                cell=20.0)


def make_op(d, **kw):
    kw.setdefault("flags", d["flags"])
    return VisibilityOperator(d["uvw"], d["freqs"], d["vis"], d["weights"], npix=d["npix"],
                              cell_arcsec=d["cell"], **kw)


# ------------------------------------------------------------------ the operator
@pytest.mark.parametrize("epsilon", [1e-4, 1e-6, 1e-9])
def test_dirty_matches_direct_fourier_sum(wide, epsilon):
    """Measurement equation, Thompson, Moran & Swenson 2017 ch. 3, to the gridder's accuracy."""
    op = make_op(wide, epsilon=epsilon, dtype=np.float64)
    w = np.where(wide["flags"], 0.0, wide["weights"])
    ref = direct_dirty(wide["uvw"], wide["freqs"], wide["vis"], w, (64, 64), op.cell_rad)
    assert l2_error(op.dirty_image(), ref) < epsilon
    # the w-term is large here: leaving it out is far off the reference
    flat = make_op(wide, epsilon=epsilon, dtype=np.float64, wgridding=False)
    assert l2_error(flat.dirty_image(), ref) > 1e-2


def test_dirty_float32_default(wide):
    op = make_op(wide)
    w = np.where(wide["flags"], 0.0, wide["weights"])
    ref = direct_dirty(wide["uvw"], wide["freqs"], wide["vis"], w, (64, 64), op.cell_rad)
    dirty = op.dirty_image()
    assert dirty.dtype == np.float32 and op.psf_image().dtype == np.float32
    assert l2_error(dirty, ref) < 1e-5


def test_degrid_point_sources_analytic(wide):
    """S exp(-2 pi i (u l + v m + w (n - 1))) for each point source (analytic)."""
    sources = [(32, 32, 1.5), (10, 50, 0.7), (55, 5, -0.4)]
    model = np.zeros((64, 64))
    for y, x, s in sources:
        model[y, x] = s
    for eps in (1e-5, 1e-8):
        op = make_op(wide, epsilon=eps, dtype=np.float64, flags=None)
        ref = point_source_vis(wide["uvw"], wide["freqs"], sources, (64, 64), op.cell_rad)
        assert l2_error(op.degrid(model), ref) < eps


def test_residual_of_exact_model_is_zero(wide):
    """Visibilities that are exactly a model's leave a residual at the gridder's accuracy."""
    sources = [(20, 40, 2.0), (44, 12, 0.5)]
    model = np.zeros((64, 64))
    for y, x, s in sources:
        model[y, x] = s
    vis = point_source_vis(wide["uvw"], wide["freqs"], sources, (64, 64), 20 * ARCSEC)
    op = VisibilityOperator(wide["uvw"], wide["freqs"], vis, wide["weights"], npix=64,
                            cell_arcsec=20.0, dtype=np.float64, epsilon=1e-8)
    dirty = op.dirty_image()
    # a point source of S Jy at a pixel reads S Jy/beam there (the normalisation)
    assert dirty[20, 40] == pytest.approx(2.0, abs=0.05)
    assert np.abs(op(model)).max() < 1e-7 * np.abs(dirty).max()
    assert np.array_equal(op(np.zeros((64, 64))), dirty)


def test_adjoint(wide):
    """<A x, y> = <x, A^H y> for random x, y (linear algebra); A = degrid, A^H = grid with
    the weights, the real inner product on the visibilities."""
    rng = np.random.default_rng(3)
    op = make_op(wide, dtype=np.float64, epsilon=1e-10)
    x = rng.normal(size=(64, 64))
    y = rng.normal(size=wide["vis"].shape) + 1j * rng.normal(size=wide["vis"].shape)
    lhs = np.sum(np.real(np.conj(op.degrid(x)) * y) * op.imaging_weights)
    rhs = np.sum(x * op.grid(y))
    assert lhs == pytest.approx(rhs, rel=1e-8)


def test_psf_shape_peak_symmetry(wide):
    op = make_op(wide, weighting="briggs", robust=0.5)
    psf = op.psf_image()
    assert psf.shape == (128, 128)
    assert psf[64, 64] == 1.0
    assert np.unravel_index(np.argmax(psf), psf.shape) == (64, 64)
    # without the w-term the PSF is point-symmetric (Hermitian uv coverage, common
    # practice); the w-term phase w (n - 1) is even in (l, m) and breaks that symmetry
    flat = make_op(wide, weighting="briggs", robust=0.5, wgridding=False).psf_image()[1:, 1:]
    np.testing.assert_allclose(flat, flat[::-1, ::-1], atol=1e-4)
    core = psf[1:, 1:]
    assert np.abs(core - core[::-1, ::-1]).max() > 1e-2
    # and it is the dirty image of a 1 Jy point source at the phase centre (the
    # normalisation); natural weights, as the density grid depends on the image size
    nat = make_op(wide).psf_image()
    src = VisibilityOperator(wide["uvw"], wide["freqs"], np.ones_like(wide["vis"]),
                             wide["weights"], flags=wide["flags"], npix=128, cell_arcsec=20.0)
    np.testing.assert_allclose(nat, src.dirty_image(), atol=1e-4)


def test_threads_do_not_change_the_result(wide):
    """skyscale's rule: results do not depend on the thread count."""
    model = np.zeros((64, 64), np.float32)
    model[30, 31] = 1.0
    a, b = make_op(wide, threads=1), make_op(wide, threads=2)
    assert np.array_equal(a.dirty_image(), b.dirty_image())
    assert np.array_equal(a.psf_image(), b.psf_image())
    assert np.array_equal(a(model), b(model))


# ------------------------------------------------------------------ weighting
def naive_cell_totals(uvw, freqs, weights, npix, cell_rad):
    """Total weight per uv cell of the image's grid (cell 1 / (npix cell)), each sample also
    counted at its Hermitian twin; a plain loop over samples with a dict."""
    du = 1.0 / (npix * cell_rad)
    totals = {}
    for k in range(uvw.shape[0]):
        for c, f in enumerate(freqs):
            if weights[k, c] == 0:
                continue
            iu = int(np.rint(uvw[k, 0] * f / C / du))
            iv = int(np.rint(uvw[k, 1] * f / C / du))
            for key in ((iu, iv), (-iu, -iv)):
                totals[key] = totals.get(key, 0.0) + weights[k, c]
    return totals


def test_uniform_weighting_equal_weight_per_cell(wide):
    """Uniform weighting: every occupied uv cell carries the same total weight (definition,
    Briggs 1995)."""
    op = make_op(wide, weighting="uniform", dtype=np.float64)
    w = op.imaging_weights
    totals = naive_cell_totals(wide["uvw"], wide["freqs"], w, 64, op.cell_rad)
    values = np.array(list(totals.values()))
    assert values.size > 50
    np.testing.assert_allclose(values, values[0], rtol=1e-12)
    # natural weighting does not: the cell totals spread
    nat = naive_cell_totals(wide["uvw"], wide["freqs"],
                            np.where(wide["flags"], 0, wide["weights"]), 64, op.cell_rad)
    assert np.ptp(list(nat.values())) > 1.0


def test_robust_limits_natural_and_uniform(wide):
    """Briggs 1995: robust weighting tends to natural for large R, to uniform for small R."""
    def normed(**kw):
        w = make_op(wide, dtype=np.float64, **kw).imaging_weights
        return w / w.max()
    natural, uniform = normed(weighting="natural"), normed(weighting="uniform")
    np.testing.assert_allclose(normed(weighting="briggs", robust=6.0), natural, atol=1e-6)
    np.testing.assert_allclose(normed(weighting="briggs", robust=-6.0), uniform, atol=1e-6)
    # in between it trades sensitivity for resolution: the noise factor
    # sqrt(sum w^2) / sum w grows as R falls (Briggs 1995)
    noise = []
    for r in (2.0, 0.0, -2.0):
        w = normed(weighting="briggs", robust=r)
        noise.append(np.sqrt(np.sum(w ** 2)) / np.sum(w))
    assert noise[0] < noise[1] < noise[2]


# ------------------------------------------------------------------ bad input
def test_bad_input_one_clear_error(wide):
    d = dict(wide)
    with pytest.raises(ValueError, match=r"vis has shape \(300, 3\).*\(300, 2\)"):
        VisibilityOperator(d["uvw"], d["freqs"], np.zeros((300, 3), complex), d["weights"],
                           npix=64, cell_arcsec=20.0)
    with pytest.raises(ValueError, match=r"uvw has shape \(300, 2\)"):
        VisibilityOperator(d["uvw"][:, :2], d["freqs"], d["vis"], d["weights"], npix=64,
                           cell_arcsec=20.0)
    with pytest.raises(ValueError, match="all 600 visibilities are flagged or have zero weight"):
        make_op(d, flags=np.ones((300, 2), bool))
    with pytest.raises(ValueError, match="flagged or have zero weight"):
        VisibilityOperator(d["uvw"], d["freqs"], d["vis"], np.zeros((300, 2)), npix=64,
                           cell_arcsec=20.0)
    with pytest.raises(ValueError, match="negative"):
        VisibilityOperator(d["uvw"], d["freqs"], d["vis"], -d["weights"], npix=64,
                           cell_arcsec=20.0)
    with pytest.raises(ValueError, match="even size of at least 32"):
        make_op(dict(d, npix=63))
    with pytest.raises(ValueError, match="weighting is 'robust'; valid values"):
        make_op(d, weighting="robust")
    with pytest.raises(ValueError, match="epsilon"):
        make_op(d, epsilon=1.0)


def test_nan_visibilities_refused_unless_flagged(wide):
    vis = wide["vis"].copy()
    vis[7, 1] = np.nan
    with pytest.raises(ValueError, match=r"vis has 1 non-finite .*row 7, channel 1.*flag them"):
        VisibilityOperator(wide["uvw"], wide["freqs"], vis, wide["weights"], npix=64,
                           cell_arcsec=20.0)
    flags = ~np.isfinite(vis)
    op = VisibilityOperator(wide["uvw"], wide["freqs"], vis, wide["weights"], flags=flags,
                            npix=64, cell_arcsec=20.0)
    assert np.all(np.isfinite(op.dirty_image()))


def test_cell_too_coarse_names_the_largest_cell(wide):
    # Nyquist sampling of the uv plane: cell <= 1 / (2 max(|u|, |v|)) (common practice)
    uv_max = np.abs(wide["uvw"][:, :2]).max() * wide["freqs"].max() / C
    largest = 1.0 / (2 * uv_max) / ARCSEC
    assert largest_cell_arcsec(wide["uvw"], wide["freqs"]) == pytest.approx(largest)
    with pytest.raises(ValueError, match=f"largest cell that samples it is {largest:.4g} arcsec"):
        make_op(dict(wide, cell=1.2 * largest))
    make_op(dict(wide, cell=0.99 * largest))


def test_uvw_in_wavelengths_detected():
    """Demo baselines given in wavelengths (x f / c = 10.7) where metres are expected."""
    data = read_visibilities(DEMO / "visibilities.npz")
    in_wavelengths = data.uvw * data.freqs[0] / C
    with pytest.raises(ValueError, match="in wavelengths rather than metres"):
        VisibilityOperator(in_wavelengths, data.freqs, data.vis, data.weights, npix=256,
                           cell_arcsec=2.0)
    # far beyond any baseline as metres: refused whatever the cell
    with pytest.raises(ValueError, match="implausibly long for metres"):
        VisibilityOperator(data.uvw * 1e6, data.freqs, data.vis, data.weights, npix=256,
                           cell_arcsec=1e-6)


def test_missing_gridder_is_one_import_error():
    """Without ducc0, skyscale imports and VisibilityOperator says what to install."""
    code = ("import sys; sys.modules['ducc0'] = None; import skyscale, numpy as np\n"
            "try:\n"
            "    skyscale.VisibilityOperator(np.zeros((1, 3)), [1e9], np.ones((1, 1)),"
            " np.ones((1, 1)), npix=32, cell_arcsec=1.0)\n"
            "except ImportError as e:\n"
            "    print('IMPORT-ERROR', e)\n")
    env = dict(os.environ, PYTHONPATH=str(ENGINE))
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, env=env,
                         timeout=300)
    assert out.returncode == 0, out.stderr
    assert "IMPORT-ERROR" in out.stdout and "pip install 'skyscale[vis]'" in out.stdout


# ------------------------------------------------------------------ the file
def test_visibility_file_round_trip(tmp_path, wide):
    path = tmp_path / "obs.npz"
    write_visibilities(path, wide["uvw"], wide["freqs"], wide["vis"], wide["weights"],
                       flags=wide["flags"], phase_centre_deg=(10.0, -30.0), description="x")
    data = read_visibilities(path)
    np.testing.assert_array_equal(data.uvw, wide["uvw"])
    np.testing.assert_array_equal(data.vis, wide["vis"])
    np.testing.assert_array_equal(data.flags, wide["flags"])
    assert data.phase_centre_deg == (10.0, -30.0)
    with pytest.raises(FileExistsError):
        write_visibilities(path, wide["uvw"], wide["freqs"], wide["vis"], wide["weights"])
    np.savez(tmp_path / "other.npz", a=np.zeros(3))
    with pytest.raises(ValueError, match="expected 'skyscale-visibilities'"):
        read_visibilities(tmp_path / "other.npz")
    with pytest.raises(FileNotFoundError):
        read_visibilities(tmp_path / "none.npz")


# ------------------------------------------------------------------ the demo
@pytest.fixture(scope="module")
def demo_op():
    return VisibilityOperator.from_file(DEMO / "visibilities.npz", npix=256, cell_arcsec=2.0)


@pytest.fixture(scope="module")
def demo_truth():
    truth = json.loads((DEMO / "truth.json").read_text())
    return truth, fits.getdata(DEMO / "true_sky.fits").astype(np.float32)


def test_demo_residual_of_the_true_sky_is_the_noise(demo_op, demo_truth):
    """The demo's visibilities are the true sky plus the stated noise: subtracting the true
    sky leaves the thermal noise (robust estimate, Rousseeuw & Croux 1993)."""
    truth, sky = demo_truth
    residual = demo_op(sky)
    assert robust_noise(residual) == pytest.approx(truth["noise_jy_per_beam"], rel=0.05)
    assert robust_noise(demo_op.dirty_image()) > 5 * truth["noise_jy_per_beam"]


def test_demo_dirty_matches_the_fits_dirty(demo_op):
    """Same observation both ways: the dirty image from the visibilities matches dirty.fits
    up to its nearest-cell gridding and neglected w-term."""
    fits_dirty = fits.getdata(DEMO / "dirty.fits").astype(np.float64)
    mine = demo_op.dirty_image().astype(np.float64)
    assert np.corrcoef(mine.ravel(), fits_dirty.ravel())[0, 1] > 0.99
    # nearest-cell gridding moves each sample by up to half a uv cell: about 9 % rms of
    # difference, nearly all of it (the w-term adds < 0.1 % of that)
    assert np.std(mine - fits_dirty) < 0.1 * np.std(fits_dirty)


SCALES = [0, 4, 8, 16, 32]


def _run(dirty, psf, operator=None):
    mask = EmissionMask(SCALES, skyscale.core.beam.fit_beam(psf).major)
    return skyscale.deconvolve(dirty, psf, scales=SCALES, noise_threshold=3.0, emission_mask=mask,
                               operator=operator, restore=False)


def test_demo_end_to_end_major_cycles_against_the_data(demo_op, demo_truth):
    """Major cycles against the visibilities (Schwab 1984) converge to the thermal noise and
    recover the true flux at least as well as the image-plane path, within 0.1 % of the
    total flux."""
    truth, sky = demo_truth
    total = float(sky.sum(dtype=np.float64))
    vis_run = _run(demo_op.dirty_image(), demo_op.psf_image(), demo_op)
    img_same = _run(demo_op.dirty_image(), demo_op.psf_image())
    img_fits = _run(fits.getdata(DEMO / "dirty.fits"), fits.getdata(DEMO / "psf.fits"))
    assert vis_run.stop_reason == "noise"
    # the residual is the data's: re-computing it from the model gives the same image
    np.testing.assert_allclose(vis_run.residual, demo_op(vis_run.model), atol=1e-7)
    assert robust_noise(vis_run.residual) < 1.3 * truth["noise_jy_per_beam"]
    err = {name: abs(float(r.model.sum(dtype=np.float64)) - total)
           for name, r in (("vis", vis_run), ("image", img_same), ("fits", img_fits))}
    print(f"flux error, Jy: {err}")
    assert err["vis"] <= err["image"] + 1e-3 * total
    assert err["vis"] <= err["fits"] + 1e-3 * total


def test_pipeline_loop_over_minor_cycles(demo_op):
    """A pipeline's own loop: Engine.minor_cycle between the operator's major cycles."""
    psf = demo_op.psf_image()
    engine = skyscale.Engine(psf, [0, 4, 8], image_shape=(256, 256))
    residual = demo_op.dirty_image()
    start = np.abs(residual).max()
    model = np.zeros((256, 256), np.float32)
    for _ in range(4):
        mc = engine.minor_cycle(residual, model, cycle_depth=0.3)
        model = mc.model
        residual = demo_op(model)
    assert np.abs(residual).max() < 0.1 * start
    assert model.sum() > 0.2


# ------------------------------------------------------------------ the command line
def test_cli_visibility_run_and_report(tmp_path, capsys):
    out = tmp_path / "run"
    code = cli_main(["run", "--visibilities", str(DEMO / "visibilities.npz"), "--size", "128",
                     "--cell", "2", "--weighting", "briggs", "--robust", "0.5",
                     "--max-major-cycles", "2", "--out", str(out), "--quiet", "--no-plots",
                     "--threads", "1"])
    assert code == 0
    report = json.loads((out / "report.json").read_text())
    assert report["major_cycle"]["operator"] == "VisibilityOperator"
    assert report["major_cycle"]["weighting"] == "briggs"
    assert report["major_cycle"]["threads"] == 1
    assert fits.getdata(out / "psf.fits").shape == (256, 256)
    assert fits.getheader(out / "dirty.fits")["CTYPE1"] == "RA---SIN"


@pytest.mark.parametrize("argv, message", [
    (["--visibilities", "V", "--size", "256"], "--visibilities needs --cell"),
    (["--visibilities", "V", "--size", "256", "--cell", "20"], "too coarse"),
    (["--visibilities", "V", "--size", "255", "--cell", "2"], "even size"),
    (["D", "P", "--weighting", "uniform"], "apply to --visibilities runs only"),
])
def test_cli_bad_visibility_input_exits_2(tmp_path, capsys, argv, message):
    argv = [str(DEMO / "visibilities.npz") if a == "V" else
            str(DEMO / "dirty.fits") if a == "D" else str(DEMO / "psf.fits") if a == "P"
            else a for a in argv]
    assert cli_main(["run", *argv, "--out", str(tmp_path / "o"), "--quiet"]) == 2
    assert message in capsys.readouterr().err
    assert not (tmp_path / "o").exists()
