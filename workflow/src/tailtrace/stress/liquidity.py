"""Regulatory-style ES: 10-day ES cascaded over liquidity horizons (MAR33)."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable, Mapping, Sequence

import numpy as np

from ..errors import ConfigError
from ..estimators.tail import empirical_var_es
from .historical import horizon_log_returns
from .instruments import InstrumentMeta

__all__ = [
    "LIQUIDITY_HORIZON_BUCKETS",
    "DEFAULT_LIQUIDITY_HORIZONS",
    "LIQUIDITY_ES_COLUMNS",
    "liquidity_horizons",
    "LiquidityAdjustedES",
    "liquidity_adjusted_es",
]

Revalue = Callable[[np.ndarray, int], np.ndarray]

# MAR33.12 liquidity horizons, in trading days
LIQUIDITY_HORIZON_BUCKETS = (10, 20, 40, 60, 120)

# asset class -> liquidity horizon. Values follow the risk-factor categories of
# MAR33.12 as recalled from memory (not re-read): equity price (large cap) 10,
# FX rate (specified currency pairs) 10, interest rate (specified currencies)
# 10, energy and non-ferrous/precious metal prices 20, investment-grade
# corporate credit spread 40, other commodities 60; volatilities one or more
# buckets longer (equity large cap 20, FX 40, commodity 60).
DEFAULT_LIQUIDITY_HORIZONS: dict[str, int] = {
    "equity": 10,
    "equity_index": 10,
    "equity_index_future": 10,
    "fx": 10,
    "bond": 10,
    "rates": 10,
    "commodity": 20,
    "credit": 40,
    "equity_vol": 20,
    "fx_vol": 40,
    "commodity_vol": 60,
    # the other asset classes of instruments.csv, by the same categories
    "commodity_future": 20,
    "bond_future": 10,
    "cash": 10,
    "implied_vol": 20,  # IV.<underlying> series: treated as equity volatility
}

# proposed DuckDB table liquidity_es: one row per portfolio and bucket
LIQUIDITY_ES_COLUMNS: dict[str, str] = {
    "as_of": "DATE",
    "portfolio": "VARCHAR",
    "calibration": "VARCHAR",
    "confidence": "DOUBLE",
    "base_horizon_days": "INTEGER",
    "liquidity_horizon_days": "INTEGER",
    "n_instruments": "INTEGER",
    "es_subset": "DOUBLE",
    "scaled_term": "DOUBLE",
    "es_liquidity_adjusted": "DOUBLE",
    "n_obs": "INTEGER",
}


def _check_buckets(buckets: Sequence[int], base_horizon: int) -> np.ndarray:
    b = np.asarray([int(x) for x in buckets], dtype=int)
    if b.size == 0 or np.any(np.diff(b) <= 0):
        raise ConfigError(f"liquidity horizon buckets must be strictly increasing, got {list(b)}")
    if b[0] != base_horizon:
        raise ConfigError(f"the first liquidity horizon bucket ({b[0]}) must equal the base horizon ({base_horizon})")
    return b


def liquidity_horizons(
    meta: InstrumentMeta,
    by_asset_class: Mapping[str, int] | None = None,
    *,
    default: int | None = None,
    buckets: Sequence[int] = LIQUIDITY_HORIZON_BUCKETS,
) -> np.ndarray:
    """Liquidity horizon of each instrument from its asset class.

    Parameters
    ----------
    meta : InstrumentMeta
    by_asset_class : mapping, optional
        Asset class -> horizon in days, overriding
        :data:`DEFAULT_LIQUIDITY_HORIZONS` key by key.
    default : int, optional
        Horizon for asset classes the mapping lacks; None makes them an error.
    buckets : sequence of int
        Allowed horizons.

    Returns
    -------
    (N,) int

    Raises
    ------
    ConfigError
        An asset class without a horizon, or a horizon that is not a bucket.
    """
    mapping = {**DEFAULT_LIQUIDITY_HORIZONS, **dict(by_asset_class or {})}
    allowed = {int(b) for b in buckets}
    for ac, lh in sorted(mapping.items()) + ([("default", default)] if default is not None else []):
        if int(lh) not in allowed:
            raise ConfigError(f"liquidity horizon of '{ac}' is {lh} days; allowed: {sorted(allowed)}")
    missing = sorted({ac for ac in meta.asset_class if ac not in mapping})
    if missing and default is None:
        raise ConfigError(
            f"no liquidity horizon for asset class(es) {', '.join(missing)}: add them to the "
            "liquidity horizon mapping or set a default"
        )
    return np.array([int(mapping.get(ac, default)) for ac in meta.asset_class], dtype=int)


@dataclass(frozen=True)
class LiquidityAdjustedES:
    """ES cascaded over liquidity horizons, per portfolio.

    Attributes
    ----------
    portfolios : tuple of str
    buckets : (J,) int
        ``LH_1 < … < LH_J`` with ``LH_1 = T``.
    n_instruments : (J,) int
        Instruments with a horizon of at least ``LH_j``.
    es_subset : (P, J) float
        ``ES_T(P, j)``: ES of the base-horizon P&L when only instruments with
        horizon ≥ ``LH_j`` move (column 0 is ``ES_T(P)``), floored at 0.
    scaled_term : (P, J) float
        ``ES_T(P, j) · sqrt((LH_j − LH_{j−1}) / T)`` (column 0: ``ES_T(P)``).
    es : (P,) float
        ``sqrt(Σ_j scaled_term²)``.
    confidence : float
    base_horizon : int
    n_obs : int
        Overlapping base-horizon observations behind each ES.
    """

    portfolios: tuple[str, ...]
    buckets: np.ndarray
    n_instruments: np.ndarray
    es_subset: np.ndarray
    scaled_term: np.ndarray
    es: np.ndarray
    confidence: float
    base_horizon: int
    n_obs: int

    def rows(self, as_of: np.datetime64, calibration: str = "current") -> list[dict]:
        """Rows for the table :data:`LIQUIDITY_ES_COLUMNS`, one per portfolio and bucket."""
        out = []
        for p, name in enumerate(self.portfolios):
            for j, lh in enumerate(self.buckets):
                out.append(
                    {
                        "as_of": np.datetime64(as_of, "D"),
                        "portfolio": name,
                        "calibration": calibration,
                        "confidence": self.confidence,
                        "base_horizon_days": self.base_horizon,
                        "liquidity_horizon_days": int(lh),
                        "n_instruments": int(self.n_instruments[j]),
                        "es_subset": float(self.es_subset[p, j]),
                        "scaled_term": float(self.scaled_term[p, j]),
                        "es_liquidity_adjusted": float(self.es[p]),
                        "n_obs": self.n_obs,
                    }
                )
        return out


def liquidity_adjusted_es(
    returns: np.ndarray,
    revalue: Revalue,
    horizons: np.ndarray,
    *,
    portfolios: Sequence[str],
    confidence: float = 0.975,
    base_horizon: int = 10,
    buckets: Sequence[int] = LIQUIDITY_HORIZON_BUCKETS,
) -> LiquidityAdjustedES:
    """97.5 % ES at a 10-day base horizon, cascaded over liquidity horizons.

    Parameters
    ----------
    returns : (T, N) array
        Daily base-currency log returns of the estimation window (current
        or stressed).
    revalue : callable
        ``revalue(log_shocks (S, N), horizon_days) -> (P, S)``.
    horizons : (N,) int
        Liquidity horizon per instrument (:func:`liquidity_horizons`).
    portfolios : sequence of str
    confidence : float
    base_horizon : int
        ``T`` in days.
    buckets : sequence of int
        ``LH_1 … LH_J``; ``LH_1`` must equal ``T``.

    Returns
    -------
    LiquidityAdjustedES

    Notes
    -----
    .. math::

        ES = \\sqrt{ES_T(P)^2 + \\sum_{j \\ge 2}
             \\left(ES_T(P, j)\\sqrt{\\frac{LH_j - LH_{j-1}}{T}}\\right)^2}

    ``ES_T(P, j)`` revalues the book under the overlapping T-day log returns
    of the window with every instrument whose horizon is below ``LH_j`` held
    still; ES is the mean of the ``max(1, ⌊n(1 − c)⌋)`` worst of the
    ``n = T_w − T + 1`` overlapping P&L (one convention with the historical
    estimator). Overlapping returns are not independent: the effective
    sample is smaller than ``n``. A subset whose ES is negative (its tail
    is a gain) adds nothing: ES is floored at 0 before squaring, our choice,
    as the formula presumes positive ES. All subsets and portfolios go
    through one revaluation call.

    References
    ----------
    Basel Committee on Banking Supervision, *Minimum capital requirements
    for market risk*, January 2019, MAR33.4 (the cascade) and MAR33.12
    (liquidity horizons).
    """
    b = _check_buckets(buckets, int(base_horizon))
    lh = np.asarray(horizons, dtype=int)
    R = horizon_log_returns(returns, int(base_horizon))  # (n, N)
    if lh.shape != (R.shape[1],):
        raise ValueError(f"horizons must have shape ({R.shape[1]},), got {lh.shape}")
    bad = sorted(set(lh.tolist()) - set(b.tolist()))
    if bad:
        raise ConfigError(f"liquidity horizons {bad} are not among the buckets {list(b)}")
    masks = lh[None, :] >= b[:, None]  # (J, N)
    n, J = R.shape[0], b.size
    shocks = (masks[:, None, :] * R[None, :, :]).reshape(J * n, -1)
    pnl = revalue(shocks, int(base_horizon)).reshape(-1, J, n)  # (P, J, n)
    _, es = empirical_var_es(-pnl, [confidence])
    es_subset = np.maximum(es[..., 0], 0.0)
    gaps = np.diff(b, prepend=0).astype(float)
    gaps[0] = base_horizon  # coefficient 1 on ES_T(P)
    scaled = es_subset * np.sqrt(gaps / base_horizon)
    return LiquidityAdjustedES(
        portfolios=tuple(portfolios),
        buckets=b,
        n_instruments=masks.sum(axis=1),
        es_subset=es_subset,
        scaled_term=scaled,
        es=np.sqrt(np.sum(scaled**2, axis=1)),
        confidence=float(confidence),
        base_horizon=int(base_horizon),
        n_obs=int(n),
    )
