"""Gather everything the page shows into one object, before any HTML."""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass
from pathlib import Path
from typing import Sequence

import numpy as np
import pandas as pd

from tailtrace.report import charts
from tailtrace.report.limits import limit_utilisation, read_limits
from tailtrace.report.options import ReportOptions
from tailtrace.report.store import ReportData, load_report_data, load_scenario_pnl
from tailtrace.report.tables import (
    ContributorView,
    backtest_table,
    disagreement_flags,
    headline_table,
    method_order,
    quality_table,
    top_contributors,
)

__all__ = ["Chart", "ReportContent", "collect_report"]


@dataclass(frozen=True)
class Chart:
    """One chart: its SVG, or the reason it could not be drawn.

    Attributes
    ----------
    key : str
        Stable identifier (used as the figure's id).
    title, caption, alt : str
        Heading, the text under it, and the text alternative of the image.
    svg : str or None
    missing : str
        Why there is no chart (when ``svg`` is None).
    """

    key: str
    title: str
    caption: str
    alt: str
    svg: str | None
    missing: str = ""


@dataclass(frozen=True)
class ReportContent:
    """The report of one as_of, as data.

    A frame is ``None`` when its source table is absent from the database
    ("not computed in this run") and empty when the table has no rows for
    the as_of.

    Attributes
    ----------
    as_of : datetime.date
    options : ReportOptions
    db_name : str
        File name of the database (not its full path, so the page does not
        depend on where the results folder sits).
    run_ids : tuple of str
    currencies : tuple of str
        Currencies found in ``risk_figures`` (should be the base currency).
    figures : pandas.DataFrame or None
        Headline rows, report order (see :func:`headline_table`).
    portfolios, methods, confidences, horizons : tuple
        What the headline tables span (methods with the headline first).
    utilisation : pandas.DataFrame or None
        Limits against figures; ``None`` when no limits file was given.
    limits_file : str or None
    disagreement : pandas.DataFrame or None
    backtest : pandas.DataFrame or None
    contributors : ContributorView or None
    contributions_present : bool
        Whether the ``risk_contributions`` table exists.
    quality : pandas.DataFrame or None
    charts : tuple of Chart
    provenance : dict
        Footer facts: ``recorded_at``, ``code_version``.
    """

    as_of: dt.date
    options: ReportOptions
    db_name: str
    run_ids: tuple[str, ...]
    currencies: tuple[str, ...]
    figures: pd.DataFrame | None
    portfolios: tuple[str, ...]
    methods: tuple[str, ...]
    confidences: tuple[float, ...]
    horizons: tuple[int, ...]
    utilisation: pd.DataFrame | None
    limits_file: str | None
    disagreement: pd.DataFrame | None
    backtest: pd.DataFrame | None
    contributors: ContributorView | None
    contributions_present: bool
    quality: pd.DataFrame | None
    charts: tuple[Chart, ...]
    provenance: dict[str, str]


def _chart_confidence(available: Sequence[float], wanted: float | None) -> float | None:
    values = sorted({float(c) for c in available})
    if not values:
        return None
    if wanted is not None and np.isclose(values, wanted).any():
        return float(wanted)
    return values[-1]


def _panels(frame: pd.DataFrame, shown: Sequence[str], cap: int) -> list[str]:
    """Portfolios to draw: those of the tables that ``frame`` has, else its own first ``cap``."""
    have = set(frame["portfolio"])
    return [p for p in shown if p in have] or sorted(have)[:cap]


def _label(method: str, confidence: float, horizon: int | None = None) -> str:
    text = f"{method}, {confidence * 100:g}%"
    return text if horizon is None else f"{text}, {horizon}-day"


