"""Registry of rolling forecasters and a runner over several methods."""

from __future__ import annotations

import zlib
from typing import Any, Mapping, Sequence

import numpy as np

from ..errors import ConfigError
from ..estimators.base import as_generator
from .rolling_base import RollingForecast, RollingForecaster
from .rolling_historical import (
    forecast_age_weighted_historical,
    forecast_filtered_historical,
    forecast_historical,
)
from .rolling_parametric import (
    forecast_cornish_fisher,
    forecast_ewma_normal,
    forecast_monte_carlo,
    forecast_parametric_normal,
    forecast_parametric_t,
)

__all__ = ["FORECASTERS", "HEAVY_IMPORTS", "method_seed", "rolling_forecasts"]

FORECASTERS: dict[str, RollingForecaster] = {
    "parametric_normal": forecast_parametric_normal,
    "historical": forecast_historical,
    "ewma_normal": forecast_ewma_normal,
    "parametric_t": forecast_parametric_t,
    "cornish_fisher": forecast_cornish_fisher,
    "age_weighted_historical": forecast_age_weighted_historical,
    "filtered_historical": forecast_filtered_historical,
    "monte_carlo": forecast_monte_carlo,
}

# Modules a method imports on first use, beyond numpy and scipy.special.
HEAVY_IMPORTS: dict[str, tuple[str, ...]] = {
    "ewma_normal": ("scipy.signal",),
    "filtered_historical": ("scipy.signal", "arch"),
}


def method_seed(seed: int | np.random.Generator | None, method: str) -> np.random.Generator:
    """A generator for one method, independent of the order methods run in.

    Parameters
    ----------
    seed : int, Generator or None
        The run's seed. A Generator is consumed by one draw.
    method : str

    Returns
    -------
    numpy.random.Generator
        Seeded with ``[base, crc32(method)]``, ``base`` the int seed (or one
        draw from the Generator).
    """
    if isinstance(seed, (int, np.integer)) and not isinstance(seed, bool):
        base = int(seed)
    else:
        base = int(as_generator(seed).integers(2**63))
    return np.random.default_rng([base, zlib.crc32(method.encode())])


def rolling_forecasts(
    pnl: np.ndarray,
    methods: Sequence[str],
    confidences: Sequence[float],
    *,
    window: int,
    days: int = 250,
    options: Mapping[str, Mapping[str, Any]] | None = None,
    seed: int | np.random.Generator | None = 0,
) -> dict[str, RollingForecast]:
    """Run several rolling forecasters on the same P&L history.

    Parameters
    ----------
    pnl : (P, T_all) array
    methods : sequence of str
        Keys of :data:`FORECASTERS`.
    confidences : sequence of float
    window, days : int
    options : mapping of method -> mapping, optional
        Per-method options (see each forecaster).
    seed : int or Generator
        Run seed; each method gets :func:`method_seed`.

    Returns
    -------
    dict of str -> RollingForecast, in the order of ``methods``
    """
    opts = dict(options or {})
    unknown = [m for m in list(methods) + list(opts) if m not in FORECASTERS]
    if unknown:
        raise ConfigError(f"unknown backtest method(s) {sorted(set(unknown))}; known: {sorted(FORECASTERS)}")
    if len(set(methods)) != len(methods):
        raise ConfigError(f"backtest methods listed twice: {list(methods)}")
    base = seed if isinstance(seed, (int, np.integer)) else int(as_generator(seed).integers(2**63))
    return {
        m: FORECASTERS[m](
            pnl, confidences, window=window, days=days, options=opts.get(m), seed=method_seed(int(base), m)
        )
        for m in methods
    }
