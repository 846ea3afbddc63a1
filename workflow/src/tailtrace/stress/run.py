"""One call for the pipeline: every stress figure of one as_of."""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass, field
from typing import Any, Mapping, Sequence

import numpy as np

from ..errors import ConfigError
from ..estimators.base import RiskSample
from .historical import StressWindow, replay_windows, worst_losses
from .hypothetical import VolRevalue, run_hypothetical
from .instruments import InstrumentMeta
from .liquidity import LIQUIDITY_HORIZON_BUCKETS, liquidity_adjusted_es, liquidity_horizons
from .records import StressRecord, check_unique
from .reverse import ShockGroup, default_groups, group_loadings, reverse_stress, reverse_targets
from .shocks import ShockScenario, resolve_scenarios
from .stressed import BASIS_AGGREGATE, StressedWindow, StressedWindowScan, find_stressed_window, stressed_sample

__all__ = ["StressSettings", "StressRun", "run_stress", "stressed_samples", "STRESSED_WINDOW_COLUMNS"]

# proposed DuckDB table stressed_windows: one row per as_of and label
STRESSED_WINDOW_COLUMNS: dict[str, str] = {
    "as_of": "DATE",
    "label": "VARCHAR",
    "basis": "VARCHAR",
    "start_date": "DATE",
    "end_date": "DATE",
    "length_days": "INTEGER",
    "horizon_days": "INTEGER",
    "confidence": "DOUBLE",
    "es": "DOUBLE",
}


@dataclass(frozen=True)
class StressSettings:
    """The ``stress`` block of the pipeline config (defaults as in the schema).

    Attributes
    ----------
    worst_horizons_days : tuple of int
        Horizons of the historical worst losses.
    stressed_length_days, stressed_horizon_days : int
    stressed_confidence : float
    stressed_basis : str
        ``aggregate`` or ``per_portfolio``.
    lh_confidence : float
    lh_base_horizon_days : int
    lh_buckets_days : tuple of int
    lh_by_asset_class : mapping
        Overrides of :data:`tailtrace.stress.liquidity.DEFAULT_LIQUIDITY_HORIZONS`.
    lh_default_days : int or None
    reverse_target_loss : float, mapping or None
    reverse_target_loss_fraction : float or None
    reverse_groups : tuple of ShockGroup or None
        None: all risky factors, then one group per asset class.
    reverse_max_fall, reverse_max_rise : float
    reverse_horizon_days : int
    riskless_asset_classes : tuple of str
    """

    worst_horizons_days: tuple[int, ...] = (1, 10)
    stressed_length_days: int = 250
    stressed_confidence: float = 0.975
    stressed_horizon_days: int = 1
    stressed_basis: str = BASIS_AGGREGATE
    lh_confidence: float = 0.975
    lh_base_horizon_days: int = 10
    lh_buckets_days: tuple[int, ...] = LIQUIDITY_HORIZON_BUCKETS
    lh_by_asset_class: Mapping[str, int] = field(default_factory=dict)
    lh_default_days: int | None = None
    reverse_target_loss: float | Mapping[str, float] | None = None
    reverse_target_loss_fraction: float | None = 0.2
    reverse_groups: tuple[ShockGroup, ...] | None = None
    reverse_max_fall: float = 0.99
    reverse_max_rise: float = 1.0
    reverse_horizon_days: int = 0
    riskless_asset_classes: tuple[str, ...] = ("cash",)

    @classmethod
    def from_config(cls, stress: Mapping[str, Any]) -> "StressSettings":
        """Build from the nested ``stress`` config block; absent keys take the defaults.

        Parameters
        ----------
        stress : mapping
            ``{worst_horizons_days, stressed_window: {length_days, confidence,
            horizon_days, basis}, liquidity_es: {confidence,
            base_horizon_days, buckets_days, by_asset_class, default_days},
            reverse: {target_loss, target_loss_fraction, groups, max_fall,
            max_rise, horizon_days}, riskless_asset_classes}``.
        """
        blocks = {"stressed_window": "stressed_", "liquidity_es": "lh_", "reverse": "reverse_"}
        names = {f.name for f in dataclasses.fields(cls)}
        kw: dict[str, Any] = {}
        for key, value in stress.items():
            if key in blocks:
                for sub, val in (value or {}).items():
                    name = blocks[key] + sub
                    if name not in names:
                        raise ConfigError(f"unknown key stress.{key}.{sub}")
                    kw[name] = val
            elif key in names:
                kw[key] = value
            elif key not in ("windows_file", "shocks_file"):  # paths are the rule's business
                raise ConfigError(f"unknown key stress.{key}")
        if kw.get("reverse_target_loss") is not None and "reverse_target_loss_fraction" not in kw:
            kw["reverse_target_loss_fraction"] = None  # an amount replaces the default fraction
        groups = kw.get("reverse_groups")
        if groups is not None:
            kw["reverse_groups"] = tuple(
                ShockGroup(str(g["name"]), str(g["selector"]), str(g.get("target", ""))) for g in groups
            )
        for name in ("worst_horizons_days", "lh_buckets_days", "riskless_asset_classes"):
            if name in kw:
                kw[name] = tuple(kw[name])
        return cls(**kw)