def _pnl_chart(data: ReportData, pnl: pd.DataFrame | None, figures: pd.DataFrame | None, opts: ReportOptions,
               shown: Sequence[str]) -> Chart:
    key, title = "chart-pnl", "Scenario P&L distribution"
    if pnl is None:
        return Chart(key, title, "", "", None, "Scenario P&L not computed in this run.")
    if pnl.empty:
        return Chart(key, title, "", "", None, f"The scenario P&L file has no rows for {data.as_of}.")
    names = _panels(pnl, shown, opts.max_chart_portfolios)
    marks = pd.DataFrame(columns=["portfolio", "var", "es"])
    label = "no 1-day figure to mark"
    if figures is not None and not figures.empty:
        day = figures[(figures["method"] == opts.headline_method) & (figures["horizon_days"] == 1)]
        conf = _chart_confidence(day["confidence"], opts.chart_confidence)
        if conf is not None:
            marks = day[np.isclose(day["confidence"].astype(float), conf)][["portfolio", "var", "es"]]
            label = "marks: " + _label(opts.headline_method, conf, 1)
    svg = charts.pnl_distribution_chart(pnl, marks, portfolios=names, currency=opts.base_currency, label=label)
    caption = (f"Histogram of each portfolio's 1-day P&L under the historical scenarios, with the "
               f"{opts.headline_method} VaR (solid line) and ES (dashed line) at the chart confidence; "
               f"losses beyond VaR are hatched.")
    alt = f"Histograms of scenario P&L for {', '.join(names)} with VaR and ES marked."
    return Chart(key, title, caption, alt, svg)


def _backtest_chart(data: ReportData, opts: ReportOptions, shown: Sequence[str]) -> Chart:
    key, title = "chart-backtest", "Rolling VaR against realised P&L"
    frame = data.backtest_forecasts
    if frame is None:
        return Chart(key, title, "", "", None, "Backtest not computed in this run.")
    if frame.empty:
        return Chart(key, title, "", "", None, f"No backtest forecasts for {data.as_of}.")
    methods = method_order(frame["method"], opts.headline_method)
    method = methods[0]
    sub = frame[frame["method"] == method]
    conf = _chart_confidence(sub["confidence"], opts.chart_confidence)
    sub = sub[np.isclose(sub["confidence"].astype(float), conf)]
    names = _panels(sub, shown, opts.max_chart_portfolios)
    svg = charts.backtest_chart(sub, portfolios=names, currency=opts.base_currency, label=_label(method, conf, 1))
    caption = (f"Daily realised P&L (bars) against the 1-day VaR forecast made the day before ({method}, "
               f"{conf * 100:g}%), drawn as a negative line; crosses mark exceptions, days whose loss exceeded VaR.")
    alt = f"Realised P&L and rolling VaR over the backtest window for {', '.join(names)}, exceptions marked."
    return Chart(key, title, caption, alt, svg)


def _methods_chart(figures: pd.DataFrame | None, opts: ReportOptions, shown: Sequence[str],
                   methods: Sequence[str]) -> Chart:
    key, title = "chart-methods", "VaR by method"
    if figures is None or figures.empty:
        return Chart(key, title, "", "", None, "Risk figures not computed in this run.")
    horizon = int(figures["horizon_days"].min())
    sub = figures[figures["horizon_days"] == horizon]
    conf = _chart_confidence(sub["confidence"], opts.chart_confidence)
    sub = sub[np.isclose(sub["confidence"].astype(float), conf)]
    svg = charts.var_by_method_chart(sub, portfolios=list(shown), methods=list(methods), currency=opts.base_currency,
                                     label=f"{conf * 100:g}%, {horizon}-day", headline=opts.headline_method)
    caption = (f"{horizon}-day VaR at {conf * 100:g}% for each method (bars), with the method's confidence band "
               f"where it reports one (whiskers) and ES (diamonds). The headline method's bar is hatched.")
    alt = f"Bar chart of VaR by method for {', '.join(shown)}."
    return Chart(key, title, caption, alt, svg)


def _contributions_chart(view: ContributorView | None, present: bool, data: ReportData,
                         opts: ReportOptions) -> Chart:
    key, title = "chart-contributions", "Contributions to VaR"
    if view is None:
        why = f"No risk contributions for {data.as_of}." if present else "Risk decomposition not computed in this run."
        return Chart(key, title, "", "", None, why)
    names = sorted(set(view.rows["portfolio"]))[: opts.max_chart_portfolios]
    label = _label(view.method, view.confidence, view.horizon_days)
    svg = charts.contributions_chart(view.rows, portfolios=names, currency=opts.base_currency, label=label)
    caption = (f"Component VaR of the {opts.top_n} largest contributors per portfolio ({label}); components of all "
               f"positions add up to the portfolio VaR. Hatched bars to the left are positions that reduce risk.")
    alt = f"Bar chart of component VaR per instrument for {', '.join(names)}."
    return Chart(key, title, caption, alt, svg)


