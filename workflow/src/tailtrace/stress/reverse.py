"""Reverse stress: the smallest uniform shock that costs a portfolio a given amount."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable, Mapping, Sequence

import numpy as np

from ..errors import ConfigError
from .instruments import InstrumentMeta
from .records import KIND_REVERSE, StressRecord, make_detail
from .shocks import SELECTORS, selector_mask

__all__ = [
    "ShockGroup",
    "default_groups",
    "group_loadings",
    "reverse_targets",
    "ReverseStress",
    "reverse_stress",
]

Revalue = Callable[[np.ndarray, int], np.ndarray]
ALL = "all"


@dataclass(frozen=True)
class ShockGroup:
    """Risk factors moved together by one uniform relative shock.

    Attributes
    ----------
    name : str
        Label; the scenario is reported as ``reverse_<name>``.
    selector : str
        ``all``, ``instrument``, ``asset_class`` or ``currency``.
    target : str
        Value of the selector (ignored for ``all``).
    """

    name: str
    selector: str
    target: str = ""


def default_groups(meta: InstrumentMeta, riskless: Sequence[str] = ("cash",)) -> tuple[ShockGroup, ...]:
    """All risky factors at once, then one group per asset class (sorted)."""
    classes = sorted(set(meta.asset_class) - set(riskless))
    return (ShockGroup(ALL, ALL),) + tuple(ShockGroup(ac, "asset_class", ac) for ac in classes)


def group_loadings(
    meta: InstrumentMeta, groups: Sequence[ShockGroup], riskless: Sequence[str] = ("cash",)
) -> np.ndarray:
    """How many times each group's shock enters each instrument's base log return.

    Parameters
    ----------
    meta : InstrumentMeta
    groups : sequence of ShockGroup
    riskless : sequence of str
        Asset classes the ``all`` group leaves still.

    Returns
    -------
    (G, N) float
        ``c_{g,i}``: the base-currency log shock of instrument i under a
        uniform move ``s`` of group g is ``c_{g,i} · log(1 + s)``. It is 1
        for a selected instrument, plus 1 when the FX rate of its currency is
        selected too (a foreign price and its FX rate both move by ``s``).

    Raises
    ------
    ConfigError
        An unknown selector or a group that selects no instrument.
    """
    out = np.zeros((len(groups), meta.n))
    for g, group in enumerate(groups):
        if group.selector == ALL:
            mask = ~np.isin(np.array(meta.asset_class), list(riskless))
        elif group.selector in SELECTORS:
            mask = selector_mask(meta, group.selector, group.target)
        else:
            raise ConfigError(f"reverse stress group '{group.name}': unknown selector {group.selector!r}")
        if not mask.any():
            raise ConfigError(f"reverse stress group '{group.name}' selects no instrument")
        out[g] = mask
    return meta.translate_to_base(out)


def reverse_targets(
    values: np.ndarray, *, amount: float | Mapping[str, float] | None = None,
    fraction_of_gross: float | None = None, portfolios: Sequence[str] = (),
) -> np.ndarray:
    """Loss to reach per portfolio, as a positive base-currency amount.

    Parameters
    ----------
    values : (P, N) array
        Base-currency holdings.
    amount : float or mapping, optional
        One amount for all portfolios, or portfolio -> amount.
    fraction_of_gross : float, optional
        Share of each portfolio's gross value ``Σ_i |v_i|``.
    portfolios : sequence of str
        Names of the rows of ``values`` (needed with a mapping).

    Returns
    -------
    (P,) float

    Raises
    ------
    ConfigError
        Neither or both given, a missing portfolio, or a target that is not
        positive.
    """
    values = np.asarray(values, dtype=float)
    if (amount is None) == (fraction_of_gross is None):
        raise ConfigError("reverse stress needs exactly one of target_loss and target_loss_fraction")
    if fraction_of_gross is not None:
        if not 0 < fraction_of_gross:
            raise ConfigError(f"target_loss_fraction must be positive, got {fraction_of_gross}")
        target = fraction_of_gross * np.abs(values).sum(axis=1)
    elif isinstance(amount, Mapping):
        missing = [p for p in portfolios if p not in amount]
        if missing:
            raise ConfigError(f"target_loss has no amount for portfolio(s) {', '.join(missing)}")
        target = np.array([float(amount[p]) for p in portfolios])
    else:
        target = np.full(values.shape[0], float(amount))
    if np.any(target <= 0):
        raise ConfigError("reverse stress target losses must be positive (a portfolio with no holdings has none)")
    return target


@dataclass(frozen=True)
class ReverseStress:
    """Smallest uniform shock per portfolio and group reaching the target loss.

    Attributes
    ----------
    portfolios : tuple of str
    groups : tuple of ShockGroup
    target_loss : (P,) float
    shock : (P, G) float
        Relative move ``s`` (−0.2 = all selected prices fall 20 %); NaN
        where not reachable.
    pnl : (P, G) float
        P&L at ``shock``; where not reachable, the worst P&L found in
        ``[−max_fall, max_rise]``.
    reachable : (P, G) bool
    worst_shock : (P, G) float
        The move giving the worst P&L in the searched range.
    max_fall, max_rise : float
    horizon_days : int
    """

    portfolios: tuple[str, ...]
    groups: tuple[ShockGroup, ...]
    target_loss: np.ndarray
    shock: np.ndarray
    pnl: np.ndarray
    reachable: np.ndarray
    worst_shock: np.ndarray
    max_fall: float
    max_rise: float
    horizon_days: int

    def records(self, as_of: np.datetime64) -> list[StressRecord]:
        """Rows of kind ``reverse``; ``detail.status`` is ``reached`` or ``not_reachable``."""
        out = []
        for p, name in enumerate(self.portfolios):
            for g, group in enumerate(self.groups):
                ok = bool(self.reachable[p, g])
                out.append(
                    StressRecord(
                        as_of=np.datetime64(as_of, "D"),
                        portfolio=name,
                        scenario=f"reverse_{group.name}",
                        kind=KIND_REVERSE,
                        horizon_days=self.horizon_days,
                        start_date=None,
                        end_date=None,
                        pnl=float(self.pnl[p, g]),
                        detail=make_detail(
                            status="reached" if ok else "not_reachable",
                            shock=float(self.shock[p, g]) if ok else None,
                            target_loss=float(self.target_loss[p]),
                            group={"selector": group.selector, "target": group.target},
                            searched=[-self.max_fall, self.max_rise],
                            worst_shock=float(self.worst_shock[p, g]),
                        ),
                    )
                )
        return out


def _grid_pnl(revalue: Revalue, sizes: np.ndarray, loadings: np.ndarray, horizon: int) -> np.ndarray:
    """P&L of every portfolio under sizes shared by all of them: sizes (G, K) -> (P, G, K)."""
    G, K = sizes.shape
    shocks = np.log1p(sizes)[..., None] * loadings[:, None, :]  # (G, K, N)
    return revalue(shocks.reshape(G * K, -1), horizon).reshape(-1, G, K)


def _own_pnl(revalue: Revalue, sizes: np.ndarray, loadings: np.ndarray, horizon: int) -> np.ndarray:
    """P&L of portfolio p under its own sizes: sizes (P, G) -> (P, G)."""
    P, G = sizes.shape
    shocks = np.log1p(sizes)[..., None] * loadings[None, :, :]  # (P, G, N)
    pnl = revalue(shocks.reshape(P * G, -1), horizon).reshape(P, P, G)
    return pnl[np.arange(P), np.arange(P)]


def reverse_stress(
    revalue: Revalue,
    loadings: np.ndarray,
    target_loss: np.ndarray,
    *,
    portfolios: Sequence[str],
    groups: Sequence[ShockGroup],
    max_fall: float = 0.99,
    max_rise: float = 1.0,
    horizon_days: int = 0,
    grid_points: int = 32,
    tolerance: float = 1e-10,
) -> ReverseStress:
    """Smallest uniform relative shock with a loss of at least the target.

    Parameters
    ----------
    revalue : callable
        ``revalue(log_shocks (S, N), horizon_days) -> (P, S)``.
    loadings : (G, N) array
        From :func:`group_loadings`.
    target_loss : (P,) array
        Positive loss amounts (:func:`reverse_targets`).
    portfolios : sequence of str
    groups : sequence of ShockGroup
    max_fall, max_rise : float
        Search range ``s ∈ [−max_fall, max_rise]`` (``max_fall < 1``).
    horizon_days : int
        Ageing of the book (0 = instantaneous).
    grid_points : int
        Points per direction of the coarse scan.
    tolerance : float
        Width of the final bracket on ``s``.

    Returns
    -------
    ReverseStress

    Notes
    -----
    Loss ``L(s) = −revalue(c_g · log(1 + s))``. Falls and rises are searched
    separately: a coarse grid ``s_k = ±k·max/K`` finds the first grid point
    with ``L ≥ target``; bisection on ``[s_{k−1}, s_k]`` then narrows it to
    ``tolerance``. For a book monotone in ``s`` (any linear book) this is
    the smallest such shock; for option books the grid guards against
    skipping an earlier crossing coarser than ``max/K``. The smaller
    ``|s|`` of the two directions is reported (the fall on a tie). All
    portfolios, groups and both directions advance together, one
    revaluation call per step (the scan shares one set of shocks across
    portfolios; a bisection step revalues P·2G shock vectors). For a
    linear long position of value V the answer is ``s = −target / V``.

    References
    ----------
    Basel Committee on Banking Supervision, *Principles for sound stress
    testing practices and supervision*, May 2009 (reverse stress testing;
    recalled from memory).
    """
    if not 0 < max_fall < 1 or not max_rise > 0:
        raise ConfigError(f"need 0 < max_fall < 1 and max_rise > 0, got {max_fall} and {max_rise}")
    if grid_points < 1:
        raise ConfigError(f"grid_points must be at least 1, got {grid_points}")
    c = np.asarray(loadings, dtype=float)
    target = np.asarray(target_loss, dtype=float)
    P, G = target.size, c.shape[0]
    # two directions stacked as extra "groups": index d*G + g
    cc = np.concatenate([c, c])
    sign = np.repeat([-1.0, 1.0], G)
    reach = np.repeat([max_fall, max_rise], G)
    k = np.arange(1, grid_points + 1) / grid_points
    steps = sign[:, None] * reach[:, None] * k[None, :]  # (2G, K), the same for every portfolio
    loss = -_grid_pnl(revalue, steps, cc, horizon_days)  # (P, 2G, K)
    grid = np.broadcast_to(steps, loss.shape)
    hit = loss >= target[:, None, None]
    found = hit.any(axis=2)
    first = np.argmax(hit, axis=2)
    hi = np.take_along_axis(grid, first[..., None], axis=2)[..., 0]  # reaches the target
    lo = np.where(first > 0, np.take_along_axis(grid, np.maximum(first - 1, 0)[..., None], axis=2)[..., 0], 0.0)
    # bisection on |s| inside [lo, hi]
    while np.max(np.abs(hi - lo)[found], initial=0.0) > tolerance:
        mid = 0.5 * (lo + hi)
        ok = -_own_pnl(revalue, mid, cc, horizon_days) >= target[:, None]
        hi = np.where(ok, mid, hi)
        lo = np.where(ok, lo, mid)
    hi = np.where(found, hi, np.nan)
    pnl_hit = _own_pnl(revalue, np.where(found, hi, 0.0), cc, horizon_days)
    fall, rise = slice(0, G), slice(G, 2 * G)
    take_rise = found[:, rise] & (~found[:, fall] | (np.abs(hi[:, rise]) < np.abs(hi[:, fall])))
    reachable = found[:, fall] | found[:, rise]
    shock = np.where(take_rise, hi[:, rise], hi[:, fall])
    pnl_at = np.where(take_rise, pnl_hit[:, rise], pnl_hit[:, fall])
    # worst point of the scan, reported whether or not the target was reached
    both = np.concatenate([loss[:, fall], loss[:, rise]], axis=2)  # (P, G, 2K)
    both_grid = np.concatenate([grid[:, fall], grid[:, rise]], axis=2)
    w = np.argmax(both, axis=2)
    worst_shock = np.take_along_axis(both_grid, w[..., None], axis=2)[..., 0]
    worst_pnl = -np.take_along_axis(both, w[..., None], axis=2)[..., 0]
    return ReverseStress(
        portfolios=tuple(portfolios),
        groups=tuple(groups),
        target_loss=target,
        shock=np.where(reachable, shock, np.nan),
        pnl=np.where(reachable, pnl_at, worst_pnl),
        reachable=reachable,
        worst_shock=worst_shock,
        max_fall=float(max_fall),
        max_rise=float(max_rise),
        horizon_days=int(horizon_days),
    )
