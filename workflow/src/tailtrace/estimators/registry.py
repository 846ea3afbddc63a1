"""Method name → estimator function. Adding a method is one line here."""

from __future__ import annotations

from importlib import import_module

from .base import Estimator

__all__ = ["METHODS", "get_estimator"]

# name: (module, function); modules load lazily so a job pays only its own imports
METHODS: dict[str, tuple[str, str]] = {
    "parametric_normal": ("tailtrace.estimators.parametric", "estimate"),
    "historical": ("tailtrace.estimators.historical", "estimate"),
    "historical_overlapping": ("tailtrace.estimators.historical", "estimate_overlapping"),
    "monte_carlo": ("tailtrace.estimators.monte_carlo", "estimate"),
    "delta_normal": ("tailtrace.estimators.delta_normal", "estimate"),
    "delta_gamma": ("tailtrace.estimators.delta_gamma", "estimate"),
    "monte_carlo_t": ("tailtrace.estimators.monte_carlo", "estimate_student_t"),
    "parametric_t": ("tailtrace.estimators.parametric_t", "estimate"),
    "cornish_fisher": ("tailtrace.estimators.cornish_fisher", "estimate"),
    "ewma_normal": ("tailtrace.estimators.ewma", "estimate"),
    "age_weighted_historical": ("tailtrace.estimators.age_weighted", "estimate"),
    "filtered_historical": ("tailtrace.estimators.filtered_historical", "estimate"),
}


def get_estimator(method: str) -> Estimator:
    """Return the estimator function registered under ``method``."""
    try:
        module, name = METHODS[method]
    except KeyError:
        raise KeyError(f"unknown method {method!r}; known: {', '.join(sorted(METHODS))}") from None
    return getattr(import_module(module), name)
