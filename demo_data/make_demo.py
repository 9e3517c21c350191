"""Make skyscale's invented demo observation: a dirty image, its PSF and the true sky.

Everything here is invented: the array (the "Brackwater Ridge Array", 26 antennas at
latitude +36.8 deg), the field ("Quillon Field") and its sky position.  Run it from
anywhere::

    python demo_data/make_demo.py            # writes into demo_data/
    python demo_data/make_demo.py --out DIR  # writes into DIR

It writes ``dirty.fits`` (Jy/beam), ``psf.fits`` (peak 1 at pixel (256, 256)),
``true_sky.fits`` (Jy/pixel), ``truth.json`` (noise level, component fluxes and
positions, array layout) and ``visibilities.npz`` (the same observation as
visibilities, in skyscale's own visibility file), and prints a short report.  The
seed is fixed, so the output is the same on every run up to floating-point rounding
of the FFTs.

How it is made
--------------
1. Antenna positions (east, north) in metres: a dense core and five longer arms.
2. Earth-rotation tracks: for every baseline and hour angle H, the baseline in
   equatorial components (X, Y, Z) is projected onto (u, v, w) with TMS 2017,
   eq. 4.1, at the field's declination.  The field is small, so the w-term is
   neglected (2-D imaging); the script reports how small its phase is.
3. Natural weighting: every sample and its Hermitian twin (-u, -v) is put on the
   nearest cell of a 512 x 512 uv grid (cell 1 / (512 * cellsize)); the weight of a
   cell is its sample count.
4. The PSF is the inverse FFT of the weight grid, scaled to peak 1.  The dirty image
   is the inverse FFT of weight * FFT(true sky, zero-padded to 512) plus the gridded
   thermal noise, cropped to 256 x 256, with the same scaling.  Because the padded
   grid is twice the image, this circular convolution equals the linear convolution
   ``dirty = PSF (*) true_sky + noise`` exactly; the script checks it with
   ``scipy.signal.fftconvolve`` and reports the largest difference.
5. The visibilities (needs the ``ducc0`` gridding library): the true sky's
   visibilities at every sample, ``V = sum S exp(-2 pi i (u l + v m + w (n - 1)))``
   with the w-term (TMS 2017, ch. 3), computed by ``ducc0.wgridder.dirty2vis`` in
   double precision at accuracy 1e-12, plus the very same thermal noise sample by
   sample as in the dirty image; weights ``1 / sigma^2``.  uvw are stored in metres
   as float32 (about 0.1 mm on the longest baseline) to keep the file small.  Made
   into an image with natural weighting this gives the dirty image above, up to the
   nearest-cell gridding and the w-term that step 3 neglects.

References
----------
.. [1] Thompson, A. R., Moran, J. M. & Swenson, G. W. 2017, Interferometry and
   Synthesis in Radio Astronomy, 3rd ed., eq. 4.1 (u, v, w from the baseline
   components, the hour angle and the declination).
"""

import argparse
import importlib.util
import json
import pathlib
import sys

import numpy as np
from astropy.io import fits
from astropy.wcs import WCS
from scipy import ndimage
from scipy.signal import fftconvolve

# ---------------------------------------------------------------- invented settings
SEED = 4127
ARRAY_NAME = "Brackwater Ridge Array"
ARRAY_LATITUDE_DEG = 36.8          # invented
FREQUENCY_HZ = 3.2e9               # invented single frequency
FIELD_NAME = "Quillon Field"
FIELD_RA_DEG = 145.32083           # 09h41m17.0s, invented
FIELD_DEC_DEG = 25.30              # +25d18m00s, invented
HOUR_ANGLE_RANGE_H = (-4.0, 4.0)
HOUR_ANGLE_STEP_S = 120.0

IMAGE_SIZE = 256
PSF_SIZE = 2 * IMAGE_SIZE
CELL_ARCSEC = 2.0
NOISE_JY_PER_BEAM = 5.0e-5         # target image noise (natural weighting)

C_LIGHT = 299792458.0

