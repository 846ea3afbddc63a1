"""A small, seeded results database for the report tests (invented data).

Shared by the unit tests and the browser test (which loads it by path). The
tables follow the layout the pipeline writes; each can be left out to test
the "not computed" paths.
"""

from __future__ import annotations

import datetime as dt
import html.parser
import json
from pathlib import Path
from typing import Iterable

import duckdb
import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

__all__ = [
    "AS_OF",
    "EVIL",
    "PORTFOLIOS",
    "METHODS",
    "ALL_TABLES",
    "write_fixture_db",
    "write_scenario_pnl",
    "write_limits",
    "HeadlineCells",
    "db_headline",
]

AS_OF = dt.date(2024, 6, 28)
EVIL = "<script>alert(1)</script>"
PORTFOLIOS = ("balanced_core", EVIL, "overlay_hedged")
METHODS = ("historical", "parametric_normal", "monte_carlo", "ewma_normal")
CONFIDENCES = (0.975, 0.99)
HORIZONS = (1, 10)
ALL_TABLES = ("risk_figures", "data_quality", "backtest_summary", "backtest_forecasts", "risk_contributions",
              "provenance")
RUN_ID = "run-20240628-a1"

_DDL = {
    "risk_figures": """CREATE TABLE risk_figures (as_of DATE, portfolio VARCHAR, method VARCHAR,
        confidence DOUBLE, horizon_days INTEGER, var DOUBLE, es DOUBLE, currency VARCHAR, scaling VARCHAR,
        n_obs INTEGER, run_id VARCHAR, var_se DOUBLE, es_se DOUBLE, var_lo DOUBLE, var_hi DOUBLE,
        diagnostics VARCHAR)""",
    "data_quality": """CREATE TABLE data_quality (file VARCHAR, instrument VARCHAR, "check" VARCHAR,
        first_date DATE, last_date DATE, n INTEGER, detail VARCHAR, severity VARCHAR)""",
    "backtest_summary": """CREATE TABLE backtest_summary (as_of DATE, portfolio VARCHAR, method VARCHAR,
        confidence DOUBLE, n INTEGER, first_date DATE, last_date DATE, exceptions INTEGER,
        expected_exceptions DOUBLE, exception_dates VARCHAR, kupiec_lr DOUBLE, kupiec_p DOUBLE,
        independence_lr DOUBLE, independence_p DOUBLE, cc_lr DOUBLE, cc_p DOUBLE, zone VARCHAR,
        plus_factor DOUBLE, es_z2 DOUBLE, es_zone VARCHAR)""",
    "backtest_forecasts": """CREATE TABLE backtest_forecasts (as_of DATE, date DATE, portfolio VARCHAR,
        method VARCHAR, confidence DOUBLE, var DOUBLE, es DOUBLE, pnl DOUBLE, exception BOOLEAN)""",
    "risk_contributions": """CREATE TABLE risk_contributions (as_of DATE, portfolio VARCHAR, method VARCHAR,
        confidence DOUBLE, horizon_days INTEGER, instrument VARCHAR, position_value DOUBLE, marginal_var DOUBLE,
        component_var DOUBLE, incremental_var DOUBLE, standalone_var DOUBLE, diversification_benefit DOUBLE)""",
    "provenance": """CREATE TABLE provenance (run_id VARCHAR, recorded_at TIMESTAMP, rule VARCHAR, path VARCHAR,
        role VARCHAR, sha256 VARCHAR, code_version VARCHAR, git_dirty BOOLEAN)""",
}


def _figures(rng: np.random.Generator) -> pd.DataFrame:
    base = {PORTFOLIOS[0]: 1_250_000.0, PORTFOLIOS[1]: 640_000.0, PORTFOLIOS[2]: 210_000.0}
    tilt = {"historical": 1.0, "parametric_normal": 0.86, "monte_carlo": 0.9, "ewma_normal": 1.12}
    rows = []
    for p in PORTFOLIOS:
        for m in METHODS:
            # The hedged book's EWMA figure sits far from the others: a disagreement flag to show.
            spread = 1.9 if (p == PORTFOLIOS[2] and m == "ewma_normal") else 1.0
            for c in CONFIDENCES:
                zf = 1.0 if c == 0.975 else 1.19
                for h in HORIZONS:
                    var = base[p] * tilt[m] * spread * zf * np.sqrt(h) * (1 + 0.01 * rng.standard_normal())
                    es = var * (1.17 + 0.02 * rng.random())
                    mc = m == "monte_carlo"
                    scaling = "none" if h == 1 else ("simulated" if mc else "sqrt_time")
                    band = m == "historical"
                    rows.append(dict(
                        as_of=AS_OF, portfolio=p, method=m, confidence=c, horizon_days=h, var=var, es=es,
                        currency="EUR", scaling=scaling, n_obs=500, run_id=RUN_ID,
                        var_se=var * 0.012 if mc else None, es_se=es * 0.015 if mc else None,
                        var_lo=var * 0.93 if band else None, var_hi=var * 1.08 if band else None,
                        diagnostics=json.dumps({"note": "fixture"}),
                    ))
    frame = pd.DataFrame(rows)
    # A figure of another day must never leak into the report.
    other = frame.iloc[:3].copy()
    other["as_of"] = AS_OF - dt.timedelta(days=1)
    other["var"] = 9.99e9
    return pd.concat([frame, other], ignore_index=True)


