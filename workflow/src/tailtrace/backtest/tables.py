"""Named tables of a backtest: the daily forecasts and the per-series summary."""

from __future__ import annotations

from typing import Any

import numpy as np

from .coverage import coverage_tests
from .result import BacktestResult
from .shortfall import acerbi_szekely_z2, z2_p_value, z2_thresholds, z2_zone
from .zones import exception_rate, traffic_light

__all__ = ["SUMMARY_COLUMNS", "FORECAST_COLUMNS", "summary_rows", "summary_table", "forecast_table"]

SUMMARY_COLUMNS = (
    "portfolio",
    "method",
    "confidence",
    "n",
    "first_date",
    "last_date",
    "exceptions",
    "expected_exceptions",
    "exception_dates",
    "kupiec_lr",
    "kupiec_p",
    "independence_lr",
    "independence_p",
    "cc_lr",
    "cc_p",
    "zone",
    "plus_factor",
    "es_z2",
    "es_p",
    "es_zone",
    "es_thresholds",
    "fallback_days",
    "window",
    "pnl_source",
)
FORECAST_COLUMNS = ("date", "portfolio", "method", "confidence", "var", "es", "pnl", "exception", "fallback")


def summary_rows(result: BacktestResult, *, plus_factor_rule: str = "equivalent_probability") -> list[dict[str, Any]]:
    """Backtest statistics per (method, portfolio, confidence).

    Parameters
    ----------
    result : BacktestResult
    plus_factor_rule : str
        See :func:`~tailtrace.backtest.zones.traffic_light`.

    Returns
    -------
    list of dict
        One row per (method, portfolio, confidence), in that order, with
        :data:`SUMMARY_COLUMNS` as keys. Dates are ``datetime.date``;
        ``exception_dates`` a list of ISO strings; ``es_thresholds`` says
        whether the Z2 zone used the published or the normal-null thresholds.

    Notes
    -----
    Exceptions ``pnl < -VaR``; Kupiec POF and Christoffersen
    independence / conditional coverage (:mod:`.coverage`); traffic light
    for n days at each confidence (:mod:`.zones`); Acerbi-Szekely Z2 with
    its zone and p-value under the normal null (:mod:`.shortfall`).
    """
    hits = result.exceptions  # (M, P, C, D)
    conf = result.confidences
    n = int(result.dates.size)
    tests = coverage_tests(hits, conf[None, None, :])
    z2 = acerbi_szekely_z2(result.pnl[None, :, None, :], result.var, result.es, conf[None, None, :])
    zones = np.empty(tests.exceptions.shape, dtype=object)
    plus = np.empty(tests.exceptions.shape)
    es_zone = np.empty(tests.exceptions.shape, dtype=object)
    es_p = np.empty(tests.exceptions.shape)
    sources = []
    for c_idx, c in enumerate(conf):  # a handful of confidence levels
        zones[..., c_idx], plus[..., c_idx], _ = traffic_light(
            tests.exceptions[..., c_idx], n, float(c), plus_factor_rule=plus_factor_rule
        )
        alpha = float(exception_rate(c))
        th = z2_thresholds(n, alpha)
        sources.append(th.source)
        es_zone[..., c_idx] = z2_zone(z2[..., c_idx], th)
        es_p[..., c_idx] = z2_p_value(z2[..., c_idx], n, alpha)
    fallback_days = np.count_nonzero(result.fallback, axis=-1)
    iso = np.datetime_as_string(result.dates, unit="D")
    first, last = result.dates[0].item(), result.dates[-1].item()
    rows = []
    for m_idx, method in enumerate(result.methods):
        for p_idx, portfolio in enumerate(result.portfolios):
            for c_idx, c in enumerate(conf):
                at = (m_idx, p_idx, c_idx)
                rows.append(
                    {
                        "portfolio": portfolio,
                        "method": method,
                        "confidence": float(c),
                        "n": n,
                        "first_date": first,
                        "last_date": last,
                        "exceptions": int(tests.exceptions[at]),
                        "expected_exceptions": float(n * exception_rate(c)),
                        "exception_dates": iso[hits[at]].tolist(),
                        "kupiec_lr": float(tests.kupiec_lr[at]),
                        "kupiec_p": float(tests.kupiec_p[at]),
                        "independence_lr": float(tests.independence_lr[at]),
                        "independence_p": float(tests.independence_p[at]),
                        "cc_lr": float(tests.cc_lr[at]),
                        "cc_p": float(tests.cc_p[at]),
                        "zone": str(zones[at]),
                        "plus_factor": float(plus[at]),
                        "es_z2": float(z2[at]),
                        "es_p": float(es_p[at]),
                        "es_zone": str(es_zone[at]),
                        "es_thresholds": sources[c_idx],
                        "fallback_days": int(fallback_days[at]),
                        "window": result.window,
                        "pnl_source": result.pnl_source,
                    }
                )
    return rows