# The field.  Positions are 0-based pixels (x = column, y = row) of the 256 x 256 image.
DISK = dict(x=150.0, y=118.0, diameter_px=50.0, edge_px=4.0, flux_jy=0.20)
BLOBS = [
    dict(name="blob_a", x=92.0, y=152.0, sigma_major_px=14.0, sigma_minor_px=5.0,
         pa_deg=35.0, flux_jy=0.06),
    dict(name="blob_b", x=118.0, y=84.0, sigma_major_px=8.0, sigma_minor_px=4.0,
         pa_deg=-60.0, flux_jy=0.02),
]
POINTS = [
    dict(name="point_on_disk", x=140, y=110, flux_jy=0.015, isolated=False),
    dict(name="point_on_blob", x=100, y=146, flux_jy=0.008, isolated=False),
    dict(name="point_isolated", x=205, y=205, flux_jy=0.010, isolated=True),
    dict(name="point_faint", x=200, y=50, flux_jy=0.003, isolated=False),
    dict(name="point_west", x=196, y=150, flux_jy=0.005, isolated=False),
]


# ---------------------------------------------------------------- the array
def antenna_layout(rng):
    """Return the invented antenna positions, (26, 2) east/north metres.

    Six antennas scattered in a core 150 m in radius (at least 30 m apart) and five
    straight arms, 72 degrees apart, of four antennas each out to about 1.65 km.
    """
    core = []
    while len(core) < 6:
        r = 150.0 * np.sqrt(rng.uniform())
        t = rng.uniform(0, 2 * np.pi)
        p = np.array([r * np.cos(t), r * np.sin(t)])
        if all(np.hypot(*(p - q)) > 30.0 for q in core):
            core.append(p)
    arms = []
    for angle in (20.0, 92.0, 164.0, 236.0, 308.0):
        for radius in (250.0, 560.0, 1020.0, 1650.0):
            a = np.deg2rad(angle + rng.uniform(-6, 6))
            rr = radius * rng.uniform(0.93, 1.07)
            arms.append([rr * np.sin(a), rr * np.cos(a)])   # angle east of north
    return np.vstack([np.array(core), np.array(arms)])


def enu_to_xyz(east, north, latitude_deg):
    """Local east/north (up = 0) to equatorial baseline components X, Y, Z (metres).

    X points to hour angle 0 on the equator, Y to hour angle -6 h, Z to the pole.
    """
    lat = np.deg2rad(latitude_deg)
    x = -north * np.sin(lat)
    y = east
    z = north * np.cos(lat)
    return x, y, z


def uvw_tracks(positions, latitude_deg, dec_deg, hour_angles_rad, wavelength):
    """u, v, w (wavelengths) for every baseline and hour angle, TMS 2017 eq. 4.1.

    Returns three arrays of shape (n_baselines * n_times,).
    """
    i, j = np.triu_indices(len(positions), k=1)
    d = positions[j] - positions[i]
    bx, by, bz = enu_to_xyz(d[:, 0], d[:, 1], latitude_deg)
    bx, by, bz = (c[:, None] / wavelength for c in (bx, by, bz))
    h = hour_angles_rad[None, :]
    dec = np.deg2rad(dec_deg)
    u = np.sin(h) * bx + np.cos(h) * by
    v = -np.sin(dec) * np.cos(h) * bx + np.sin(dec) * np.sin(h) * by + np.cos(dec) * bz
    w = np.cos(dec) * np.cos(h) * bx - np.cos(dec) * np.sin(h) * by + np.sin(dec) * bz
    return u.ravel(), v.ravel(), w.ravel()


# ---------------------------------------------------------------- the field
def true_sky(n):
    """The invented field in Jy/pixel, float64 (n, n)."""
    yy, xx = np.mgrid[0:n, 0:n].astype(np.float64)
    sky = np.zeros((n, n))
    # Flat-topped disk with a raised-cosine edge, scaled to its total flux.
    r = np.hypot(xx - DISK["x"], yy - DISK["y"])
    r0 = DISK["diameter_px"] / 2 - DISK["edge_px"] / 2
    t = np.clip((r - r0) / DISK["edge_px"], 0.0, 1.0)
    disk = 0.5 * (1 + np.cos(np.pi * t))
    sky += DISK["flux_jy"] * disk / disk.sum()
    for b in BLOBS:
        pa = np.deg2rad(b["pa_deg"])      # major axis angle from +y towards -x (north through east)
        dx, dy = xx - b["x"], yy - b["y"]
        a_maj = -dx * np.sin(pa) + dy * np.cos(pa)
        a_min = dx * np.cos(pa) + dy * np.sin(pa)
        g = np.exp(-0.5 * ((a_maj / b["sigma_major_px"]) ** 2 + (a_min / b["sigma_minor_px"]) ** 2))
        sky += b["flux_jy"] * g / g.sum()
    for p in POINTS:
        sky[p["y"], p["x"]] += p["flux_jy"]
    return sky


