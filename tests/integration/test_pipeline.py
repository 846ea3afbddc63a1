"""End-to-end: the real Snakemake workflow on a tiny seeded fixture."""

from __future__ import annotations

import re
from pathlib import Path

import duckdb
import pytest

from conftest import snakemake, write_config
from fixture_data import write_tiny_dataset

METHODS = "methods=[parametric_normal,historical,historical_overlapping,monte_carlo]"


@pytest.fixture(scope="module")
def run(tmp_path_factory):
    root = tmp_path_factory.mktemp("pipeline")
    data = write_tiny_dataset(root / "data")
    results = root / "results"
    cfg = write_config(root / "test.yaml", {"monte_carlo": {"paths": 2000, "seed": 5}})
    config = (f"data_dir={data}", f"results_dir={results}", "window_days=60", METHODS)
    first = snakemake(root, *config, configfile=cfg)
    return root, data, results, config, first


def jobs_of(dry_run_output: str) -> list[str]:
    """Rule names (with the price-file wildcard) a dry run would execute."""
    jobs, current = [], None
    for line in dry_run_output.splitlines():
        m = re.match(r"^(?:local)?rule (\w+):", line.strip())
        if m:
            current = m.group(1)
            jobs.append(current)
        w = re.match(r"^wildcards: name=(\S+)", line.strip())
        if w and current == "ingest_prices":
            jobs[-1] = f"ingest_prices[{w.group(1)}]"
    return jobs


def test_risk_figures_schema_and_rows(run):
    _, _, results, _, _ = run
    con = duckdb.connect(str(results / "risk.duckdb"), read_only=True)
    cols = dict(con.execute("SELECT column_name, data_type FROM information_schema.columns "
                            "WHERE table_name = 'risk_figures'").fetchall())
    expected = {"as_of": "DATE", "portfolio": "VARCHAR", "method": "VARCHAR", "confidence": "DOUBLE",
                "horizon_days": "INTEGER", "var": "DOUBLE", "es": "DOUBLE", "currency": "VARCHAR",
                "scaling": "VARCHAR", "n_obs": "INTEGER", "run_id": "VARCHAR"}
    for name, kind in expected.items():
        assert cols[name] == kind
    n, distinct = con.execute("SELECT count(*), count(DISTINCT (as_of, portfolio, method, confidence, horizon_days)) "
                              "FROM risk_figures WHERE method NOT LIKE '%_stressed'").fetchone()
    assert n == distinct == 2 * 4 * 3 * 2  # portfolios x methods x confidences x horizons
    stressed = con.execute("SELECT DISTINCT method FROM risk_figures WHERE method LIKE '%_stressed' ORDER BY 1").fetchall()
    assert stressed == [("historical_stressed",), ("parametric_normal_stressed",)]
    assert con.execute("SELECT min(var) > 0, bool_and(es >= var - 1e-9), any_value(currency) FROM risk_figures").fetchone() == (True, True, "EUR")
    scaling = dict(con.execute("SELECT method, string_agg(DISTINCT scaling, ',' ORDER BY scaling) FROM risk_figures "
                               "WHERE horizon_days = 10 AND method NOT LIKE '%_stressed' GROUP BY method").fetchall())
    assert scaling == {"parametric_normal": "sqrt_time", "historical": "sqrt_time",
                       "historical_overlapping": "overlapping", "monte_carlo": "simulated"}
    for table in ("provenance", "data_quality", "runs"):
        assert con.execute("SELECT count(*) FROM information_schema.tables WHERE table_name = ?", [table]).fetchone()[0] == 1
    assert not Path(f"{results}/risk.duckdb.wal").exists()
    con.close()


def test_second_run_has_nothing_to_do(run):
    root, _, _, config, _ = run
    again = snakemake(root, *config, configfile=root / "test.yaml")
    assert "Nothing to be done" in again.stdout + again.stderr


def test_editing_one_price_file_reruns_only_its_dependents(run):
    root, data, _, config, _ = run
    fx = data / "prices" / "fx.csv"
    lines = fx.read_text().splitlines()
    date, inst, close = lines[-1].split(",")
    lines[-1] = f"{date},{inst},{float(close) * 1.01:.6f}"
    fx.write_text("\n".join(lines) + "\n")
    dry = snakemake(root, *config, extra=("-n",), configfile=root / "test.yaml")
    jobs = jobs_of(dry.stdout + dry.stderr)
    assert "ingest_prices[fx]" in jobs
    assert "ingest_prices[equities]" not in jobs
    assert "ingest_instruments" not in jobs and "ingest_positions" not in jobs
    assert {"build_returns", "build_scenarios", "aggregate"} <= set(jobs)
    snakemake(root, *config, configfile=root / "test.yaml")


def test_rerun_replaces_rows_and_keeps_provenance_history(run):
    root, _, results, config, _ = run
    snakemake(root, *config, "confidences=[0.99]", configfile=root / "test.yaml")
    con = duckdb.connect(str(results / "risk.duckdb"), read_only=True)
    assert con.execute("SELECT DISTINCT confidence FROM risk_figures").fetchall() == [(0.99,)]
    assert con.execute("SELECT count(DISTINCT recorded_at) FROM runs").fetchone()[0] >= 2
    con.close()