def _business_days(end: dt.date, n: int) -> list[dt.date]:
    days = pd.bdate_range(end=end, periods=n)
    return [d.date() for d in days]


def _backtest(rng: np.random.Generator, figures: pd.DataFrame) -> tuple[pd.DataFrame, pd.DataFrame]:
    dates = _business_days(AS_OF - dt.timedelta(days=1), 250)
    forecasts, summary = [], []
    day = figures[(figures["as_of"] == AS_OF) & (figures["horizon_days"] == 1)]
    for r in day.itertuples(index=False):
        vol = r.var / 2.33
        pnl = vol * rng.standard_t(4, size=len(dates)) * 0.8
        var_path = r.var * (1 + 0.05 * np.sin(np.arange(len(dates)) / 20.0))
        exc = pnl < -var_path
        forecasts.append(pd.DataFrame(dict(
            as_of=AS_OF, date=dates, portfolio=r.portfolio, method=r.method, confidence=r.confidence,
            var=var_path, es=var_path * 1.2, pnl=pnl, exception=exc,
        )))
        k = int(exc.sum())
        zone = "green" if k <= 4 else ("yellow" if k <= 9 else "red")
        summary.append(dict(
            as_of=AS_OF, portfolio=r.portfolio, method=r.method, confidence=r.confidence, n=len(dates),
            first_date=dates[0], last_date=dates[-1], exceptions=k, expected_exceptions=len(dates) * (1 - r.confidence),
            exception_dates=json.dumps([str(d) for d, e in zip(dates, exc) if e]), kupiec_lr=float(rng.random() * 4),
            kupiec_p=float(rng.random()), independence_lr=float(rng.random()), independence_p=float(rng.random()),
            cc_lr=float(rng.random() * 5), cc_p=float(rng.random() * 0.2), zone=zone,
            plus_factor={"green": 0.0, "yellow": 0.5, "red": 1.0}[zone], es_z2=float(-rng.random()),
            es_zone="green",
        ))
    return pd.concat(forecasts, ignore_index=True), pd.DataFrame(summary)


def _contributions(rng: np.random.Generator, figures: pd.DataFrame) -> pd.DataFrame:
    instruments = [f"instr_{i:02d}" for i in range(14)] + ["<b>bold</b> & co"]
    rows = []
    day = figures[figures["as_of"] == AS_OF]
    for r in day.itertuples(index=False):
        weights = rng.normal(1.0, 0.8, size=len(instruments))
        weights[3] = -0.6  # a hedge
        comp = r.var * weights / weights.sum()
        values = rng.uniform(1e5, 5e6, size=len(instruments))
        standalone = np.abs(comp) * 1.3
        for inst, c, v, s in zip(instruments, comp, values, standalone):
            rows.append(dict(
                as_of=AS_OF, portfolio=r.portfolio, method=r.method, confidence=r.confidence,
                horizon_days=r.horizon_days, instrument=inst, position_value=v, marginal_var=c / v,
                component_var=c, incremental_var=c * 0.95, standalone_var=s,
                diversification_benefit=float(standalone.sum() - r.var),
            ))
    return pd.DataFrame(rows)


def _quality() -> pd.DataFrame:
    return pd.DataFrame([
        dict(file="prices/equities_eu.csv", instrument="instr_04", check="stale_price",
             first_date=dt.date(2024, 5, 2), last_date=dt.date(2024, 5, 9), n=6,
             detail="same close 6 days running", severity="warning"),
        dict(file="prices/rates.csv", instrument="instr_11", check="gap", first_date=dt.date(2024, 3, 28),
             last_date=dt.date(2024, 4, 2), n=2, detail="2 business days missing", severity="warning"),
        dict(file="prices/fx.csv", instrument="<img src=x onerror=alert(2)>", check="unknown_instrument",
             first_date=None, last_date=None, n=1, detail="not in instruments.csv", severity="info"),
    ])


def _provenance() -> pd.DataFrame:
    return pd.DataFrame([
        dict(run_id=RUN_ID, recorded_at=dt.datetime(2024, 6, 28, 18, 5, 11), rule="aggregate",
             path="results/risk.duckdb", role="output", sha256="ab" * 32, code_version="0.1.0+g1234abc",
             git_dirty=False),
    ])


