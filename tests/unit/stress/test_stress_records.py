"""stress_results rows, the shipped config files and their schemas."""

from __future__ import annotations

import dataclasses
import json
from pathlib import Path

import numpy as np
import pytest
import yaml

from tailtrace.stress import records
from tailtrace.stress.historical import StressWindow, load_stress_windows, replay_windows, worst_losses
from tailtrace.stress.records import STRESS_RESULTS_COLUMNS, StressRecord, check_unique, make_detail, records_to_frame
from tailtrace.stress.shocks import load_shock_scenarios

SCHEMAS = Path("workflow/schemas")


def _all_records(history, revalue, portfolios):
    r, dates = history
    win = StressWindow("w", dates[100], dates[180], "a window", "f.yaml", 2)
    out = worst_losses(r, dates, revalue, [1, 10], portfolios=portfolios).records(dates[-1])
    return out + replay_windows([win], r, dates, revalue, portfolios=portfolios).records(dates[-1])


def test_frame_has_the_table_columns_and_types(history, revalue, portfolios):
    frame = records_to_frame(_all_records(history, revalue, portfolios))
    assert list(frame.columns) == list(STRESS_RESULTS_COLUMNS)
    assert str(frame["as_of"].dtype) == "datetime64[s]" and str(frame["horizon_days"].dtype) == "int32"
    assert frame["pnl"].dtype == np.float64 and len(frame) == 3 * 3
    assert all(isinstance(json.loads(d), dict) for d in frame["detail"])


def test_frame_loads_into_duckdb_with_the_declared_types(history, revalue, portfolios):
    duckdb = pytest.importorskip("duckdb")
    frame = records_to_frame(_all_records(history, revalue, portfolios))
    con = duckdb.connect()
    cols = ", ".join(f"{name} {kind}" for name, kind in STRESS_RESULTS_COLUMNS.items())
    con.execute(f"CREATE TABLE stress_results ({cols}, PRIMARY KEY ({', '.join(records.STRESS_RESULTS_KEY)}))")
    con.register("frame", frame)
    con.execute("INSERT INTO stress_results SELECT * FROM frame")
    n, worst = con.execute(
        "SELECT count(*), min(pnl) FROM stress_results WHERE kind = ? AND portfolio = ?",
        ["historical_worst_hd", "long_only"],
    ).fetchone()
    assert n == 1 and worst == pytest.approx(frame.loc[(frame.kind == "historical_worst_hd") & (frame.portfolio == "long_only"), "pnl"].iloc[0])
    assert con.execute("SELECT count(*) FROM stress_results WHERE start_date IS NULL").fetchone()[0] == 0


def test_duplicate_keys_and_bad_values_are_refused():
    rec = StressRecord(np.datetime64("2024-01-02"), "p", "s", "hypothetical", 0, None, None, -1.0, "{}")
    with pytest.raises(ValueError, match="duplicate stress_results key"):
        check_unique([rec, rec])
    with pytest.raises(ValueError, match="unknown stress kind"):
        dataclasses.replace(rec, kind="what_if")
    with pytest.raises(ValueError):
        make_detail(x=float("nan"))
    assert json.loads(make_detail(b=np.float64(1.5), a=np.datetime64("2024-01-02"))) == {"a": "2024-01-02", "b": 1.5}


def _walk(node, path="$"):
    """Yield (path, schema) for every property schema and array item schema."""
    yield path, node
    for key, sub in node.get("properties", {}).items():
        yield from _walk(sub, f"{path}.{key}")
    if isinstance(node.get("items"), dict):
        yield from _walk(node["items"], f"{path}[]")


@pytest.mark.parametrize("name", ["stress_windows.schema.yaml", "shocks.schema.yaml"])
def test_every_schema_key_has_a_description(name):
    schema = yaml.safe_load((SCHEMAS / name).read_text())
    missing = [path for path, node in _walk(schema) if not node.get("description")]
    assert missing == []


def test_schema_defaults_are_what_the_loaders_fill_in(tmp_path):
    shocks = yaml.safe_load((SCHEMAS / "shocks.schema.yaml").read_text())
    scen = shocks["properties"]["scenarios"]["items"]["properties"]
    windows = yaml.safe_load((SCHEMAS / "stress_windows.schema.yaml").read_text())
    win = windows["properties"]["windows"]["items"]["properties"]
    (tmp_path / "s.yaml").write_text("scenarios:\n  - name: a\n    shocks:\n      - {instrument: X, type: relative, size: 0.1}\n")
    (tmp_path / "w.yaml").write_text("windows:\n  - {name: a, start: 2020-01-01, end: 2020-01-02}\n")
    (loaded_scen,) = load_shock_scenarios(tmp_path / "s.yaml")
    (loaded_win,) = load_stress_windows(tmp_path / "w.yaml")
    assert loaded_scen.horizon_days == scen["horizon_days"]["default"]
    assert loaded_scen.description == scen["description"]["default"]
    assert loaded_win.description == win["description"]["default"]


def test_shipped_windows_have_invented_names():
    names = [w.name for w in load_stress_windows("config/stress_windows.yaml")]
    assert names == ["glasshouse_crisis_2022", "late_summer_selloff_2019"]
