"""Fitting and saving the cost model's coefficients.

``skyscale bench`` measures this machine (`skyscale.cost.sweep`), fits the coefficients
with the two fits here and writes them to the calibration file, which ``skyscale plan``,
``skyscale run`` and `skyscale.plan_run` then read
(`skyscale.core.calibration.load_calibration`).
"""

import json
import os

import numpy as np

from skyscale.core.calibration import default_calibration_path
from skyscale.io.atomic import atomic_write_bytes

__all__ = ["save_calibration", "fit_power_law", "fit_nonnegative"]


def save_calibration(calibration, path=None):
    """Write ``calibration`` as JSON atomically; returns the path."""
    path = path or default_calibration_path()
    os.makedirs(os.path.dirname(os.path.abspath(path)), exist_ok=True)
    atomic_write_bytes(path, json.dumps(calibration, indent=2).encode("utf-8"),
                       overwrite=True)
    return path


def fit_power_law(x, y):
    """Least-squares fit of ``y = c * prod_i x_i ** p_i`` in log space.

    Parameters
    ----------
    x : (m,) or (m, q) array of positive values
    y : (m,) array of positive values

    Returns
    -------
    dict
        ``coefficient`` c, ``exponents`` [p_i], ``rms_log_residual`` (natural log).
    """
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    x = x[:, None] if x.ndim == 1 else x
    if x.shape[0] != y.shape[0] or y.size < x.shape[1] + 1:
        raise ValueError(f"fit_power_law got {x.shape[0]} x rows and {y.size} y values for "
                         f"{x.shape[1]} exponents; give matching arrays with more points "
                         "than exponents")
    if np.any(x <= 0) or np.any(y <= 0):
        raise ValueError("fit_power_law needs positive x and y; drop zero or negative points")
    design = np.column_stack([np.ones(y.size), np.log(x)])
    sol, *_ = np.linalg.lstsq(design, np.log(y), rcond=None)
    resid = np.log(y) - design @ sol
    return {"coefficient": float(np.exp(sol[0])), "exponents": [float(p) for p in sol[1:]],
            "rms_log_residual": float(np.sqrt(np.mean(resid ** 2)))}


def fit_nonnegative(features, y):
    """Non-negative least squares ``y ~ features @ coef`` weighted to relative errors.

    Returns
    -------
    coef : (q,) ndarray
    max_relative_error : float
        Largest ``|model / y - 1|`` over the points.
    """
    from scipy.optimize import nnls
    a = np.asarray(features, dtype=float)
    y = np.asarray(y, dtype=float)
    if a.ndim != 2 or a.shape[0] != y.size or np.any(y <= 0):
        raise ValueError(f"fit_nonnegative got features {a.shape} and {y.size} positive "
                         "times; give one row of features per positive time")
    coef, _ = nnls(a / y[:, None], np.ones(y.size))
    return coef, float(np.max(np.abs(a @ coef / y - 1.0)))
