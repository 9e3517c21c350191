"""What the command line tells a user: the region text in ``run --help`` and its refusal of
degrees written without a unit, on the demo files.

Check values: the demo image's own sky position from its header through astropy.wcs
(reference library); the region syntax from `skyscale.masks.regions` (pixels 0-based, x y).
"""

import os

from astropy.io import fits
from astropy.wcs import WCS

from skyscale.cli.commands import demo_data_dir, main

DEMO = demo_data_dir()
DIRTY = os.path.join(DEMO, "dirty.fits")
PSF = os.path.join(DEMO, "psf.fits")


def test_run_help_documents_the_region_text(capsys):
    try:
        main(["run", "--help"])
    except SystemExit:
        pass
    text = " ".join(capsys.readouterr().out.split())
    start = text.index("--mask-regions MASK_REGIONS")
    words = text[start:text.index("--emission-mask ", start)]
    for part in ("circle X Y R", "box X1 Y1 X2 Y2", "0-based", "X = column", "[Y, X]",
                 "deg", "arcsec", "09h41m17s", "refused"):
        assert part in words, part


def test_run_refuses_degrees_without_a_unit_before_any_work(tmp_path, capsys):
    # reference library: astropy.wcs, the sky position of pixel (140, 110) of the demo
    sky = WCS(fits.getheader(DIRTY)).celestial.pixel_to_world(140, 110)
    ra, dec = f"{sky.ra.deg:.3f}", f"{sky.dec.deg:.3f}"
    out = tmp_path / "out"
    code = main(["--quiet", "run", DIRTY, PSF, "--out", str(out), "--no-plots",
                 "--mask-regions", f"circle {ra} {dec} 30"])
    err = capsys.readouterr().err.strip().splitlines()
    assert code == 2 and len(err) == 1, err
    assert err[0].startswith("skyscale: error: --mask-regions: regions entry 1")
    assert f"'{ra}deg {dec}deg'" in err[0] and f"'{ra}px {dec}px'" in err[0]
    assert not out.exists()
