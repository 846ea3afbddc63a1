"""Atomic database writes: replace by as_of, keep history, refuse duplicates."""

import datetime as dt

import duckdb
import pyarrow as pa
import pytest

from tailtrace.database import open_read_only, write_database
from tailtrace.errors import TailtraceError


def figures(day, value):
    return pa.table({"as_of": pa.array([day, day], pa.date32()), "portfolio": ["A", "B"], "method": ["m", "m"],
                     "confidence": [0.99, 0.99], "horizon_days": pa.array([1, 1], pa.int32()), "var": [value, value],
                     "es": [value, value], "run_id": ["r", "r"]})


def test_rerun_replaces_rows_of_its_dates_and_keeps_others(tmp_path):
    db = tmp_path / "risk.duckdb"
    d1, d2 = dt.date(2024, 1, 2), dt.date(2024, 1, 3)
    write_database(db, {"risk_figures": figures(d1, 1.0)})
    write_database(db, {"risk_figures": figures(d2, 2.0)})
    write_database(db, {"risk_figures": figures(d1, 3.0)})
    with open_read_only(db) as con:
        rows = con.execute("SELECT as_of, sum(var), count(*) FROM risk_figures GROUP BY as_of ORDER BY as_of").fetchall()
    assert rows == [(d1, 6.0, 2), (d2, 4.0, 2)]
    assert not (tmp_path / "risk.duckdb.wal").exists()
    assert not list(tmp_path.glob(".risk.duckdb.*"))


def test_duplicate_keys_are_refused_and_database_untouched(tmp_path):
    db = tmp_path / "risk.duckdb"
    d1 = dt.date(2024, 1, 2)
    write_database(db, {"risk_figures": figures(d1, 1.0)}, keys={"risk_figures": ["as_of", "portfolio"]})
    before = db.read_bytes()
    dup = pa.concat_tables([figures(d1, 5.0), figures(d1, 5.0)])
    with pytest.raises(TailtraceError, match="duplicate key"):
        write_database(db, {"risk_figures": dup}, keys={"risk_figures": ["as_of", "portfolio"]})
    assert db.read_bytes() == before


def test_failed_write_leaves_old_file(tmp_path):
    db = tmp_path / "risk.duckdb"
    write_database(db, {"risk_figures": figures(dt.date(2024, 1, 2), 1.0)})
    before = db.read_bytes()
    bad = pa.table({"as_of": pa.array([None], pa.date32()), "portfolio": ["A"], "method": ["m"], "confidence": [0.9],
                    "horizon_days": pa.array([1], pa.int32())})
    with pytest.raises(duckdb.Error):
        write_database(db, {"risk_figures": bad})
    assert db.read_bytes() == before
    assert not list(tmp_path.glob(".risk.duckdb.*"))


def test_invalid_table_name_refused(tmp_path):
    with pytest.raises(TailtraceError, match="invalid table name"):
        write_database(tmp_path / "x.duckdb", {"drop table x; --": figures(dt.date(2024, 1, 2), 1.0)})
