"""Apply hypothetical shock scenarios to today's book with full revaluation."""

from __future__ import annotations

import warnings
from dataclasses import dataclass
from typing import Callable, Sequence

import numpy as np

from ..errors import ModelWarning
from .records import KIND_HYPOTHETICAL, StressRecord, make_detail
from .shocks import ResolvedShocks

__all__ = ["VolRevalue", "HypotheticalResult", "run_hypothetical"]

Revalue = Callable[[np.ndarray, int], np.ndarray]
# revalue_vol(log_shocks (S, N), vol_shocks (S, N), horizon_days) -> (P, S)
VolRevalue = Callable[[np.ndarray, np.ndarray, int], np.ndarray]


@dataclass(frozen=True)
class HypotheticalResult:
    """P&L of today's book under each hypothetical scenario.

    Attributes
    ----------
    portfolios : tuple of str
    shocks : ResolvedShocks
    pnl : (P, S) float
        Base-currency P&L, negative = loss.
    vol_applied : (S,) bool
        Whether the scenario's vol shocks reached a vol-aware revaluation.
    """

    portfolios: tuple[str, ...]
    shocks: ResolvedShocks
    pnl: np.ndarray
    vol_applied: np.ndarray

    def records(self, as_of: np.datetime64) -> list[StressRecord]:
        """Rows of kind ``hypothetical`` (no dates)."""
        out = []
        for s, scen in enumerate(self.shocks.scenarios):
            detail = make_detail(
                description=scen.description,
                instruments_moved=int(np.count_nonzero(self.shocks.log_shocks[s])),
                vol_shocks_applied=bool(self.vol_applied[s]),
                shocks=[{"selector": k.selector, "target": k.target, "type": k.type, "size": k.size} for k in scen.shocks],
            )
            for p, name in enumerate(self.portfolios):
                out.append(
                    StressRecord(
                        as_of=np.datetime64(as_of, "D"),
                        portfolio=name,
                        scenario=scen.name,
                        kind=KIND_HYPOTHETICAL,
                        horizon_days=int(self.shocks.horizon_days[s]),
                        start_date=None,
                        end_date=None,
                        pnl=float(self.pnl[p, s]),
                        detail=detail,
                    )
                )
        return out


def run_hypothetical(
    shocks: ResolvedShocks,
    revalue: Revalue,
    *,
    portfolios: Sequence[str],
    revalue_vol: VolRevalue | None = None,
) -> HypotheticalResult:
    """Revalue today's book under every scenario.

    Parameters
    ----------
    shocks : ResolvedShocks
        From :func:`tailtrace.stress.shocks.resolve_scenarios`.
    revalue : callable
        ``revalue(log_shocks (S, N), horizon_days) -> (P, S)``.
    portfolios : sequence of str
        Labels of the P rows ``revalue`` returns.
    revalue_vol : callable, optional
        ``revalue_vol(log_shocks, vol_shocks, horizon_days) -> (P, S)``, a
        revaluation that also moves implied volatilities (option books).
        Without it vol shocks are ignored and a :class:`ModelWarning` says so
        when any is non-zero.

    Returns
    -------
    HypotheticalResult

    Notes
    -----
    Scenarios are grouped by ``horizon_days``; each group is one
    revaluation call over all its scenarios and all portfolios.
    """
    S = shocks.log_shocks.shape[0]
    pnl = np.empty((len(portfolios), S))
    has_vol = np.any(shocks.vol_shocks != 0.0, axis=1)
    for h in np.unique(shocks.horizon_days):  # distinct horizons, usually one
        cols = np.flatnonzero(shocks.horizon_days == h)
        if revalue_vol is not None:
            pnl[:, cols] = revalue_vol(shocks.log_shocks[cols], shocks.vol_shocks[cols], int(h))
        else:
            pnl[:, cols] = revalue(shocks.log_shocks[cols], int(h))
    if revalue_vol is None and has_vol.any():
        names = ", ".join(sc.name for sc, v in zip(shocks.scenarios, has_vol) if v)
        warnings.warn(
            f"vol shocks ignored in scenario(s) {names}: the book is revalued without implied volatilities",
            ModelWarning,
            stacklevel=2,
        )
    vol_applied = has_vol & (revalue_vol is not None)
    return HypotheticalResult(tuple(portfolios), shocks, pnl, vol_applied)
