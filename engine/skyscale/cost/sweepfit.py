"""Fitting the cost model to a sweep (`skyscale.cost.sweep.run_sweep`) and summarising it.

Every family is a non-negative least-squares fit weighted to relative errors
(`skyscale.cost.calibration.fit_nonnegative`); ``fit`` in the calibration holds each
family's rms and largest relative misfit.
"""

import math
import time

import numpy as np

from skyscale.cost import model as cost
from skyscale.cost import planner
from skyscale.core.calibration import DEFAULT_CALIBRATION
from skyscale.core.scales import ScaleSet
from skyscale.cost.calibration import fit_nonnegative, fit_power_law

__all__ = ["calibrate", "summarize", "step_ffts", "one_thread"]


def _geometry(rec):
    return cost.run_geometry(rec["image_shape"], rec["psf_shape"], rec["radii"],
                             itemsize=rec.get("itemsize", 4))


def one_thread(cal):
    """``cal`` with no parallel fractions: the sweep's points run on one thread."""
    return dict(cal, threads={"fft_parallel": 0.0, "loop_parallel": 0.0})


def _run_radii(run):
    return list(ScaleSet(run["scales"]).support_radii)


def _beam_features(geom, made, pixels, cal):
    """Features of making ``made`` beams of ``pixels`` each on the beams' grid (one
    forward FFT of the PSF and of each finite kernel, one inverse per beam)."""
    return [1.0, cost.fft_seconds([(geom.precompute_grid, 1 + geom.n_finite + made)],
                                  one_thread(cal)), made * pixels]


def step_ffts(geom, cal):
    """Predicted FFT seconds of each step at one thread under ``cal``'s FFT law."""
    return {k: cost.fft_seconds(v, one_thread(cal)) for k, v in geom.transforms().items()}


def _misfit(model, y):
    rel = np.asarray(model, dtype=float) / np.asarray(y, dtype=float) - 1.0
    return {"rms": float(np.sqrt(np.mean(rel ** 2))), "max": float(np.max(np.abs(rel))),
            "points": int(rel.size)}


def _parallel_fraction(t1, tn, n):
    if n <= 1 or not t1 > 0 or not tn > 0:
        return 0.0
    return float(np.clip((1.0 - tn / t1) / (1.0 - 1.0 / n), 0.0, 1.0))


