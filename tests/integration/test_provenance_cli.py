"""trace / verify / reproduce / explain on real pipeline runs over a tiny dataset.

Each test that edits inputs runs its own pipeline; the read-only ones share
one backfill run. window_days=60 and two methods keep every run a few seconds.
"""

from __future__ import annotations

import contextlib
import csv
import decimal
import hashlib
import io
import json
import os
import shutil
import struct
import subprocess
import sys
from pathlib import Path

import duckdb
import numpy as np
import pyarrow.parquet as pq
import pytest
from scipy.stats import norm

import tailtrace
from tailtrace.cli import main

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))  # tests/, for fixture_data
from fixture_data import write_tiny_dataset  # noqa: E402

SRC = Path(tailtrace.__file__).resolve().parents[1]
REPO = SRC.parents[1]
METHODS = "methods=[historical,parametric_normal]"
DATES = ("2024-08-05", "2024-08-06", "2024-08-07", "2024-08-08", "2024-08-09")
WINDOW = 60


def make_dataset(workdir: Path, *, dated_positions: bool = True) -> Path:
    """The tiny dataset with EQ.B in its own file, an unheld commodity file and a dated positions file.

    LONG holds EQ.A (EUR) and EQ.C (USD, so it needs FX.USD); HEDGE holds
    EQ.A, EQ.B and FX.USD; nobody holds CM.Z. On 2024-08-09 LONG holds 1500
    EQ.A instead of 1000 (positions/2024-08-09.csv).
    """
    data = write_tiny_dataset(workdir / "data")
    prices = data / "prices"
    lines = (prices / "equities.csv").read_text().splitlines()
    (prices / "equities.csv").write_text("\n".join(l for l in lines if ",EQ.B," not in l) + "\n")
    (prices / "eq_b.csv").write_text("\n".join([lines[0]] + [l for l in lines if ",EQ.B," in l]) + "\n")
    dates = [l.split(",")[0] for l in lines[1:] if ",EQ.A," in l]
    closes = 50 * np.exp(np.cumsum(np.random.default_rng(3).normal(0, 0.01, len(dates))))
    (prices / "commodity.csv").write_text("date,instrument,close\n" + "".join(
        f"{d},CM.Z,{c:.6f}\n" for d, c in zip(dates, closes)))
    with open(data / "instruments.csv", "a") as fh:
        fh.write("CM.Z,commodity,EUR\n")
    if dated_positions:
        (data / "positions").mkdir()
        (data / "positions" / "2024-08-09.csv").write_text(
            (data / "positions.csv").read_text().replace("LONG,EQ.A,1000", "LONG,EQ.A,1500"))
    return data


def run_pipeline(workdir: Path, *config: str) -> None:
    env = dict(os.environ, PYTHONPATH=str(SRC))
    cmd = [sys.executable, "-m", "snakemake", "--snakefile", str(REPO / "Snakefile"), "--directory", str(workdir),
           "--cores", "2", "--quiet", "--config", "data_dir=data", "results_dir=results", f"window_days={WINDOW}",
           METHODS, *config]
    done = subprocess.run(cmd, cwd=workdir, env=env, capture_output=True, text=True)
    assert done.returncode == 0, done.stdout[-3000:] + done.stderr[-3000:]


def cli(*args: str) -> tuple[int, str]:
    out = io.StringIO()
    with contextlib.redirect_stdout(out):
        rc = main(list(args))
    return rc, out.getvalue()


def figure_args(as_of: str, portfolio: str, method: str, confidence: str = "0.99", horizon: str = "10") -> list[str]:
    return ["--as-of", as_of, "--portfolio", portfolio, "--method", method, "--confidence", confidence,
            "--horizon", horizon]


