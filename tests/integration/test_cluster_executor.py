"""Every job runs self-contained through the generic cluster executor plugin."""

from __future__ import annotations

import duckdb
import pytest

from conftest import REPO, snakemake
from fixture_data import write_tiny_dataset


@pytest.mark.slow
def test_generic_cluster_executor_runs_every_job_in_its_own_process(tmp_path):
    data = write_tiny_dataset(tmp_path / "data")
    submitted = tmp_path / "submitted.txt"
    submit = f"{REPO}/tests/integration/fake_submit.sh {submitted} {{rule}} {{resources.mem_mb}}"
    proc = snakemake(
        tmp_path, f"data_dir={data}", f"results_dir={tmp_path / 'results'}", "window_days=60",
        "methods=[historical,parametric_normal]",
        extra=("--executor", "cluster-generic", "--cluster-generic-submit-cmd", submit, "--jobs", "2"),
    )
    assert proc.returncode == 0
    lines = submitted.read_text().split("\n")
    rules = sorted(line.split()[0] for line in lines if line)
    # every non-local job went through the submit command, with its declared memory
    assert rules == sorted(["ingest_instruments", "ingest_positions", "ingest_prices", "ingest_prices",
                            "build_returns", "build_scenarios", "estimate_historical", "estimate_parametric_normal",
                            "backtest", "contributions", "stress"])  # aggregate and report are local rules
    assert "estimate_historical mem_mb=4000" in lines and "ingest_instruments mem_mb=1000" in lines
    con = duckdb.connect(str(tmp_path / "results" / "risk.duckdb"), read_only=True)
    assert con.execute("SELECT count(*) FROM risk_figures WHERE method NOT LIKE '%_stressed'").fetchone()[0] == 2 * 2 * 3 * 2
    for table in ("backtest_summary", "risk_contributions", "stress_results"):
        assert con.execute(f"SELECT count(*) FROM {table}").fetchone()[0] > 0, table
    con.close()
