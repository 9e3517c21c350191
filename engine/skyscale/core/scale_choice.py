"""Which scale a minor cycle cleans next, and when the cycle is done.

Each sub-loop cleans the scale whose penalised peak response is largest among the scales
still above their entry level (Cornwell 2008); a scale cleaned down to a floor above its
stop level comes back only above `REENTRY` times that floor.  The single-term engine and
the wideband joint cycle both choose this way.

References
----------
.. [1] Cornwell, T. J. 2008, IEEE J. Sel. Topics Signal Process. 2(5), 793.
"""

import numpy as np

__all__ = ["REENTRY", "ScaleChoice"]

#: Within a minor cycle, a scale cleaned down to a floor above its stop level is chosen
#: again only when its peak is back above this multiple of the floor: scales that
#: alternate just above their floors would otherwise each pay an update for a component
#: or two.  A floor that is the stop level itself is kept exactly.
REENTRY = 1.05


class ScaleChoice:
    """The next sub-loop's scale and level, or why the minor cycle stops.

    Parameters
    ----------
    floors, levels : (n_scales,) ndarray
        Each scale's floor in this cycle and its stop level.
    response_scale : (n_scales,) ndarray
        Factors that make the scales' peaks comparable (the small-scale bias).
    depth : float
        A sub-loop cleans its scale down to ``max(floor, depth * peak)``.
    """

    def __init__(self, floors, levels, response_scale, depth):
        self.floors = np.asarray(floors, dtype=np.float64)
        self.levels = np.asarray(levels, dtype=np.float64)
        self.response_scale = np.asarray(response_scale, dtype=np.float64)
        self.depth = float(depth)
        self.entry = self.floors.copy()       # a scale cleaned to its floor re-enters above
        self.reentry = np.where(self.floors > self.levels, REENTRY * self.floors,
                                self.floors)  # not at the stop level

    def next(self, peaks, blocked, added, budget):
        """``(k, level, None)`` for the next sub-loop, or ``(None, None, reason)``."""
        self.entry = np.where(peaks <= self.floors, np.maximum(self.entry, self.reentry),
                              self.entry)
        live = (peaks > self.entry) & ~blocked
        if not live.any():
            return None, None, ("peak_rose" if ((peaks > self.entry) & blocked).any() else
                                "threshold" if np.all(peaks <= self.levels) else "depth")
        if added >= budget:
            return None, None, "max_components"
        k = int(np.argmax(np.where(live, self.response_scale * peaks, -1.0)))
        return k, max(self.floors[k], self.depth * peaks[k]), None