def sha256(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def stored(db: Path, as_of: str, portfolio: str, method: str, confidence: float = 0.99, horizon: int = 10):
    with duckdb.connect(str(db), read_only=True) as con:
        return con.execute("SELECT var, es, run_id FROM risk_figures WHERE as_of = ?::DATE AND portfolio = ? AND "
                           "method = ? AND confidence = ? AND horizon_days = ?",
                           [as_of, portfolio, method, confidence, horizon]).fetchone()


@pytest.fixture(scope="module")
def backfill(tmp_path_factory) -> Path:
    """One run backfilling 2024-08-05 .. 2024-08-09."""
    work = tmp_path_factory.mktemp("backfill")
    make_dataset(work)
    run_pipeline(work, f"as_of={{start: {DATES[0]}, end: {DATES[-1]}}}")
    return work


def test_backfill_covers_every_date_with_its_positions_file(backfill):
    with duckdb.connect(str(backfill / "results" / "risk.duckdb"), read_only=True) as con:
        dates = [str(d[0]) for d in con.execute("SELECT DISTINCT as_of FROM risk_figures ORDER BY 1").fetchall()]
        files = dict(con.execute("SELECT DISTINCT CAST(as_of AS VARCHAR), positions_file FROM positions_used "
                                 "WHERE portfolio = 'LONG'").fetchall())
    assert dates == list(DATES)
    assert files["2024-08-09"] == "data/positions/2024-08-09.csv"
    assert {files[d] for d in DATES[:-1]} == {"data/positions.csv"}


@pytest.mark.parametrize("portfolio, as_of, price_files, positions_file", [
    ("LONG", "2024-08-08", {"prices/equities.csv", "prices/fx.csv"}, "positions.csv"),
    ("LONG", "2024-08-09", {"prices/equities.csv", "prices/fx.csv"}, "positions/2024-08-09.csv"),
    ("HEDGE", "2024-08-08", {"prices/equities.csv", "prices/eq_b.csv", "prices/fx.csv"}, "positions.csv"),
])
def test_trace_lists_exactly_the_files_that_feed_the_figure(backfill, portfolio, as_of, price_files, positions_file):
    data = backfill / "data"
    rc, out = cli("trace", "--db", str(backfill / "results" / "risk.duckdb"), *figure_args(as_of, portfolio, "historical"),
                  "--json")
    assert rc == 0
    t = json.loads(out)
    listed = {i["path"]: i for i in t["inputs"]}
    expected = {f"data/{p}" for p in price_files | {"instruments.csv", positions_file}}
    assert set(listed) == expected  # not commodity.csv, not the other positions file, eq_b.csv only for HEDGE
    for path, item in listed.items():
        # independent hashes: hashlib and the coreutils sha256sum program
        assert item["sha256"] == sha256(backfill / path)
        assert item["sha256"] == subprocess.run(["sha256sum", str(backfill / path)], capture_output=True,
                                                text=True, check=True).stdout.split()[0]
        assert Path(backfill / item["archive"]).read_bytes() == (backfill / path).read_bytes()

    # the window: the 60 business days ending at as_of; prices read from the day before its first return
    all_dates = sorted({r["date"] for r in csv.DictReader(open(data / "prices" / "fx.csv"))})
    end = all_dates.index(as_of)
    assert (t["window"]["window_first"], t["window"]["window_last"]) == (all_dates[end - WINDOW + 1], as_of)
    assert t["window"]["first_price_date"] == all_dates[end - WINDOW]
    held = {r["instrument"] for r in csv.DictReader(open(data / positions_file)) if r["portfolio"] == portfolio}
    series = {(s["series"], s["instrument"]) for i in t["inputs"] for s in i["used"].get("series", [])}
    expected_series = {(i, i) for i in held} | ({("FX.USD", "EQ.C")} if "EQ.C" in held else set())
    assert series == expected_series
    for i in t["inputs"]:
        for s in i["used"].get("series", []):
            assert (s["first_date"], s["last_date"], s["n_rows"]) == (all_dates[end - WINDOW], as_of, WINDOW + 1)

    # positions rows: file lines (header = line 1) of this portfolio, read with the csv module
    with open(data / positions_file) as fh:
        rows = [(n, r) for n, r in enumerate(csv.DictReader(fh), start=2) if r["portfolio"] == portfolio]
    assert [(p["row"], p["instrument"], p["quantity"]) for p in t["positions"]] == \
        [(n, r["instrument"], float(r["quantity"])) for n, r in rows]
    assert {p["file"] for p in t["positions"]} == {f"data/{positions_file}"}

    chain = [s["label"] for s in t["chain"]]
    expected_prices = [f"ingest_prices[name={Path(p).stem}]" for p in sorted(price_files)]
    assert chain == ["ingest_instruments", "ingest_positions", *expected_prices, "build_returns", "build_scenarios",
                     "estimate_historical", "aggregate"]
    assert t["figure"]["var"] == stored(backfill / "results" / "risk.duckdb", as_of, portfolio, "historical")[0]
    assert t["code"]["git_commit"] and t["code"]["package_source"] and t["packages"]["numpy"] == np.__version__
    figure_file = t["outputs"][0]
    assert figure_file["sha256"] == sha256(backfill / figure_file["path"])
    assert t["parameters"]["estimate_historical"]["window_days"] == WINDOW


def test_trace_text_and_unknown_figure(backfill, capsys):
    db = str(backfill / "results" / "risk.duckdb")
    rc, out = cli("trace", "--db", db, *figure_args("2024-08-09", "LONG", "parametric_normal"))
    assert rc == 0 and "ingest_instruments -> ingest_positions" in out and "data/positions/2024-08-09.csv row 2" in out
    assert main(["trace", "--db", db, *figure_args("2024-08-09", "NOPE", "historical")]) == 2
    assert "no figure for as_of 2024-08-09, portfolio NOPE" in capsys.readouterr().err


def test_verify_clean_run(backfill):
    rc, out = cli("verify", "--db", str(backfill / "results" / "risk.duckdb"))
    assert rc == 0, out
    assert "All recorded files are unchanged." in out


def _independent_normal_var(data: Path, quantities: dict[str, float], as_of: str, z_level: float, horizon: int) -> float:
    """Normal VaR from the CSV files alone: σ of the P&L of base-currency holdings, z from scipy.

    Normal VaR = σ·z·√h (Jorion, Value at Risk, 3rd ed., ch. 7; REFERENCES.md); covariance of daily simple
    returns of base-currency prices over the window, ddof 1.
    """
    prices: dict[str, dict[str, float]] = {}
    for f in (data / "prices").glob("*.csv"):
        for r in csv.DictReader(open(f)):
            prices.setdefault(r["instrument"], {})[r["date"]] = float(r["close"])
    dates = sorted(prices["FX.USD"])
    end = dates.index(as_of)
    window = dates[end - WINDOW: end + 1]
    fx = np.array([prices["FX.USD"][d] for d in window])
    names = sorted(quantities)
    base = np.column_stack([np.array([prices[i][d] for d in window]) * (fx if i == "EQ.C" else 1) for i in names])
    simple = base[1:] / base[:-1] - 1
    values = np.array([quantities[i] for i in names]) * base[-1]
    sigma = np.sqrt(values @ np.cov(simple, rowvar=False, ddof=1) @ values)
    return float(sigma * norm.ppf(z_level) * np.sqrt(horizon))


def test_explain_components_sum_and_isolate_the_position_change(backfill):
    db = backfill / "results" / "risk.duckdb"
    rc, out = cli("explain", "--db", str(db), "--as-of-from", "2024-08-08", "--as-of-to", "2024-08-09",
                  "--portfolio", "LONG", "--method", "parametric_normal", "--confidence", "0.99", "--horizon", "10",
                  "--json")
    assert rc == 0
    e = json.loads(out)
    parts = {c["component"]: c for c in e["components"]}
    before, after = stored(db, "2024-08-08", "LONG", "parametric_normal"), stored(db, "2024-08-09", "LONG",
                                                                                  "parametric_normal")
    for m, j in (("var", 0), ("es", 1)):
        with decimal.localcontext() as ctx:
            ctx.prec = 1200  # enough digits that no sum below rounds
            exact = sum(decimal.Decimal(c[f"{m}_exact"]) for c in e["components"])
            assert exact == decimal.Decimal(after[j]) - decimal.Decimal(before[j])  # exactly, not approximately
        assert parts["code"][m] == 0.0 and parts["parameters"][m] == 0.0
    assert e["from"]["recomputed_var"] == before[0] and e["to"]["recomputed_var"] == after[0]  # bitwise
    # positions: 1000 -> 1500 EQ.A valued on 2024-08-08's prices and window, recomputed from the CSVs
    data = backfill / "data"
    q1 = _independent_normal_var(data, {"EQ.A": 1000, "EQ.C": 200}, "2024-08-08", 0.99, 10)
    q2 = _independent_normal_var(data, {"EQ.A": 1500, "EQ.C": 200}, "2024-08-08", 0.99, 10)
    assert parts["positions"]["var"] == pytest.approx(q2 - q1, rel=1e-6)  # CSV closes have 6 decimals
    assert parts["market"]["var"] != 0.0
    assert any("EQ.A: 1000 -> 1500" in n for n in e["notes"])
    rc, text = cli("explain", "--db", str(db), "--as-of-from", "2024-08-08", "--as-of-to", "2024-08-09",
                   "--portfolio", "LONG", "--method", "historical", "--confidence", "0.975", "--horizon", "1")
    assert rc == 0 and "Ordering: Sequential substitution" in text and "total change" in text


def test_verify_and_reproduce_after_editing_and_deleting_price_files(tmp_path):
    make_dataset(tmp_path, dated_positions=False)
    run_pipeline(tmp_path, "as_of=2024-08-09")
    db = str(tmp_path / "results" / "risk.duckdb")
    fx = tmp_path / "data" / "prices" / "fx.csv"
    fx.write_text(fx.read_text().replace("2024-08-07,FX.USD,", "2024-08-07,FX.USD,1"))  # 0.9 -> 10.9: a bad tick
    commodity = tmp_path / "data" / "prices" / "commodity.csv"
    saved = commodity.read_bytes()
    commodity.unlink()
    (tmp_path / "data" / "prices" / "late.csv").write_text("date,instrument,close\n2024-08-09,CM.Z,1\n")

    rc, out = cli("verify", "--db", db, "--json")
    assert rc == 1
    status = {f["path"]: f["status"] for f in json.loads(out)["files"]}
    assert status["data/prices/fx.csv"] == "changed" and status["data/prices/commodity.csv"] == "missing"
    assert status["data/prices/late.csv"] == "new"
    assert status["data/prices/equities.csv"] == "unchanged"
    assert main(["verify", "--db", db]) == 1

    # the archive still holds the recorded bytes: the run rebuilds bit for bit, run id included
    rc, out = cli("reproduce", "--db", db, "--json")
    assert rc == 0, out
    r = json.loads(out)
    assert r["identical"] and r["same_run_id"] and r["rows_compared"] == 2 * 4 * 3 * 2  # 2 methods and their 2 stressed-calibration twins
    assert all(f["identical"] for f in r["figure_files"]) and {i["source"] for i in r["inputs"]} == {"archive"}

    # from the live files the edit shows up as figure differences; the deleted file stops the rebuild
    assert main(["reproduce", "--db", db, "--inputs", "live"]) == 2
    commodity.write_bytes(saved)
    rc, out = cli("reproduce", "--db", db, "--inputs", "live", "--json")
    assert rc == 1
    r = json.loads(out)
    assert not r["identical"] and r["differences"]
    assert {d["key"].split()[0] for d in r["differences"]} == {"2024-08-09"}
    assert {d["key"].split()[1] for d in r["differences"]} == {"LONG", "HEDGE"}  # both need FX.USD
    assert any("data/prices/fx.csv" in n for n in r["notes"])

    # rerun on the edited data: explaining the same date across the two runs needs the first run's
    # market data, whose caches are now overwritten; it is rebuilt from the archive, bit for bit
    first = stored(tmp_path / "results" / "risk.duckdb", "2024-08-09", "HEDGE", "historical")[2]
    (tmp_path / "data" / "prices" / "late.csv").unlink()  # CM.Z may come from one file only
    run_pipeline(tmp_path, "as_of=2024-08-09")
    rc, out = cli("explain", "--db", db, "--as-of-from", "2024-08-09", "--as-of-to", "2024-08-09", "--run-from", first,
                  *figure_args("2024-08-09", "HEDGE", "historical")[2:], "--json")
    assert rc == 0
    e = json.loads(out)
    assert e["from"]["market_data"] == "rebuilt from archived inputs" and e["from"]["recomputed_var"] == e["from"]["var"]
    parts = {c["component"]: c for c in e["components"]}
    assert parts["market"]["var_exact"] == e["total"]["var_exact"] != "0"
    assert parts["positions"]["var"] == parts["code"]["var"] == parts["parameters"]["var"] == 0.0
    assert any("revised" in n for n in e["notes"])


def test_rerun_of_a_date_replaces_its_rows_keeps_history_and_explains_a_pure_position_change(tmp_path):
    make_dataset(tmp_path, dated_positions=False)
    run_pipeline(tmp_path, "as_of={start: 2024-08-07, end: 2024-08-09}")
    db = tmp_path / "results" / "risk.duckdb"
    first = stored(db, "2024-08-08", "LONG", "historical")
    positions = tmp_path / "data" / "positions.csv"
    positions.write_text(positions.read_text().replace("LONG,EQ.C,200", "LONG,EQ.C,260"))
    run_pipeline(tmp_path, "as_of=[2024-08-08]")
    second = stored(db, "2024-08-08", "LONG", "historical")
    assert second[2] != first[2]
    with duckdb.connect(str(db), read_only=True) as con:
        by_date = dict(con.execute("SELECT CAST(as_of AS VARCHAR), string_agg(DISTINCT run_id, ',') FROM risk_figures "
                                   "GROUP BY 1").fetchall())
        assert by_date == {"2024-08-07": first[2], "2024-08-08": second[2], "2024-08-09": first[2]}
        assert con.execute("SELECT count(*) FROM risk_figures WHERE method NOT LIKE '%_stressed'").fetchone()[0] == 3 * 2 * 2 * 3 * 2  # no duplicates
        assert {r[0] for r in con.execute("SELECT run_id FROM runs").fetchall()} == {first[2], second[2]}
        assert {r[0] for r in con.execute("SELECT DISTINCT run_id FROM provenance").fetchall()} == {first[2], second[2]}
        assert con.execute("SELECT count(DISTINCT run_id) FROM positions_used").fetchone()[0] == 2

    # same as_of, the older run's figure (replaced in risk_figures, read from its archived figure file)
    for method in ("historical", "parametric_normal"):
        rc, out = cli("explain", "--db", str(db), "--as-of-from", "2024-08-08", "--as-of-to", "2024-08-08",
                      "--run-from", first[2], "--portfolio", "LONG", "--method", method, "--confidence", "0.99",
                      "--horizon", "10", "--json")
        assert rc == 0
        e = json.loads(out)
        parts = {c["component"]: c for c in e["components"]}
        for m in ("var", "es"):
            assert parts["positions"][f"{m}_exact"] == e["total"][f"{m}_exact"] != "0"
            assert parts["market"][m] == parts["parameters"][m] == parts["code"][m] == 0.0
        assert "figure file" in e["from"]["stored_in"]

    # the older run's record is still verifiable: its positions file has changed since
    rc, out = cli("verify", "--db", str(db), "--run-id", first[2], "--json")
    assert rc == 1
    assert {f["path"]: f["status"] for f in json.loads(out)["files"]}["data/positions.csv"] == "changed"
    rc, out = cli("runs", "--db", str(db))
    assert rc == 0 and first[2] in out and second[2] in out


def _figure_bits(db: Path) -> list[tuple]:
    with duckdb.connect(str(db), read_only=True) as con:
        rows = con.execute("SELECT * FROM risk_figures ORDER BY as_of, portfolio, method, confidence, "
                           "horizon_days").fetchall()
    return [tuple(struct.pack("<d", v) if isinstance(v, float) else v for v in r) for r in rows]


def test_a_cold_run_elsewhere_gives_identical_figures_and_parquet_bytes(backfill, tmp_path):
    # relative data and results folders: a copy of the inputs run cold in another folder must give
    # the same bytes, run_id included (nothing depends on time or location)
    shutil.copytree(backfill / "data", tmp_path / "data")
    run_pipeline(tmp_path, f"as_of={{start: {DATES[0]}, end: {DATES[-1]}}}")
    old, new = backfill / "results", tmp_path / "results"
    assert _figure_bits(new / "risk.duckdb") == _figure_bits(old / "risk.duckdb")  # every column, run_id included
    hashes = [{p.relative_to(r): sha256(p) for p in r.rglob("*.parquet")} for r in (old, new)]
    assert hashes[0] == hashes[1] and len(hashes[0]) > 10
    for p in new.rglob("*.parquet"):
        keys = {k.decode() for k in (pq.read_metadata(p).metadata or {})}
        assert keys <= {"tailtrace.source", "ARROW:schema"}, (p, keys)  # no pandas metadata, no timestamps
    assert sorted(p.name for p in (new / "archive").iterdir()) == sorted(p.name for p in (old / "archive").iterdir())