@dataclass(frozen=True)
class StressRun:
    """Everything :func:`run_stress` computed for one as_of.

    Attributes
    ----------
    records : list of StressRecord
        Rows of ``stress_results``.
    liquidity_rows : list of dict
        Rows of ``liquidity_es`` for calibrations ``current`` and ``stressed``.
    stressed : StressedWindowScan
    stressed_window_rows : list of dict
        Rows of ``stressed_windows`` (:data:`STRESSED_WINDOW_COLUMNS`).
    """

    records: list[StressRecord]
    liquidity_rows: list[dict]
    stressed: StressedWindowScan
    stressed_window_rows: list[dict]


def stressed_samples(sample: RiskSample, history_dates: np.ndarray, scan: StressedWindowScan) -> list[RiskSample]:
    """Stressed samples to run the estimators on, one per distinct stressed window.

    Parameters
    ----------
    sample : RiskSample
    history_dates : (H,) datetime64
    scan : StressedWindowScan

    Returns
    -------
    list of RiskSample
        Aggregate basis: one sample with every portfolio. Per-portfolio
        basis: portfolios that share a window share a sample (often all of
        them, when one crisis dominates the history), in portfolio order of
        their first member.
    """
    if scan.basis == BASIS_AGGREGATE:
        return [stressed_sample(sample, history_dates, scan.window(0))]
    groups: dict[int, list[str]] = {}
    for label, w in zip(scan.labels, scan.best):
        groups.setdefault(int(w), []).append(label)
    return [stressed_sample(sample, history_dates, scan.window(names[0]), portfolios=names) for names in groups.values()]


def _window_rows(as_of: np.datetime64, scan: StressedWindowScan) -> list[dict]:
    rows = []
    for g in range(len(scan.labels)):
        w: StressedWindow = scan.window(g)
        rows.append(
            {
                "as_of": np.datetime64(as_of, "D"),
                "label": w.label,
                "basis": scan.basis,
                "start_date": w.start_date,
                "end_date": w.end_date,
                "length_days": w.length_days,
                "horizon_days": w.horizon_days,
                "confidence": w.confidence,
                "es": w.es,
            }
        )
    return rows


def run_stress(
    sample: RiskSample,
    history_dates: np.ndarray,
    meta: InstrumentMeta,
    *,
    windows: Sequence[StressWindow],
    scenarios: Sequence[ShockScenario],
    settings: StressSettings = StressSettings(),
    prices: np.ndarray | None = None,
    revalue_vol: VolRevalue | None = None,
) -> StressRun:
    """Historical, hypothetical and reverse stress, the stressed window and liquidity-horizon ES.

    Parameters
    ----------
    sample : RiskSample
        Today's sample; ``sample.history`` must match ``history_dates``.
    history_dates : (H,) datetime64
    meta : InstrumentMeta
        In the column order of ``sample.instruments``.
    windows : sequence of StressWindow
        From :func:`tailtrace.stress.historical.load_stress_windows`.
    scenarios : sequence of ShockScenario
        From :func:`tailtrace.stress.shocks.load_shock_scenarios`.
    settings : StressSettings
    prices : (N,) array, optional
        Today's local-currency prices (for absolute shocks).
    revalue_vol : callable, optional
        Vol-aware revaluation for option books.

    Returns
    -------
    StressRun
    """
    if tuple(meta.instruments) != tuple(sample.instruments):
        raise ValueError("meta.instruments must match sample.instruments, in the same order")
    hist, rev, names, as_of = sample.history, sample.revalue, sample.portfolios, sample.as_of
    st = settings
    recs: list[StressRecord] = []
    recs += worst_losses(hist, history_dates, rev, st.worst_horizons_days, portfolios=names).records(as_of)
    if windows:
        recs += replay_windows(windows, hist, history_dates, rev, portfolios=names).records(as_of)
    if scenarios:
        resolved = resolve_scenarios(scenarios, meta, prices=prices)
        recs += run_hypothetical(resolved, rev, portfolios=names, revalue_vol=revalue_vol).records(as_of)
    groups = st.reverse_groups or default_groups(meta, st.riskless_asset_classes)
    targets = reverse_targets(
        sample.values, amount=st.reverse_target_loss, fraction_of_gross=st.reverse_target_loss_fraction, portfolios=names
    )
    recs += reverse_stress(
        rev, group_loadings(meta, groups, st.riskless_asset_classes), targets, portfolios=names, groups=groups,
        max_fall=st.reverse_max_fall, max_rise=st.reverse_max_rise, horizon_days=st.reverse_horizon_days,
    ).records(as_of)
    check_unique(recs)

    scan = find_stressed_window(
        hist, history_dates, rev, portfolios=names, length_days=st.stressed_length_days,
        confidence=st.stressed_confidence, horizon_days=st.stressed_horizon_days, basis=st.stressed_basis,
    )
    lh = liquidity_horizons(meta, st.lh_by_asset_class, default=st.lh_default_days, buckets=st.lh_buckets_days)
    lh_kw = dict(confidence=st.lh_confidence, base_horizon=st.lh_base_horizon_days, buckets=st.lh_buckets_days)
    rows = liquidity_adjusted_es(sample.returns, rev, lh, portfolios=names, **lh_kw).rows(as_of, "current")
    for s in stressed_samples(sample, history_dates, scan):  # one per distinct window
        rows += liquidity_adjusted_es(s.returns, s.revalue, lh, portfolios=s.portfolios, **lh_kw).rows(as_of, "stressed")
    return StressRun(recs, rows, scan, _window_rows(as_of, scan))
