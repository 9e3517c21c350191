"""Files of a wideband run: term images, spectral maps, components, report, figure.

Every file is written atomically (`skyscale.io.fits.write_image`,
`skyscale.io.atomic`) and none is overwritten without ``overwrite``.  FITS images carry
the reference frequency (``TAYLNU0``, Hz) and, for term images, the term's index
(``TAYLTERM``).
"""

import csv
import io
import json
import os

import numpy as np

from skyscale.io.atomic import atomic_write_bytes, check_output_dir
from skyscale.io.fits import write_image

__all__ = ["OUTPUT_FILES", "write_wideband", "wideband_report", "plot_spectral_index"]

#: What each output file holds (``{t}`` is the Taylor term's index).
OUTPUT_FILES = {
    "model_t{t}.fits": "Taylor term t of the model, Jy/pixel",
    "residual_t{t}.fits": "Taylor-weighted residual image t, Jy/beam",
    "restored_t{t}.fits": "restored Taylor coefficient t, Jy/beam",
    "spectral-index.fits": "spectral index, NaN where blanked (2 or more terms)",
    "spectral-index-error.fits": "its first-order error, NaN where blanked",
    "curvature.fits": "spectral curvature, NaN where blanked (3 terms)",
    "curvature-error.fits": "its error (3 terms)",
    "components.csv": "one row per component: y, x, scale_px, flux_jy and each higher "
                      "term's amplitude (term1_jy, term2_jy)",
    "wideband-report.json": "parameters, stop, reference frequency, channel weights, "
                            "Hessians, blanking level, per-term noise, history",
    "spectral-index.png": "the spectral index beside its error",
}


def _extra(result, term=None):
    out = {"TAYLNU0": (float(result.reference_frequency), "Taylor reference frequency, Hz")}
    if term is not None:
        out["TAYLTERM"] = (int(term), "Taylor term: coefficient of ((nu-nu0)/nu0)**t")
    return out


def wideband_report(result):
    """The run as a JSON-ready dict."""
    return {
        "stop_reason": result.stop_reason, "stop": result.stop_description,
        "terms": result.n_terms, "reference_frequency_hz": float(result.reference_frequency),
        "frequencies_hz": [float(f) for f in result.frequencies],
        "channel_weights": [float(w) for w in result.channel_weights],
        "components": int(result.components.size),
        "flux_term0_jy": float(result.terms[0].sum(dtype=np.float64)),
        "spectral_maps": None if result.blank_level is None else {
            "method": result.index_method, "blanked_below_jy_per_beam": result.blank_level,
            "blank_snr": result.index_snr,
            "term_noise_jy_per_beam": result.term_noise},
        "beam_px": None if result.beam is None else result.beam.as_dict(),
        "hessians": None if result.hessians is None else np.asarray(result.hessians).tolist(),
        "scales_px": [float(s) for s in result.scales],
        "mask": None if result.mask is None else {
            "automatic": result.emission_mask is not None,
            "fraction": float(np.mean(result.mask))},
        "scale_noise": result.scale_noise, "scale_levels": result.scale_levels,
        "channel_residual_rms": [float(np.sqrt(np.mean(np.square(r, dtype=np.float64))))
                                 for r in result.channel_residuals],
        "parameters": result.parameters, "timings": result.timings,
        "warnings": list(result.warnings),
        "history": [h.as_dict() for h in result.history],
        "sub_loops": result.sub_loops, "rejected_sub_loops": result.rejected_sub_loops,
    }


def _components_csv(components, n_terms):
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(["y", "x", "scale_px", "flux_jy"] + [f"term{t}_jy" for t in range(1, n_terms)])
    for row in components:
        w.writerow([int(row["y"]), int(row["x"]), float(row["scale"]), repr(float(row["flux"]))]
                   + [repr(float(row[f"term{t}"])) for t in range(1, n_terms)])
    return buf.getvalue().encode()


def plot_spectral_index(result, path, *, overwrite=False):
    """Write a PNG of the spectral index beside its error (blanked pixels blank)."""
    from skyscale.io.figures.common import new_figure, save_png
    fig = new_figure((1100, 480))
    axes = fig.subplots(1, 2)
    for ax, data, title, cmap in (
            (axes[0], result.spectral_index, "spectral index", "coolwarm"),
            (axes[1], result.spectral_index_error, "spectral index error", "viridis")):
        finite = np.isfinite(data)
        lo, hi = (np.percentile(data[finite], [1, 99]) if finite.any() else (0.0, 1.0))
        im = ax.imshow(data, origin="lower", cmap=cmap, vmin=lo, vmax=hi,
                       interpolation="nearest")
        ax.set_title(title)
        ax.set_xlabel("x (pixels)")
        ax.set_ylabel("y (pixels)")
        fig.colorbar(im, ax=ax, shrink=0.85)
    fig.suptitle(f"reference frequency {result.reference_frequency / 1e9:.4g} GHz; blanked "
                 f"below {result.blank_level:.3g} Jy/beam")
    return save_png(fig, path, overwrite)


def write_wideband(result, out, *, like=None, overwrite=False, figure=True):
    """Write every output of a wideband run into the folder ``out``.

    Parameters
    ----------
    result : WidebandResult
    out : str or os.PathLike
        Output folder (made when missing).
    like : astropy WCS or Header, optional
        The celestial grid of the inputs (FITS keeps WCS and beam keywords).
    overwrite : bool
    figure : bool
        Write ``spectral-index.png`` (needs matplotlib).

    Returns
    -------
    list of str
        The paths written.
    """
    out = os.fspath(out)
    os.makedirs(out, exist_ok=True)
    check_output_dir(out)
    beam = result.beam if like is not None else None
    written = []

    def image(name, data, bunit, term=None, with_beam=True):
        written.append(write_image(os.path.join(out, name), np.asarray(data), like=like,
                                   bunit=bunit, beam=beam if with_beam else None,
                                   extra=_extra(result, term), overwrite=overwrite))

    for t in range(result.n_terms):
        image(f"model_t{t}.fits", result.terms[t], "Jy/pixel", t, with_beam=False)
        image(f"residual_t{t}.fits", result.residuals[t], "Jy/beam", t)
        if result.restored is not None:
            image(f"restored_t{t}.fits", result.restored[t], "Jy/beam", t)
    if result.spectral_index is not None:
        image("spectral-index.fits", result.spectral_index.astype(np.float32), "")
        image("spectral-index-error.fits", result.spectral_index_error.astype(np.float32), "")
    if result.curvature is not None:
        image("curvature.fits", result.curvature.astype(np.float32), "")
        image("curvature-error.fits", result.curvature_error.astype(np.float32), "")
    written.append(atomic_write_bytes(os.path.join(out, "components.csv"),
                                      _components_csv(result.components, result.n_terms),
                                      overwrite=overwrite))
    written.append(atomic_write_bytes(
        os.path.join(out, "wideband-report.json"),
        (json.dumps(wideband_report(result), indent=1, default=float) + "\n").encode(),
        overwrite=overwrite))
    if figure and result.spectral_index is not None:
        written.append(os.fspath(plot_spectral_index(
            result, os.path.join(out, "spectral-index.png"), overwrite=overwrite)))
    return [os.fspath(p) for p in written]