# ---------------------------------------------------------------- imaging on the grid
def grid_samples(u, v, n_grid, cell_rad):
    """Nearest-cell indices (row, column) of the samples and their Hermitian twins.

    Column = centre - u / du: the image x axis runs towards decreasing RA.
    """
    du = 1.0 / (n_grid * cell_rad)
    iu = np.rint(u / du).astype(np.int64)
    iv = np.rint(v / du).astype(np.int64)
    c = n_grid // 2
    if np.abs(iu).max() >= c or np.abs(iv).max() >= c:
        raise ValueError("uv samples fall off the grid: make the cell smaller")
    rows = np.concatenate([c + iv, c - iv])
    cols = np.concatenate([c - iu, c + iu])
    return rows, cols


def centred_fft2(a):
    return np.fft.fftshift(np.fft.fft2(np.fft.ifftshift(a)))


def centred_ifft2(a):
    return np.fft.fftshift(np.fft.ifft2(np.fft.ifftshift(a)))


def simulate(seed=SEED):
    """Run the simulation; return a dict of float32 images and the truth record."""
    rng = np.random.default_rng(seed)
    wavelength = C_LIGHT / FREQUENCY_HZ
    cell_rad = np.deg2rad(CELL_ARCSEC / 3600.0)
    positions = antenna_layout(rng)
    h0, h1 = HOUR_ANGLE_RANGE_H
    n_times = int(round((h1 - h0) * 3600 / HOUR_ANGLE_STEP_S)) + 1
    hour_angles = np.deg2rad(15.0 * np.linspace(h0, h1, n_times))
    u, v, w = uvw_tracks(positions, ARRAY_LATITUDE_DEG, FIELD_DEC_DEG, hour_angles, wavelength)
    n_vis = u.size

    rows, cols = grid_samples(u, v, PSF_SIZE, cell_rad)
    weights = np.zeros((PSF_SIZE, PSF_SIZE))
    np.add.at(weights, (rows, cols), 1.0)

    # Thermal noise: complex Gaussian, per-component sigma s; natural weighting gives an
    # image noise of s / sqrt(n_vis), so s is set from the target image noise.
    s = NOISE_JY_PER_BEAM * np.sqrt(n_vis)
    noise = s * (rng.standard_normal(n_vis) + 1j * rng.standard_normal(n_vis))
    noise_grid = np.zeros((PSF_SIZE, PSF_SIZE), dtype=np.complex128)
    np.add.at(noise_grid, (rows, cols), np.concatenate([noise, np.conj(noise)]))

    norm = weights.sum() / PSF_SIZE ** 2          # value of ifft2(weights) at the origin
    psf = centred_ifft2(weights).real / norm
    psf /= psf[PSF_SIZE // 2, PSF_SIZE // 2]

    sky = true_sky(IMAGE_SIZE).astype(np.float32).astype(np.float64)
    lo, hi = IMAGE_SIZE // 2, IMAGE_SIZE // 2 + IMAGE_SIZE
    pad = np.zeros((PSF_SIZE, PSF_SIZE))
    pad[lo:hi, lo:hi] = sky
    seen = centred_ifft2(weights * centred_fft2(pad)).real / norm
    noise_img = centred_ifft2(noise_grid).real / norm
    dirty = (seen + noise_img)[lo:hi, lo:hi]
    noise_img = noise_img[lo:hi, lo:hi]

    # Self-check: the dirty image is the linear convolution of the true sky with the PSF.
    n = IMAGE_SIZE
    conv = fftconvolve(sky, psf, mode="full")[PSF_SIZE // 2:PSF_SIZE // 2 + n,
                                              PSF_SIZE // 2:PSF_SIZE // 2 + n]
    max_diff = float(np.abs(dirty - noise_img - conv).max())

    half = psf > 0.5
    lab, _ = ndimage.label(half)
    lobe = lab == lab[PSF_SIZE // 2, PSF_SIZE // 2]
    fwhm_px = 2.0 * np.sqrt(lobe.sum() / np.pi)

    w_phase = float(np.pi * np.abs(w).max() * (IMAGE_SIZE / 2 * np.sqrt(2) * cell_rad) ** 2)
    baselines = np.hypot(*(positions[:, None, :] - positions[None, :, :]).transpose(2, 0, 1))
    baselines = baselines[np.triu_indices(len(positions), 1)]

    truth = dict(
        description="Invented demo observation made by demo_data/make_demo.py",
        seed=seed,
        array=dict(name=ARRAY_NAME, latitude_deg=ARRAY_LATITUDE_DEG,
                   frequency_hz=FREQUENCY_HZ, n_antennas=len(positions),
                   antennas_east_north_m=np.round(positions, 1).tolist(),
                   shortest_baseline_m=round(float(baselines.min()), 1),
                   longest_baseline_m=round(float(baselines.max()), 1)),
        observation=dict(field=FIELD_NAME, ra_deg=FIELD_RA_DEG, dec_deg=FIELD_DEC_DEG,
                         hour_angle_h=list(HOUR_ANGLE_RANGE_H),
                         hour_angle_step_s=HOUR_ANGLE_STEP_S, n_visibilities=n_vis,
                         visibility_noise_jy=float(s),
                         max_w_term_phase_rad=round(w_phase, 4)),
        image=dict(size=IMAGE_SIZE, psf_size=PSF_SIZE, cell_arcsec=CELL_ARCSEC,
                   psf_half_power_fwhm_px=round(float(fwhm_px), 3)),
        noise_jy_per_beam=float(noise_img.std()),
        noise_expected_jy_per_beam=NOISE_JY_PER_BEAM,
        consistency_max_abs_diff=max_diff,
        total_flux_jy=float(sky.sum()),
        disk=dict(DISK),
        blobs=[dict(b) for b in BLOBS],
        points=[dict(p) for p in POINTS],
    )
    images = dict(dirty=dirty.astype(np.float32), psf=psf.astype(np.float32),
                  true_sky=sky.astype(np.float32))
    samples = dict(uvw_m=np.stack([u, v, w], axis=1) * wavelength, noise=noise, sigma=s)
    return images, truth, samples


# ---------------------------------------------------------------- the visibilities
VIS_FILE = "visibilities.npz"
VIS_EPSILON = 1e-12


def observe(sky, uvw_m):
    """Noise-free visibilities of ``sky`` (Jy/pixel, [y, x]) at ``uvw_m`` (metres), Jy.

    ``V = sum S exp(-2 pi i (u l + v m + w (n - 1)))`` with l = -(x - n // 2) cell
    (RA increases to the left) and m = (y - n // 2) cell, by ``ducc0.wgridder``.
    """
    from ducc0 import wgridder
    cell_rad = np.deg2rad(CELL_ARCSEC / 3600.0)
    # the gridder's first image axis pairs with uvw[:, 0]: (v, -u, w) puts y north, x west
    uvw = np.ascontiguousarray(np.stack([uvw_m[:, 1], -uvw_m[:, 0], uvw_m[:, 2]], axis=1))
    vis = wgridder.dirty2vis(uvw=uvw, freq=np.array([FREQUENCY_HZ]),
                             dirty=np.ascontiguousarray(sky, dtype=np.float64),
                             pixsize_x=cell_rad, pixsize_y=cell_rad, epsilon=VIS_EPSILON,
                             do_wgridding=True, flip_w=True, divide_by_n=False, nthreads=1)
    return vis[:, 0]


def write_visibility_file(images, samples, truth, out_dir):
    """Write ``visibilities.npz`` (skyscale's visibility file) into ``out_dir``."""
    engine = pathlib.Path(__file__).resolve().parents[1] / "engine"
    if engine.is_dir():   # this source tree's skyscale, not another installed one
        sys.path.insert(0, str(engine))
    from skyscale.visibility.file import write_visibilities
    sky = images["true_sky"].astype(np.float64)
    vis = observe(sky, samples["uvw_m"]) + samples["noise"]
    weight = np.full(vis.shape, 1.0 / samples["sigma"] ** 2)
    path = pathlib.Path(out_dir) / VIS_FILE
    write_visibilities(path, samples["uvw_m"], [FREQUENCY_HZ], vis[:, None].astype(np.complex64),
                       weight[:, None], phase_centre_deg=(FIELD_RA_DEG, FIELD_DEC_DEG),
                       description=f"{truth['description']}: {FIELD_NAME} observed with the "
                                   f"{ARRAY_NAME} (invented), seed {truth['seed']}",
                       overwrite=True, uvw_dtype=np.float32)
    return path


# ---------------------------------------------------------------- output
def _header(n, bunit, truth, kind):
    hdr = fits.Header()
    hdr["CTYPE1"] = "RA---SIN"
    hdr["CTYPE2"] = "DEC--SIN"
    hdr["CRPIX1"] = n // 2 + 1.0          # FITS pixels are 1-based: pixel (n//2, n//2) 0-based
    hdr["CRPIX2"] = n // 2 + 1.0
    hdr["CRVAL1"] = FIELD_RA_DEG
    hdr["CRVAL2"] = FIELD_DEC_DEG
    hdr["CDELT1"] = -CELL_ARCSEC / 3600.0  # RA increases to the left
    hdr["CDELT2"] = CELL_ARCSEC / 3600.0
    hdr["CUNIT1"] = "deg"
    hdr["CUNIT2"] = "deg"
    hdr["RADESYS"] = "ICRS"
    hdr["BUNIT"] = bunit
    hdr["OBJECT"] = FIELD_NAME
    hdr["TELESCOP"] = "BRACKWATER"
    hdr["RESTFRQ"] = FREQUENCY_HZ
    hdr["ORIGIN"] = "skyscale demo_data/make_demo.py"
    hdr["COMMENT"] = f"Invented demo data ({kind}); seed {truth['seed']}; not a real observation."
    if kind == "dirty":
        hdr["NOISE"] = (truth["noise_jy_per_beam"], "rms of the added noise image, Jy/beam")
    return hdr


def add_sky_positions(truth):
    """Add the RA/Dec (degrees, ICRS) of every listed component to ``truth``."""
    wcs = WCS(_header(IMAGE_SIZE, "Jy/pixel", truth, "true_sky"))
    for item in [truth["disk"], *truth["blobs"], *truth["points"]]:
        ra, dec = wcs.pixel_to_world_values(item["x"], item["y"])
        item["ra_deg"], item["dec_deg"] = round(float(ra), 6), round(float(dec), 6)
    return truth


def write_outputs(images, truth, out_dir):
    """Write the three FITS files and truth.json into ``out_dir``."""
    out = pathlib.Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    units = dict(dirty="Jy/beam", psf="", true_sky="Jy/pixel")
    for name, data in images.items():
        hdu = fits.PrimaryHDU(data, header=_header(data.shape[0], units[name], truth, name))
        hdu.writeto(out / f"{name}.fits", overwrite=True)
    (out / "truth.json").write_text(json.dumps(truth, indent=2) + "\n")


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--out", default=str(pathlib.Path(__file__).resolve().parent),
                        help="output folder (default: the folder of this script)")
    args = parser.parse_args(argv)
    images, truth, samples = simulate()
    add_sky_positions(truth)
    truth["observation"]["visibility_file"] = dict(
        name=VIS_FILE, rows=int(samples["uvw_m"].shape[0]), channels=1,
        model_accuracy=VIS_EPSILON, uvw_storage="float32 metres", vis_storage="complex64 Jy")
    write_outputs(images, truth, args.out)
    if importlib.util.find_spec("ducc0") is not None:
        write_visibility_file(images, samples, truth, args.out)
        wrote_vis = f", {VIS_FILE}"
    else:
        wrote_vis = f" (not {VIS_FILE}: it needs the ducc0 gridding library, pip install ducc0)"
    print(f"{ARRAY_NAME}: {truth['array']['n_antennas']} antennas, baselines "
          f"{truth['array']['shortest_baseline_m']}-{truth['array']['longest_baseline_m']} m, "
          f"{truth['observation']['n_visibilities']} visibilities")
    print(f"PSF half-power FWHM ~ {truth['image']['psf_half_power_fwhm_px']:.2f} px; "
          f"max w-term phase {truth['observation']['max_w_term_phase_rad']:.3f} rad")
    print(f"noise {truth['noise_jy_per_beam'] * 1e6:.1f} uJy/beam "
          f"(expected {NOISE_JY_PER_BEAM * 1e6:.1f}); total flux {truth['total_flux_jy']:.4f} Jy")
    print(f"dirty - noise vs fftconvolve(true_sky, psf): max |diff| = "
          f"{truth['consistency_max_abs_diff']:.2e} Jy/beam")
    print(f"wrote dirty.fits, psf.fits, true_sky.fits, truth.json{wrote_vis} to {args.out}")


if __name__ == "__main__":
    main()