def calibrate(sweep):
    """Fit the coefficients of `skyscale.cost` to a sweep's measurements."""
    pts = sweep["points"]
    cal = {k: (dict(v) if isinstance(v, dict) else v) for k, v in DEFAULT_CALIBRATION.items()}
    cal["source"] = ("skyscale bench, sizes {sizes}, ".format(**sweep["settings"])
                     + time.strftime("%Y-%m-%d"))
    cal["fit"] = {}
    f = sweep["fft"]
    law = fit_power_law([cost.fft_work(r["grid"]) for r in f], [r["seconds"] for r in f])
    cal["fft"] = {"coefficient": law["coefficient"], "exponent": law["exponents"][0]}
    cal["fit"]["fft"] = _misfit([law["coefficient"] * cost.fft_work(r["grid"]) **
                                 law["exponents"][0] for r in f], [r["seconds"] for r in f])
    geo = [_geometry(r) for r in pts]
    ffts = [step_ffts(g, cal) for g in geo]

    def fit(name, keys, rows, y):
        keep = [(row, v) for row, v in zip(rows, y) if v > 0]
        rows, y = [k[0] for k in keep], [k[1] for k in keep]
        coef, _ = fit_nonnegative(rows, y)
        cal[name] = {k: float(c) for k, c in zip(keys, coef)}
        cal["fit"][name] = _misfit(np.asarray(rows) @ coef, y)
    fit("precompute", ("fixed", "per_psf_pixel", "per_fft_second"),
        [[1.0, r["psf_shape"][0] * r["psf_shape"][1], t["precompute"]]
         for r, t in zip(pts, ffts)], [r["precompute_s"] for r in pts])
    # the beams: each making of beams in the points and the calibration runs (the
    # scales' beams by a cycle, a scale's pair beams by its first direct update)
    runs_all = sweep.get("runs", [])
    rows, ys = [], []
    for r in pts + runs_all:
        g = _geometry(dict(r, radii=_run_radii(r)))
        for made, pixels, secs in r.get("beam_rows", []):
            rows.append(_beam_features(g, made, pixels, cal))
            ys.append(secs)
    if rows:
        fit("beams", ("fixed", "per_fft_second", "per_beam_pixel"), rows, ys)
    upd = [(r, t) for r, t in zip(pts, ffts) if r["updates"] > 0]
    fit("round", ("fixed", "per_fft_second", "per_plane_pixel"),
        [[1.0, t["round"], r["n_scales"] * r["size"] ** 2] for r, t in upd],
        [r["round_s"] for r, _ in upd])
    # direct updates: the points', the calibration runs' and the probe's of the whole
    # image; the exponent of the pass over the tracked pixels from the probe's
    # one-component updates (their cost per pixel and plane against the tracked set)
    def passes(r):
        return cost.direct_passes(len(r["scales"]), 0 in r["scales"])
    direct = [(passes(r), u[1], u[2], u[3]) for r in pts + runs_all
              for u in r.get("update_rows", []) if u[0] == "direct"]
    probe = sweep.get("direct_probe", [])
    direct += [(passes(p), p["components"], p["tracked"], p["seconds"]) for p in probe]
    ones = [p for p in probe if p["components"] == 1]
    if len({p["tracked"] for p in ones}) >= 2:
        law = fit_power_law([p["tracked"] for p in ones],
                            [p["seconds"] / (passes(p) * p["tracked"]) for p in ones])
        cal["direct"]["pixel_exponent"] = float(np.clip(law["exponents"][0], 0.0, 1.0))
    delta = cal["direct"]["pixel_exponent"]
    if len(direct) >= 4:
        fit("direct", ("fixed", "per_madd", "per_pixel_plane"),
            [[1.0, m * nt * ps, cost.direct_pixel_planes(ps, nt, delta)]
             for ps, m, nt, _ in direct], [t for *_, t in direct])
        cal["direct"]["pixel_exponent"] = delta
        cal["direct"]["allowance_used"] = DEFAULT_CALIBRATION["direct"]["allowance_used"]
    cyc = [(r, c) for r in pts for c in r.get("cycle_rows", [])]
    if len(cyc) >= 3:
        fit("scan", ("cycle_fixed", "per_plane_pixel", "per_tracked_pixel"),
            [[1.0, r["n_scales"] * r["size"] ** 2, c[1] * r["n_scales"] * c[2]]
             for r, c in cyc], [c[0] for _, c in cyc])
    fit("major", ("fixed", "per_fft_second", "per_plane_pixel"),
        [[1.0, t["major"], r["size"] ** 2] for r, t in zip(pts, ffts)],
        [r["major_s"] for r in pts])
    fit("stats", ("fixed", "per_fft_second", "per_plane_pixel"),
        [[1.0, t["stats"], r["n_scales"] * r["size"] ** 2] for r, t in zip(pts, ffts)],
        [r["stats_s"] for r in pts])
    psf_s = cal["precompute"]["per_psf_pixel"]      # the operator checks the PSF too
    fit("setup", ("fixed", "per_fft_second"), [[1.0, t["setup"]] for t in ffts],
        [r["setup_s"] - psf_s * r["psf_shape"][0] * r["psf_shape"][1] for r in pts])
    loops = [row for r in pts + runs_all for row in r.get("loops", []) if row[1] > 0 and row[2] > 0]
    if len(loops) >= 4:
        fit("loop", cost.LOOP_TERMS, [cost.loop_features(a, m) for a, m, _ in loops],
            [t for _, _, t in loops])
    runs = [r for r in sweep.get("runs", []) if r["major_cycles"] > 0]
    if runs:
        rho = [r["rounds"] / (len(r["scales"]) * r["major_cycles"]) for r in runs]
        alpha = [r["active_pixels"] / (r["image_shape"][0] * r["image_shape"][1]) for r in runs]
        off = [r["major_cycles"] - math.log(max(r["dynamic_range"] or 1.0, 1.0)) / math.log(5.0)
               for r in runs]
        phi = [r["fft_updates"] / r["rounds"] for r in runs if r.get("rounds")]
        used = [r["allowance_used"] for r in runs if r.get("allowance_used")]
        cal["counts"] = {"rounds_per_scale_cycle": float(np.median(rho)),
                         "active_fraction": float(np.median(alpha)),
                         "cycles_offset": float(np.clip(np.median(off), 0.0, 5.0)),
                         "fft_update_fraction": float(np.median(phi)) if phi else
                         DEFAULT_CALIBRATION["counts"]["fft_update_fraction"]}
        if used:
            cal["direct"]["allowance_used"] = float(np.median(used))
    ft = sorted(sweep.get("fft_threads", []), key=lambda r: r["threads"])
    lt = sorted(sweep.get("loop_threads", []), key=lambda r: r["threads"])
    cal["threads"] = {
        "fft_parallel": _parallel_fraction(ft[0]["seconds"], ft[-1]["seconds"],
                                           ft[-1]["threads"]) if ft else 0.0,
        "loop_parallel": _parallel_fraction(lt[0]["seconds"], lt[-1]["seconds"],
                                            lt[-1]["threads"]) if lt else 0.0,
        "measured_with": float(ft[-1]["threads"]) if ft else 1.0}
    one = dict(cal, memory={"scale": 1.0})
    ratios = [r["traced_peak"] / cost.predict_memory(g, one)["peak"] for r, g in zip(pts, geo)]
    cal["memory"] = {"scale": float(np.median(ratios))}
    cal["fit"]["memory"] = _misfit(np.median(ratios), ratios)
    cal["range"] = {"max_image_pixels": max(r["size"] ** 2 for r in pts)}
    cold = sweep.get("cold_start", [])
    if cold:   # imports and the first run's extra, against the warm model of that run
        c = cold[0]
        warm = planner.plan_run((c["size"],) * 2, (2 * c["size"],) * 2, c["scales"],
                             components=c["components"], rounds=c["rounds"],
                             major_cycles=c["cycles"], threads=1, calibration=cal,
                             fresh_process=False, memory_available=1 << 62).total_seconds
        cal["startup"] = {"fixed": max(c["imports_s"] + c["seconds"] - warm, 0.0)}
    return cal


