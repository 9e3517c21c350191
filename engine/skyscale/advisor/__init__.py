"""Choosing and checking scale sets: how large the emission is, the rules of thumb,
and suggestions with one sentence of reason per decision.

`suggest.suggest_scales` proposes a set, `suggest.check_scales` judges one by the same
rules (`rules`), from the emission's extent measured by `extent`.
"""

from skyscale._exports import lazy_exports

__all__, __getattr__, __dir__ = lazy_exports(__name__, {
    "suggest": ["DIAMETER_MEASURES", "STRUCTURE_FRACTION", "RECOVERABLE_FRACTION",
                "IMAGE_FRACTION", "SCALE_RATIO", "MIN_SCALE_RATIO", "DELTA_FRACTION",
                "RECOVERABLE_FACTOR", "DEFAULT_MAX_COUNT", "ScaleChoiceWarning",
                "ScaleLimits", "EmissionExtent", "ScaleSuggestion", "measure_emission_extent",
                "suggest_scales", "check_scales", "resolve_scales"],
})
