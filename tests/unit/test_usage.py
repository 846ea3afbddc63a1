"""What a run used: price rows read by a window, archived inputs (usage module)."""

from __future__ import annotations

import hashlib
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from tailtrace.errors import TailtraceError
from tailtrace.market import MarketData
from tailtrace.usage import lineage_tables, window_usage


def _market(observed: np.ndarray) -> MarketData:
    dates = np.arange(np.datetime64("2024-03-01"), np.datetime64("2024-03-01") + observed.shape[0])
    return MarketData(dates=dates, instruments=tuple(f"S{j}" for j in range(observed.shape[1])), local=None,
                      base=None, observed=observed, log_returns=None)


def _brute_force(observed: np.ndarray, end: int, window: int, j: int) -> tuple[int, int, int, int]:
    """Loop version of the rule: prices of rows end-window .. end, carried forward from the last real close."""
    first_price_row = end - window
    first = max(r for r in range(first_price_row + 1) if observed[r, j])
    last = max(r for r in range(end + 1) if observed[r, j])
    n_rows = sum(bool(observed[r, j]) for r in range(first, last + 1))
    n_filled = sum(not observed[r, j] for r in range(first_price_row, end + 1))
    return first, last, n_rows, n_filled


def test_window_usage_matches_a_loop_over_rows():
    rng = np.random.default_rng(11)
    observed = rng.random((40, 3)) > 0.25
    observed[0] = True  # every series starts observed
    market = _market(observed)
    window = 8
    pairs = [(d, j) for d in range(window + 1, 40) for j in range(3)]
    as_of = market.dates[[d for d, _ in pairs]]
    got = window_usage(market, as_of, window, np.array([j for _, j in pairs]))
    for k, (d, j) in enumerate(pairs):
        first, last, n_rows, n_filled = _brute_force(observed, d, window, j)
        assert got["first_date"][k] == market.dates[first]
        assert got["last_date"][k] == market.dates[last]
        assert (got["n_rows"][k], got["n_filled"][k]) == (n_rows, n_filled)
        assert got["window_first"][k] == market.dates[d - window + 1] and got["window_last"][k] == market.dates[d]


def test_window_longer_than_history_is_an_error():
    market = _market(np.ones((10, 1), dtype=bool))
    with pytest.raises(TailtraceError, match="window_days=10 is longer than the history"):
        window_usage(market, market.dates[[9]], 10, np.array([0]))


def test_lineage_tables_archive_inputs_and_say_what_could_not_be(tmp_path, caplog):
    def entry(role, name, path):
        return {"role": role, "name": name, "path": str(path), "sha256": hashlib.sha256(path.read_bytes()).hexdigest()}

    raw = tmp_path / "a.csv"
    raw.write_text("date,instrument,close\n2024-01-02,EQ.A,1\n2024-01-03,EQ.A,2\n")
    prices = tmp_path / "a.parquet"
    pq.write_table(pa.table({"date": pa.array(np.array(["2024-01-02", "2024-01-03"], "datetime64[D]"), pa.date32()),
                             "instrument": ["EQ.A", "EQ.A"]}), prices)
    figures = tmp_path / "fig.parquet"
    pq.write_table(pa.table({"var": [1.0]}), figures)
    moved = tmp_path / "b.csv"
    moved.write_text("old")
    records = [
        {"rule": "ingest_prices", "wildcards": {"name": "a"}, "params": {}, "started_at": "", "finished_at": "",
         "packages": {}, "inputs": [entry("input", "prices", raw)], "outputs": [entry("output", "prices", prices)]},
        {"rule": "estimate_x", "wildcards": {}, "params": {}, "started_at": "", "finished_at": "", "packages": {},
         "inputs": [entry("input", "other", moved)], "outputs": [entry("output", "figures", figures)]},
    ]
    moved.write_text("edited after the step read it")
    with caplog.at_level("WARNING", logger="tailtrace"):
        tables = lineage_tables(records, "rid", archive_dir=tmp_path / "archive")
    assert set(tables) == {"input_files"} and "positions_used and window_inputs not written" in caplog.text
    rows = {Path(r["path"]).name: r for r in tables["input_files"].to_pylist()}
    assert rows["a.csv"]["kind"] == "prices" and rows["a.csv"]["rows"] == 2 and rows["a.csv"]["instruments"] == '["EQ.A"]'
    assert str(rows["a.csv"]["first_date"]) == "2024-01-02" and str(rows["a.csv"]["last_date"]) == "2024-01-03"
    assert Path(rows["a.csv"]["archive"]).read_bytes() == raw.read_bytes()
    assert rows["fig.parquet"]["kind"] == "figures" and rows["fig.parquet"]["archive"]
    assert rows["b.csv"]["archive"] is None and "changed after it was read" in rows["b.csv"]["archive_note"]
