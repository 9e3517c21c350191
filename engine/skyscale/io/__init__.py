"""Reading and writing: FITS images with WCS and beam keywords (`fits`; the cards an
output keeps in `fits_cards`; the grid on the sky, cell size and position angles, in
`grid`), the component table (`components`), the JSON report (`report`, its sections
in `report_records`), the figures (`figures`) and atomic writes (`atomic`).
"""

from skyscale._exports import lazy_exports

__all__, __getattr__, __dir__ = lazy_exports(__name__, {
    "fits": ["FitsImage", "read_image", "write_image", "check_same_grid",
             "write_table_csv"],
    "grid": ["cell_size_arcsec", "sky_position_angle", "pixel_position_angle"],
    "report": ["build_report", "write_report", "file_sha256"],
    "components": ["merge_components"],
})
