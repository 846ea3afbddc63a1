"""Lineage helpers: figure lookup, chain order, JSON output."""

from __future__ import annotations

import datetime as dt
import json

import duckdb
import pytest

from tailtrace.database import DDL
from tailtrace.errors import TailtraceError
from tailtrace.lineage import CHAIN_ORDER, _chain_rank, figure_run_id, to_json
from tailtrace.recorded import FigureKey


@pytest.fixture()
def con():
    c = duckdb.connect()
    c.execute(DDL["risk_figures"])
    c.execute("INSERT INTO risk_figures (as_of, portfolio, method, confidence, horizon_days, var, es, run_id) VALUES "
              "('2024-08-08', 'LONG', 'historical', 0.99, 10, 1.0, 2.0, 'r1'), "
              "('2024-08-09', 'LONG', 'historical', 0.99, 10, 1.5, 2.5, 'r2')")
    yield c
    c.close()


def test_figure_run_id_finds_the_stored_run(con):
    assert figure_run_id(con, FigureKey("2024-08-09", "LONG", "historical", 0.99, 10)) == "r2"


def test_unknown_figure_lists_what_the_database_has(con):
    with pytest.raises(TailtraceError, match=r"no figure for as_of 2024-08-09, portfolio LONG, method historical, "
                                             r"confidence 0.95.*as_of 2024-08-08, 2024-08-09; portfolios LONG; "
                                             r"methods historical; confidences 0.99; horizons 10"):
        figure_run_id(con, FigureKey("2024-08-09", "LONG", "historical", 0.95, 10))


def test_chain_order_puts_every_estimate_rule_between_scenarios_and_aggregate():
    rules = ["aggregate", "estimate_monte_carlo", "build_scenarios", "ingest_prices", "ingest_instruments"]
    assert sorted(rules, key=_chain_rank) == ["ingest_instruments", "ingest_prices", "build_scenarios",
                                              "estimate_monte_carlo", "aggregate"]
    assert _chain_rank("some_new_rule") == len(CHAIN_ORDER)


def test_json_output_writes_dates_as_iso_text():
    assert json.loads(to_json({"d": dt.date(2024, 8, 9), "t": dt.datetime(2024, 8, 9, 18, 30)})) == \
        {"d": "2024-08-09", "t": "2024-08-09T18:30:00"}
    with pytest.raises(TypeError, match="not JSON serialisable: set"):
        to_json({"s": {1}})