def summary_table(result: BacktestResult, **kwargs: Any):
    """:func:`summary_rows` as a ``pyarrow.Table`` with a fixed schema.

    Parameters
    ----------
    result : BacktestResult
    **kwargs
        Passed to :func:`summary_rows`.

    Returns
    -------
    pyarrow.Table
        Columns :data:`SUMMARY_COLUMNS`; dates as date32,
        ``exception_dates`` as list<string>.
    """
    import pyarrow as pa

    schema = pa.schema(
        [
            ("portfolio", pa.string()),
            ("method", pa.string()),
            ("confidence", pa.float64()),
            ("n", pa.int64()),
            ("first_date", pa.date32()),
            ("last_date", pa.date32()),
            ("exceptions", pa.int64()),
            ("expected_exceptions", pa.float64()),
            ("exception_dates", pa.list_(pa.string())),
            ("kupiec_lr", pa.float64()),
            ("kupiec_p", pa.float64()),
            ("independence_lr", pa.float64()),
            ("independence_p", pa.float64()),
            ("cc_lr", pa.float64()),
            ("cc_p", pa.float64()),
            ("zone", pa.string()),
            ("plus_factor", pa.float64()),
            ("es_z2", pa.float64()),
            ("es_p", pa.float64()),
            ("es_zone", pa.string()),
            ("es_thresholds", pa.string()),
            ("fallback_days", pa.int64()),
            ("window", pa.int64()),
            ("pnl_source", pa.string()),
        ]
    )
    return pa.Table.from_pylist(summary_rows(result, **kwargs), schema=schema)


def forecast_table(result: BacktestResult):
    """Daily forecasts in long form, one row per (method, portfolio, confidence, date).

    Parameters
    ----------
    result : BacktestResult

    Returns
    -------
    pyarrow.Table
        Columns :data:`FORECAST_COLUMNS`, sorted by method, portfolio,
        confidence, date; built from flattened arrays, no Python row loop.
    """
    import pyarrow as pa

    M, P, C, D = result.var.shape
    shape = (M, P, C, D)
    idx = np.indices(shape).reshape(4, -1)
    methods = np.asarray(result.methods, dtype=object)
    portfolios = np.asarray(result.portfolios, dtype=object)
    pnl = np.broadcast_to(result.pnl[None, :, None, :], shape)
    columns = {
        "date": pa.array(result.dates[idx[3]], type=pa.date32()),
        "portfolio": pa.array(portfolios[idx[1]], type=pa.string()),
        "method": pa.array(methods[idx[0]], type=pa.string()),
        "confidence": pa.array(result.confidences[idx[2]], type=pa.float64()),
        "var": pa.array(result.var.ravel(), type=pa.float64()),
        "es": pa.array(result.es.ravel(), type=pa.float64()),
        "pnl": pa.array(pnl.ravel(), type=pa.float64()),
        "exception": pa.array(result.exceptions.ravel(), type=pa.bool_()),
        "fallback": pa.array(result.fallback.ravel(), type=pa.bool_()),
    }
    return pa.table(columns)
