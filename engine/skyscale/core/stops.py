"""Why things stop: the one list of stop reasons, for a run, a minor cycle and a sub-loop.

Three levels stop for their own reasons, and each reason has one name and one meaning
here; nothing else spells them or translates between them:

- a compiled sub-loop (`skyscale.core.kernels.scale_loop`) hands back a code,
  `SCALE_LOOP_STOP_CODES`, whose names mean `SUB_LOOP_STOP_REASONS`;
- a minor cycle (`skyscale.core.engine.Engine.minor_cycle`) ends for one of
  `MINOR_STOP_REASONS`;
- a run (`skyscale.deconvolve`) ends for one of `STOP_REASONS`, the reasons users see;
  `run_stop_after_empty_cycle` says which one a minor cycle that found nothing means.
"""

__all__ = ["STOP_REASONS", "MINOR_STOP_REASONS", "SUB_LOOP_STOP_REASONS",
           "SCALE_LOOP_STOP_CODES", "LEVEL_STOPS", "run_stop_after_empty_cycle"]

#: Every reason a run can stop, with a one-line meaning.
STOP_REASONS = {
    "threshold": "every scale's residual in the mask reached the absolute threshold",
    "noise": "every scale's residual in the mask reached its multiple of that scale's noise",
    "max_components": "the component budget was spent",
    "max_major_cycles": "the major-cycle budget was spent",
    "no_progress": "cleaning stalled: the residual stopped falling toward the stop levels, "
                   "or every sub-loop left would have raised the peak residual",
    "diverging": "major cycles kept raising the peak residual (or gave non-finite values); "
                 "the last good model is kept",
    "empty_mask": "the mask allows no pixel to be cleaned",
    "interrupted": "the run was interrupted; the result holds what was done so far",
    "nothing_to_clean": "the dirty image is constant (zero included): there is nothing to clean",
}

#: The run's stop reasons that mean every scale reached its stop level.
LEVEL_STOPS = ("threshold", "noise")

#: Why a minor cycle handed back to the major cycle.
MINOR_STOP_REASONS = {
    "depth": "every scale reached its floor for this cycle (cycle_depth of its start)",
    "threshold": "every scale reached its stop level (threshold or noise multiple)",
    "max_components": "the component budget of this cycle was spent",
    "peak_rose": "every remaining sub-loop would have raised the peak residual; rejected",
    "empty": "no pixel may be cleaned (an empty mask, or one that lies only where no "
             "scale may centre a component: within its radius of the image edge)",
}

#: Why a compiled sub-loop handed back.
SUB_LOOP_STOP_REASONS = {
    "iterations": "the iteration budget of this call was spent",
    "empty": "the active set is empty",
    "level": "the peak reached the sub-loop's level",
}

#: The code a compiled sub-loop returns -> its name in `SUB_LOOP_STOP_REASONS`.
SCALE_LOOP_STOP_CODES = {1: "iterations", 2: "empty", 3: "level"}

#: A minor cycle that found no component, by its reason -> the run's stop reason
#: (``'threshold'`` is the level stop, 'threshold' or 'noise', decided by the caller).
_RUN_STOP_OF_EMPTY_CYCLE = {"empty": "empty_mask", "max_components": "max_components",
                            "depth": "no_progress", "peak_rose": "no_progress"}


def run_stop_after_empty_cycle(minor_reason, level_stop):
    """The run's stop reason when a minor cycle ended for ``minor_reason`` with nothing.

    Parameters
    ----------
    minor_reason : str
        A key of `MINOR_STOP_REASONS`.
    level_stop : str
        The run's level stop in force, one of `LEVEL_STOPS`: what 'every scale reached
        its stop level' means for this run.
    """
    if minor_reason == "threshold":
        return level_stop
    return _RUN_STOP_OF_EMPTY_CYCLE[minor_reason]
