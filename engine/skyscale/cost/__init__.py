"""What a run costs: the cost model, the planner, the scaling sweep and its calibration.

`planner.plan_run` predicts a run's time and memory before anything is allocated;
`model` holds the cost terms and the one memory account, `remedies` what would fit
when a run will not, `calibration` the coefficients and their file, `sweep` and
`sweepfit` measure this machine (``skyscale bench``).
"""

from skyscale._exports import lazy_exports

__all__, __getattr__, __dir__ = lazy_exports(__name__, {
    "model": ["DEFAULT_CALIBRATION", "CALIBRATION_ENV", "DEFAULT_DYNAMIC_RANGE",
              "MEMORY_HEADROOM", "Geometry", "run_geometry", "fft_seconds", "predict_times",
              "estimate_counts", "predict_memory", "available_memory", "load_calibration",
              "save_calibration", "default_calibration_path", "fit_power_law",
              "fit_nonnegative", "engine_memory", "fits_memory", "loop_seconds",
              "loop_features", "LOOP_TERMS", "fft_work"],
    "planner": ["Plan", "plan_run", "check_fits_memory", "max_affordable_scales",
                "AffordableScales", "InsufficientMemoryError"],
})