def _insert(con: duckdb.DuckDBPyConnection, table: str, frame: pd.DataFrame) -> None:
    con.execute(_DDL[table])
    con.register("incoming", frame)
    columns = ", ".join(f'"{c}"' for c in frame.columns)
    con.execute(f'INSERT INTO "{table}" ({columns}) SELECT {columns} FROM incoming')
    con.unregister("incoming")


def write_fixture_db(path: str | Path, *, tables: Iterable[str] = ALL_TABLES, seed: int = 20240628) -> Path:
    """Write the fixture database with the given tables.

    Parameters
    ----------
    path : str or Path
    tables : iterable of str
        Subset of :data:`ALL_TABLES`; the others are left out.
    seed : int

    Returns
    -------
    Path
    """
    rng = np.random.default_rng(seed)
    wanted = set(tables)
    figures = _figures(rng)
    forecasts, summary = _backtest(rng, figures)
    frames = {
        "risk_figures": figures, "data_quality": _quality(), "backtest_summary": summary,
        "backtest_forecasts": forecasts, "risk_contributions": _contributions(rng, figures),
        "provenance": _provenance(),
    }
    out = Path(path)
    with duckdb.connect(str(out)) as con:
        con.execute("BEGIN")
        for table in ALL_TABLES:
            if table in wanted:
                _insert(con, table, frames[table])
        con.execute("COMMIT")
        con.execute("CHECKPOINT")
    return out


def write_scenario_pnl(path: str | Path, *, seed: int = 7) -> Path:
    """Write 500 scenario P&L values per portfolio for AS_OF (and decoys for the day before)."""
    rng = np.random.default_rng(seed)
    dates = _business_days(AS_OF, 500)
    scale = {PORTFOLIOS[0]: 530_000.0, PORTFOLIOS[1]: 270_000.0, PORTFOLIOS[2]: 90_000.0}
    parts = []
    for as_of in (AS_OF, AS_OF - dt.timedelta(days=1)):
        for p in PORTFOLIOS:
            parts.append(pd.DataFrame(dict(as_of=as_of, portfolio=p, date=dates,
                                           pnl=scale[p] * rng.standard_t(4, size=len(dates)))))
    frame = pd.concat(parts, ignore_index=True)
    table = pa.Table.from_pandas(frame, preserve_index=False).replace_schema_metadata(None)
    pq.write_table(table, str(path))
    return Path(path)


def write_limits(path: str | Path, rows: Iterable[tuple[object, ...]], *, method_column: bool = False) -> Path:
    """Write a limits CSV from (portfolio, metric, confidence, horizon_days, limit[, method]) tuples."""
    import csv

    header = ["portfolio", "metric", "confidence", "horizon_days", "limit"] + (["method"] if method_column else [])
    with open(path, "w", newline="", encoding="utf-8") as handle:
        writer = csv.writer(handle)
        writer.writerow(header)
        writer.writerows(rows)
    return Path(path)


class HeadlineCells(html.parser.HTMLParser):
    """Collect the headline tables' cells (data attributes and shown text) and count script tags."""

    def __init__(self) -> None:
        super().__init__()
        self.cells: list[dict[str, str]] = []
        self.scripts = 0
        self._current: dict[str, str] | None = None
        self._in_table = 0

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        a = {k: v or "" for k, v in attrs}
        if tag == "script":
            self.scripts += 1
        if tag == "table" and "headline-table" in a.get("class", ""):
            self._in_table += 1
        if tag == "span" and a.get("class") == "v" and self._current is not None:
            self._current["text"] = ""
        if tag == "td" and self._in_table and "data-value" in a:
            self._current = a

    def handle_data(self, data: str) -> None:
        if self._current is not None and "text" in self._current:
            self._current["text"] += data

    def handle_endtag(self, tag: str) -> None:
        if tag == "span" and self._current is not None and "text" in self._current:
            self.cells.append(self._current)
            self._current = None
        if tag == "table" and self._in_table:
            self._in_table -= 1

    def by_key(self) -> dict[tuple[str, str, str, str, str], dict[str, str]]:
        """Cells keyed by (portfolio, method, confidence repr, horizon, metric)."""
        return {(c["data-portfolio"], c["data-method"], c["data-confidence"], c["data-horizon"], c["data-metric"]): c
                for c in self.cells}


def db_headline(path: str | Path, as_of: dt.date = AS_OF) -> dict[tuple[str, str, str, str, str], float]:
    """The risk_figures of ``as_of`` keyed like :meth:`HeadlineCells.by_key`, read straight from DuckDB."""
    with duckdb.connect(str(path), read_only=True) as con:
        rows = con.execute(
            "SELECT portfolio, method, confidence, horizon_days, var, es FROM risk_figures WHERE as_of = ?", [as_of]
        ).fetchall()
    out = {}
    for p, m, c, h, var, es in rows:
        out[(p, m, repr(c), str(h), "var")] = var
        out[(p, m, repr(c), str(h), "es")] = es
    return out
