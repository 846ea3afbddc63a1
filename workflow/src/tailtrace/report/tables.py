"""The report's tables, computed from the database rows (no formatting here)."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Sequence

import numpy as np
import pandas as pd

__all__ = [
    "HEADLINE_CSV_COLUMNS",
    "ContributorView",
    "method_order",
    "headline_table",
    "disagreement_flags",
    "top_contributors",
    "backtest_table",
    "quality_table",
]

HEADLINE_CSV_COLUMNS = (
    "as_of", "portfolio", "method", "headline_method", "confidence", "horizon_days", "var", "es", "currency",
    "scaling", "n_obs", "var_se", "es_se", "var_lo", "var_hi", "run_id",
)
_METRIC_ORDER = {"var": 0, "es": 1}
_SEVERITY_ORDER = {"error": 0, "critical": 0, "warning": 1, "warn": 1, "info": 2}


def method_order(methods: Sequence[str], headline: str) -> list[str]:
    """Return the methods with the headline method first, the rest sorted.

    Parameters
    ----------
    methods : sequence of str
    headline : str

    Returns
    -------
    list of str
    """
    unique = sorted({str(m) for m in methods})
    return ([headline] if headline in unique else []) + [m for m in unique if m != headline]


def headline_table(figures: pd.DataFrame, headline: str) -> pd.DataFrame:
    """Return the day's figures in report order, one row per figure.

    Parameters
    ----------
    figures : pandas.DataFrame
        ``risk_figures`` rows of one as_of.
    headline : str
        The headline method (listed first, flagged in ``headline_method``).

    Returns
    -------
    pandas.DataFrame
        Columns :data:`HEADLINE_CSV_COLUMNS`, sorted by portfolio,
        confidence, horizon and method (headline first).
    """
    frame = figures.copy()
    rank = {m: i for i, m in enumerate(method_order(frame["method"], headline))}
    frame["headline_method"] = frame["method"] == headline
    frame["as_of"] = pd.to_datetime(frame["as_of"]).dt.strftime("%Y-%m-%d")
    frame["_rank"] = frame["method"].map(rank)
    frame = frame.sort_values(["portfolio", "confidence", "horizon_days", "_rank"], kind="mergesort")
    return frame.loc[:, list(HEADLINE_CSV_COLUMNS)].reset_index(drop=True)


def disagreement_flags(figures: pd.DataFrame, ratio: float) -> pd.DataFrame:
    """Compare methods figure by figure and flag wide disagreement.

    Parameters
    ----------
    figures : pandas.DataFrame
        ``risk_figures`` rows of one as_of.
    ratio : float
        Flag when max / min across methods exceeds it.

    Returns
    -------
    pandas.DataFrame
        One row per (portfolio, metric, confidence, horizon_days) with at
        least two methods: ``n_methods, max_method, max_value, min_method,
        min_value, ratio, flagged, note``.

    Notes
    -----
    ratio = max_m x_m / min_m x_m over the methods m with a finite figure,
    leaving out stressed-calibration methods (``*_stressed``).
    When the smallest figure is zero or negative (a book expected to gain)
    the ratio is undefined; the figure is flagged if the methods disagree
    on the sign, since one says "loss" and another says "no loss".
    """
    # stressed-calibration figures answer another question (a past crisis), so they are not compared
    figures = figures[~figures["method"].astype(str).str.endswith("_stressed")]
    long = figures.melt(
        id_vars=["portfolio", "method", "confidence", "horizon_days"], value_vars=["var", "es"],
        var_name="metric", value_name="value",
    )
    long = long[np.isfinite(long["value"].astype(float))].copy()
    keys = ["portfolio", "metric", "confidence", "horizon_days"]
    columns = [*keys, "n_methods", "max_method", "max_value", "min_method", "min_value", "ratio", "flagged", "note"]
    if long.empty:
        return pd.DataFrame(columns=columns)
    # Sorting by method first makes ties resolve to the same method every run.
    long = long.sort_values([*keys, "method"], kind="mergesort").reset_index(drop=True)
    grouped = long.groupby(keys, sort=True)
    out = grouped.agg(n_methods=("value", "size")).reset_index()
    hi = long.loc[grouped["value"].idxmax().to_numpy()].reset_index(drop=True)
    lo = long.loc[grouped["value"].idxmin().to_numpy()].reset_index(drop=True)
    out["max_method"], out["max_value"] = hi["method"], hi["value"].astype(float)
    out["min_method"], out["min_value"] = lo["method"], lo["value"].astype(float)
    out = out[out["n_methods"] >= 2].reset_index(drop=True)
    max_v, min_v = out["max_value"].to_numpy(float), out["min_value"].to_numpy(float)
    positive = min_v > 0
    out["ratio"] = np.divide(max_v, min_v, out=np.full(len(out), np.nan), where=positive)
    sign_split = ~positive & (max_v > 0)
    out["flagged"] = (positive & (out["ratio"].to_numpy() > ratio)) | sign_split
    out["note"] = np.where(sign_split, "one method shows no loss", "")
    out = out.sort_values(["portfolio", "metric", "confidence", "horizon_days"], kind="mergesort",
                          key=lambda s: s.map(_METRIC_ORDER) if s.name == "metric" else s)
    return out.loc[:, columns].reset_index(drop=True)


@dataclass(frozen=True)
class ContributorView:
    """Top contributors of one method, confidence and horizon.

    Attributes
    ----------
    rows : pandas.DataFrame
        Up to ``top_n`` rows per portfolio, largest absolute component VaR
        first, with ``share`` = component / sum of components.
    totals : pandas.DataFrame
        Per portfolio: ``total_component`` (the sum of all components, equal
        to the portfolio VaR under Euler allocation), ``n_positions`` and
        ``diversification_benefit``.
    method, confidence, horizon_days
        What the view shows.
    note : str
        Why this method was shown if it is not the headline one, else "".
    """

    rows: pd.DataFrame
    totals: pd.DataFrame
    method: str
    confidence: float
    horizon_days: int
    note: str


def top_contributors(
    contributions: pd.DataFrame, *, headline: str, confidence: float | None, top_n: int
) -> ContributorView | None:
    """Select the largest contributors to VaR per portfolio.

    Parameters
    ----------
    contributions : pandas.DataFrame
        ``risk_contributions`` rows of one as_of.
    headline : str
        Preferred method; the first method in name order is used when the
        headline method has no decomposition.
    confidence : float or None
        Preferred confidence; the highest available when ``None`` or absent.
    top_n : int

    Returns
    -------
    ContributorView or None
        ``None`` when there are no rows.
    """
    if contributions.empty:
        return None
    methods = sorted(contributions["method"].astype(str).unique())
    method = headline if headline in methods else methods[0]
    note = "" if method == headline else f"the headline method {headline} has no decomposition; showing {method}"
    sub = contributions[contributions["method"] == method]
    confs = np.sort(sub["confidence"].astype(float).unique())
    conf = float(confidence) if confidence is not None and np.isclose(confs, confidence).any() else float(confs[-1])
    sub = sub[np.isclose(sub["confidence"].astype(float), conf)]
    horizon = int(sub["horizon_days"].min())
    sub = sub[sub["horizon_days"] == horizon].copy()
    sub["abs_component"] = sub["component_var"].astype(float).abs()
    totals = sub.groupby("portfolio", sort=True).agg(
        total_component=("component_var", "sum"), n_positions=("instrument", "size"),
        diversification_benefit=("diversification_benefit", "first"),
    ).reset_index()
    sub = sub.merge(totals[["portfolio", "total_component"]], on="portfolio")
    total = sub["total_component"].to_numpy(float)
    sub["share"] = np.divide(sub["component_var"].to_numpy(float), total, out=np.full(len(sub), np.nan),
                             where=total != 0)
    sub = sub.sort_values(["portfolio", "abs_component", "instrument"], ascending=[True, False, True], kind="mergesort")
    rows = sub.groupby("portfolio", sort=True).head(top_n).drop(columns=["abs_component"]).reset_index(drop=True)
    return ContributorView(rows=rows, totals=totals, method=method, confidence=conf, horizon_days=horizon, note=note)


def backtest_table(summary: pd.DataFrame, headline: str) -> pd.DataFrame:
    """Return the backtest summary in report order.

    Parameters
    ----------
    summary : pandas.DataFrame
        ``backtest_summary`` rows of one as_of.
    headline : str

    Returns
    -------
    pandas.DataFrame
        Sorted by portfolio, confidence (highest first) and method
        (headline first).
    """
    frame = summary.copy()
    rank = {m: i for i, m in enumerate(method_order(frame["method"], headline))}
    frame["_rank"] = frame["method"].map(rank)
    frame = frame.sort_values(["portfolio", "confidence", "_rank"], ascending=[True, False, True], kind="mergesort")
    return frame.drop(columns="_rank").reset_index(drop=True)


def quality_table(quality: pd.DataFrame) -> pd.DataFrame:
    """Return data-quality findings, most severe first.

    Parameters
    ----------
    quality : pandas.DataFrame
        ``data_quality`` rows.

    Returns
    -------
    pandas.DataFrame
        Sorted by severity (error, warning, info, other), file, instrument,
        check and first date.
    """
    frame = quality.copy()
    sev = frame["severity"].astype(str).str.strip().str.lower()
    frame["_order"] = sev.map(_SEVERITY_ORDER).fillna(3)
    frame = frame.sort_values(["_order", "file", "instrument", "check", "first_date"], kind="mergesort",
                              na_position="last")
    return frame.drop(columns="_order").reset_index(drop=True)
