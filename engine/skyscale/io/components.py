"""The component table as written to ``components.csv``: one row per pixel and scale.

A CLEAN run finds a component at every iteration, and the same pixel and scale are
picked many times as their flux is taken off in loop-gain steps.  The model is the sum
of them all, so components at the same pixel and scale add: `merge_components` sums
their flux into one row and counts the iterations merged (``iterations``), which keeps
the table as long as the number of distinct (pixel, scale) pairs and the model the same.
"""

import numpy as np

__all__ = ["MERGED_COMPONENT_DTYPE", "merge_components", "component_rows",
           "component_fields"]

#: Fields of the merged table: pixel position, scale diameter (pixels), summed flux (Jy)
#: and the number of iterations merged into the row.
MERGED_COMPONENT_DTYPE = np.dtype([("y", np.int32), ("x", np.int32), ("scale", np.float32),
                                   ("flux", np.float64), ("iterations", np.int64)])


def merge_components(components):
    """Merge components at the same pixel and scale, summing their flux.

    Parameters
    ----------
    components : structured ndarray
        One row per iteration with fields ``y``, ``x``, ``scale`` and ``flux``
        (`skyscale.core.result.COMPONENT_DTYPE`).

    Returns
    -------
    merged : structured ndarray of `MERGED_COMPONENT_DTYPE`
        One row per distinct ``(y, x, scale)``, in the order each first appears in
        ``components`` (the order cleaning found them); ``flux`` is the sum (float64)
        of the merged rows' flux and ``iterations`` how many rows were merged.

    Raises
    ------
    TypeError
        If ``components`` lacks one of the fields.

    Examples
    --------
    >>> from skyscale.core.result import empty_components
    >>> c = empty_components(3)
    >>> c["y"], c["x"], c["flux"] = [5, 5, 7], [2, 2, 2], [0.5, 0.25, 1.0]
    >>> m = merge_components(c)
    >>> m["flux"].tolist(), m["iterations"].tolist()
    ([0.75, 1.0], [2, 1])
    """
    names = getattr(getattr(components, "dtype", None), "names", None) or ()
    missing = [f for f in ("y", "x", "scale", "flux") if f not in names]
    if missing:
        raise TypeError(f"components has no field {', '.join(missing)}; pass the component "
                        "table of a run (fields y, x, scale, flux)")
    comps = np.asarray(components).ravel()
    merged = np.zeros(0, dtype=MERGED_COMPONENT_DTYPE)
    if comps.size == 0:
        return merged
    keys = np.empty(comps.size, dtype=[("y", np.int64), ("x", np.int64), ("scale", np.float32)])
    keys["y"], keys["x"], keys["scale"] = comps["y"], comps["x"], comps["scale"]
    _, first, inverse = np.unique(keys, return_index=True, return_inverse=True)
    inverse = inverse.ravel()
    flux = np.zeros(first.size, dtype=np.float64)
    np.add.at(flux, inverse, comps["flux"].astype(np.float64))
    counts = np.bincount(inverse, minlength=first.size)
    order = np.argsort(first, kind="stable")          # first appearance, not sorted keys
    merged = np.zeros(first.size, dtype=MERGED_COMPONENT_DTYPE)
    src = comps[first[order]]
    merged["y"], merged["x"], merged["scale"] = src["y"], src["x"], src["scale"]
    merged["flux"], merged["iterations"] = flux[order], counts[order]
    return merged


def component_rows(components, wcs=None, cell_arcsec=None):
    """Rows for ``components.csv``: one per distinct pixel and scale (flux summed).

    Components at the same pixel and scale are merged (`merge_components`); each row
    holds y, x, RA and Dec (degrees, where a WCS exists), the scale in pixels and in
    arcsec (where ``cell_arcsec`` is known), the summed flux (Jy) and
    ``merged_iterations``, the number of iterations merged into it.
    """
    merged = merge_components(components)
    rows = []
    if wcs is not None and merged.size:
        sky = wcs.pixel_to_world_values(merged["x"].astype(float), merged["y"].astype(float))
        ra, dec = np.atleast_1d(sky[0]), np.atleast_1d(sky[1])
    for i, c in enumerate(merged):
        row = {"y": int(c["y"]), "x": int(c["x"])}
        if wcs is not None:
            row["ra_deg"] = f"{ra[i]:.7f}"
            row["dec_deg"] = f"{dec[i]:.7f}"
        row["scale_px"] = f"{float(c['scale']):g}"
        if cell_arcsec is not None:
            row["scale_arcsec"] = f"{float(c['scale']) * cell_arcsec:.6g}"
        row["flux_jy"] = f"{float(c['flux']):.9e}"
        row["merged_iterations"] = int(c["iterations"])
        rows.append(row)
    return rows


def component_fields(wcs=None, cell_arcsec=None):
    """Column names of ``components.csv``, in order (see `component_rows`)."""
    return (["y", "x"] + (["ra_deg", "dec_deg"] if wcs is not None else []) + ["scale_px"]
            + (["scale_arcsec"] if cell_arcsec is not None else [])
            + ["flux_jy", "merged_iterations"])
