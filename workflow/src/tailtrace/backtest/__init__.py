"""Backtesting of VaR and ES forecasts.

Rolling out-of-sample 1-day forecasts (:mod:`.rolling`), coverage tests
(:mod:`.coverage`), traffic-light zones (:mod:`.zones`), the
Acerbi-Szekely ES test (:mod:`.shortfall`) and the named output tables
(:mod:`.tables`). Importing this package costs numpy and scipy.special
only; scipy.signal, arch and pyarrow load on first use.
"""

from __future__ import annotations

from .actual_pnl import read_actual_pnl
from .coverage import CoverageTests, coverage_tests, exceptions, independence_lr, kupiec_pof, transition_counts
from .result import BacktestResult, run_backtest
from .rolling import FORECASTERS, rolling_forecasts
from .rolling_base import RollingForecast, RollingForecaster
from .shortfall import Z2Thresholds, acerbi_szekely_z2, z2_p_value, z2_thresholds, z2_zone
from .tables import FORECAST_COLUMNS, SUMMARY_COLUMNS, forecast_table, summary_rows, summary_table
from .zones import ZoneTable, format_zone_table, traffic_light, zone_table

__all__ = [
    "BacktestResult",
    "CoverageTests",
    "FORECASTERS",
    "FORECAST_COLUMNS",
    "RollingForecast",
    "RollingForecaster",
    "SUMMARY_COLUMNS",
    "Z2Thresholds",
    "ZoneTable",
    "acerbi_szekely_z2",
    "coverage_tests",
    "exceptions",
    "forecast_table",
    "format_zone_table",
    "independence_lr",
    "kupiec_pof",
    "read_actual_pnl",
    "rolling_forecasts",
    "run_backtest",
    "summary_rows",
    "summary_table",
    "traffic_light",
    "transition_counts",
    "z2_p_value",
    "z2_thresholds",
    "z2_zone",
    "zone_table",
]
