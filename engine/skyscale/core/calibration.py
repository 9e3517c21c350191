"""The cost model's coefficients as this machine measured them: built-in values and the
calibration file (`load_calibration`).

The memory account (`skyscale.core.memory`) scales its count by the calibrated
``memory.scale`` and the cost model (`skyscale.cost.model`) reads every other
coefficient; ``skyscale bench`` fits them and writes the file
(`skyscale.cost.calibration.save_calibration`).
"""

import json
import logging
import os

__all__ = ["DEFAULT_CALIBRATION", "CALIBRATION_ENV", "MODEL_VERSION", "default_calibration_path",
           "load_calibration"]

logger = logging.getLogger(__name__)

#: Environment variable naming a calibration file (overrides the default path).
CALIBRATION_ENV = "SKYSCALE_COST_CALIBRATION"

#: The cost model's terms these coefficients belong to: 2 since minor cycles make their
#: beams themselves and apply sub-loops by FFT or direct updates.  A calibration of
#: another version is not used.
MODEL_VERSION = 2

#: Coefficients measured on this machine (2 cores, shared, load average 1.9 to 2.2; 1
#: thread, float32, scipy.fft, CPU seconds) on 2026-12-04 by ``nice -n 10 python -m
#: skyscale.cli bench --sizes 512,1024,2048 --out bench-out`` (the calibration it wrote,
#: rounded to three figures; the exponents to four decimals, since U ** 0.004 is 7 % at
#: U = 1e8).  Seconds; an FFT of S points has work U = S log2 S and takes
#: ``fft.coefficient * U ** fft.exponent``; the other families are linear in the
#: predicted FFT seconds and in pixels (see `skyscale.cost`).  On the runs the fit did
#: not see (768 px, scales 0-16; 1536 px and 640 px, scales 0-32) the planner's total
#: was 1.03, 0.89 and 1.07 x the measured with the runs' own counts.
DEFAULT_CALIBRATION = {
    "model": MODEL_VERSION,
    "source": "built-in: skyscale bench --sizes 512,1024,2048, 2026-12-04 (CPU seconds, load 2)",
    "fft": {"coefficient": 4.92e-11, "exponent": 1.0997},
    "precompute": {"fixed": 0.00439, "per_psf_pixel": 2.14e-09, "per_fft_second": 1.53},
    "beams": {"fixed": 0.0, "per_fft_second": 0.0, "per_beam_pixel": 9.32e-09},
    "setup": {"fixed": 0.00298, "per_fft_second": 1.33},
    "round": {"fixed": 0.00302, "per_fft_second": 0.696, "per_plane_pixel": 2.82e-10},
    "direct": {"fixed": 0.000958, "per_madd": 3.46e-10, "per_pixel_plane": 4.56e-09,
               "pixel_exponent": 0.5035, "allowance_used": 0.347},
    "scan": {"cycle_fixed": 0.00713, "per_plane_pixel": 6.44e-09, "per_tracked_pixel": 1.07e-09},
    "loop": {"per_component_pixel": 1.3e-09, "per_active_pixel": 5.34e-07, "per_sub_loop": 0.000321},
    "major": {"fixed": 0.0, "per_fft_second": 0.376, "per_plane_pixel": 1.38e-08},
    "stats": {"fixed": 0.0166, "per_fft_second": 1.44, "per_plane_pixel": 1.77e-09},
    "counts": {"rounds_per_scale_cycle": 7.87, "active_fraction": 0.0185, "cycles_offset": 1.73,
               "fft_update_fraction": 0.392},
    "threads": {"fft_parallel": 0.642, "loop_parallel": 0.908, "measured_with": 2.0},
    "memory": {"scale": 0.94},
    "range": {"max_image_pixels": 2048 * 2048},
    "startup": {"fixed": 1.49},
}


def default_calibration_path():
    """``$SKYSCALE_COST_CALIBRATION``, or ``~/.cache/skyscale/cost_calibration.json``."""
    return os.environ.get(CALIBRATION_ENV) or os.path.join(
        os.path.expanduser("~"), ".cache", "skyscale", "cost_calibration.json")


def _merged(data, source):
    if data.get("model") != MODEL_VERSION:
        raise ValueError(f"it was made for cost model {data.get('model', 1)}, this is "
                         f"model {MODEL_VERSION}")
    cal = json.loads(json.dumps(DEFAULT_CALIBRATION))
    for section, values in data.items():
        if isinstance(values, dict) and section in cal:
            unknown = set(values) - set(cal[section])
            if unknown:
                raise ValueError(f"section {section!r} has unknown keys {sorted(unknown)}")
            cal[section].update({k: float(v) for k, v in values.items()})
        elif section not in ("source", "fit", "model"):
            raise ValueError(f"unknown section {section!r}")
    cal["source"] = f"{source} ({data['source']})" if data.get("source") else source
    return cal


def load_calibration(path=None):
    """The coefficients the planner uses: ``path``, else the default file, else built-in.

    Raises
    ------
    ValueError
        When an explicit ``path`` is missing or not a calibration written by
        ``skyscale bench``.  A broken default file is logged and skipped.
    """
    explicit = path is not None
    path = path or default_calibration_path()
    try:
        with open(path) as fh:
            return _merged(json.load(fh), str(path))
    except FileNotFoundError:
        if explicit:
            raise ValueError(f"calibration {path!r} does not exist; run skyscale bench "
                             "--calibration PATH to make one, or leave it out") from None
    except (OSError, ValueError, TypeError, AttributeError) as exc:
        if explicit:
            raise ValueError(f"calibration {path!r} is not a skyscale bench calibration "
                             f"({exc}); remake it with skyscale bench") from None
        logger.warning("ignoring the calibration file %s (%s); using the built-in one", path, exc)
    return json.loads(json.dumps(DEFAULT_CALIBRATION))
