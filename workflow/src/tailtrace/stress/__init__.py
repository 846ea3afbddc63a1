"""Stress testing: historical worst losses and windows, hypothetical shocks,
stressed calibration, liquidity-horizon ES and reverse stress.

Every function takes today's book as a ``revalue(log_shocks (S, N),
horizon_days) -> (P, S)`` callable (see :mod:`tailtrace.estimators.base`),
so option books are fully revalued once their revaluation supports it.
Results turn into rows of the DuckDB table ``stress_results`` through their
``records(as_of)`` method (:mod:`.records`).
"""

from .historical import load_stress_windows, replay_windows, worst_losses
from .hypothetical import run_hypothetical
from .instruments import InstrumentMeta
from .liquidity import liquidity_adjusted_es, liquidity_horizons
from .records import StressRecord, records_to_frame
from .run import StressSettings, run_stress, stressed_samples
from .reverse import default_groups, group_loadings, reverse_stress, reverse_targets
from .shocks import load_shock_scenarios, resolve_scenarios
from .stressed import find_stressed_window, stressed_sample

__all__ = [
    "StressSettings",
    "run_stress",
    "stressed_samples",
    "InstrumentMeta",
    "StressRecord",
    "records_to_frame",
    "worst_losses",
    "load_stress_windows",
    "replay_windows",
    "load_shock_scenarios",
    "resolve_scenarios",
    "run_hypothetical",
    "find_stressed_window",
    "stressed_sample",
    "liquidity_horizons",
    "liquidity_adjusted_es",
    "default_groups",
    "group_loadings",
    "reverse_targets",
    "reverse_stress",
]