def _provenance_facts(data: ReportData, opts: ReportOptions) -> dict[str, str]:
    facts: dict[str, str] = {}
    prov = data.provenance
    if prov is not None and not prov.empty:
        recorded = prov["recorded_at"].dropna()
        if not recorded.empty:
            facts["recorded_at"] = str(recorded.astype(str).max())
        versions: list[str] = []
        for column in ("code_version", "git_commit", "tailtrace_version"):
            values = sorted({str(v) for v in prov[column].dropna()})
            versions.extend(f"{column}={v}" for v in values)
        dirty = prov["git_dirty"].dropna()
        if not dirty.empty and dirty.astype(bool).any():
            versions.append("working tree had uncommitted changes")
        if versions:
            facts["recorded_code_version"] = "; ".join(versions)
    if opts.code_version:
        facts["code_version"] = str(opts.code_version)
    return facts


def collect_report(
    db_path: str | Path, as_of: object, *, options: ReportOptions, limits_csv: str | Path | None = None,
    pnl_parquet: str | Path | Sequence[str | Path] | None = None,
) -> ReportContent:
    """Read the database and compute every section of the report.

    Parameters
    ----------
    db_path : str or Path
        Results DuckDB file, opened read-only.
    as_of : date-like
    options : ReportOptions
    limits_csv : str, Path or None
        Limits file (see :func:`tailtrace.report.limits.read_limits`).
    pnl_parquet : str, Path, sequence of them, or None
        Scenario P&L (columns ``as_of, portfolio, date, pnl``).

    Returns
    -------
    ReportContent
    """
    opts = options
    data = load_report_data(db_path, as_of, attempts=opts.db_attempts, pause=opts.db_retry_seconds)
    limits = read_limits(limits_csv, default_method=opts.headline_method) if limits_csv is not None else None
    pnl = load_scenario_pnl(pnl_parquet, data.as_of)

    raw = data.risk_figures
    figures = headline_table(raw, opts.headline_method) if raw is not None else None
    have = figures is not None and not figures.empty
    portfolios = tuple(sorted(set(figures["portfolio"]))) if have else ()
    methods = tuple(method_order(figures["method"], opts.headline_method)) if have else ()
    shown = portfolios[: opts.max_chart_portfolios]

    contributions = data.risk_contributions
    view = None
    if contributions is not None:
        view = top_contributors(contributions, headline=opts.headline_method, confidence=opts.chart_confidence,
                                top_n=opts.top_n)
    chart_list = (
        _pnl_chart(data, pnl, raw, opts, shown),
        _backtest_chart(data, opts, shown),
        _methods_chart(raw, opts, shown, methods),
        _contributions_chart(view, contributions is not None, data, opts),
    )
    return ReportContent(
        as_of=data.as_of,
        options=opts,
        db_name=Path(data.db_path).name,
        run_ids=tuple(sorted({str(r) for r in raw["run_id"].dropna()})) if raw is not None else (),
        currencies=tuple(sorted({str(c) for c in raw["currency"].dropna()})) if raw is not None else (),
        figures=figures,
        portfolios=portfolios,
        methods=methods,
        confidences=tuple(sorted({float(c) for c in figures["confidence"]})) if have else (),
        horizons=tuple(sorted({int(h) for h in figures["horizon_days"]})) if have else (),
        utilisation=limit_utilisation(limits, raw, near_limit=opts.near_limit) if limits is not None else None,
        limits_file=Path(limits_csv).name if limits_csv is not None else None,
        disagreement=disagreement_flags(raw, opts.disagreement_ratio) if raw is not None else None,
        backtest=backtest_table(data.backtest_summary, opts.headline_method)
        if data.backtest_summary is not None else None,
        contributors=view,
        contributions_present=contributions is not None,
        quality=quality_table(data.data_quality) if data.data_quality is not None else None,
        charts=chart_list,
        provenance=_provenance_facts(data, opts),
    )