def summarize(sweep, calibration=None):
    """Exponents, model-to-measurement ratios per point and the validation's ratios."""
    cal = calibration or sweep["calibration"]
    pts = sweep["points"]
    ex = {}
    for n in sorted({r["size"] for r in pts}):
        rows = [r for r in pts if r["size"] == n]
        if len(rows) >= 2:
            ns = [r["n_scales"] for r in rows]
            ex.setdefault("precompute_vs_scales", {})[n] = fit_power_law(
                ns, [r["precompute_s"] for r in rows])["exponents"][0]
            ex.setdefault("round_vs_scales", {})[n] = fit_power_law(
                ns, [max(r["round_s"], 1e-6) for r in rows])["exponents"][0]
            ex.setdefault("memory_vs_scales", {})[n] = fit_power_law(
                ns, [r["traced_peak"] for r in rows])["exponents"][0]
    by_set = {}
    for r in pts:
        by_set.setdefault(tuple(r["scales"]), []).append(r)
    for key, name in (("round_s", "round_vs_image_area"), ("major_s", "major_vs_image_area"),
                      ("precompute_s", "precompute_vs_image_area")):
        ex[name] = {",".join(f"{s:g}" for s in k): fit_power_law(
            [r["size"] ** 2 for r in v], [max(r[key], 1e-6) for r in v])["exponents"][0]
            for k, v in by_set.items() if len({r["size"] for r in v}) > 1}
    for r in pts:
        g = _geometry(r)
        t = cost.predict_times(g, cal)
        lp = sum(cost.loop_seconds(t, m, a) for a, m, _ in r["loops"])
        r["model"] = {"precompute_s": t["precompute"], "round_s": t["round"],
                      "beams_s": t["beams"],
                      "major_s": t["major"], "stats_s": t["stats"],
                      "loops_s": lp, "loops_measured_s": sum(x[2] for x in r["loops"]),
                      "memory": cost.predict_memory(g, cal)["peak"]}
    worst = {}
    for v in sweep.get("validation", []):
        for label, ratios in v.get("ratios", {}).items():
            for k, x in ratios.items():
                if x is not None:
                    worst.setdefault(label, {}).setdefault(k, []).append(x)
    return {"exponents": ex, "validation_ratios": worst}
