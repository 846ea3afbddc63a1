"""Concurrent runs and readers, and run-to-run determinism.

Concurrency: a second ``tailtrace run`` on a results folder in use is refused
(runner.results_lock); two raw Snakemake runs collide on Snakemake's own
lock; readers (database.open_read_only) are never blocked by the pipeline's
writer, which works on a copy, and get a clear DatabaseBusy after bounded
retries when some other process holds the file read-write.

Determinism: cold runs (results and Snakemake state deleted) give
bitwise-identical ``risk_figures`` (every column, run_id included) and
identical Parquet bytes, whatever the BLAS/OpenMP thread count and the job
order (--cores 1 vs 2); Monte Carlo figures change with the seed only.
"""

from __future__ import annotations

import shutil
import subprocess
import sys
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pyarrow.parquet as pq
import pytest
import yaml

from test_bad_inputs import (
    FIGURE_ORDER,
    ROOT,
    TEST_CONFIG,
    output_of,
    pipeline_env,
    read_figures,
    run_tailtrace,
    sha256,
    tailtrace_command,
    write_tiny_dataset,
)
from test_crash_safety import kill_group, text_of, wait_for

from tailtrace.database import DatabaseBusy, open_read_only

pytestmark = pytest.mark.slow


def threads(n: int) -> dict[str, str]:
    return {k: str(n) for k in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS")}


@dataclass(frozen=True)
class Snapshot:
    figures: list[tuple]
    parquet: dict[str, str]  # results-relative path -> sha256 of the bytes


@dataclass(frozen=True)
class Runs:
    data: Path
    results: Path
    workdir: Path
    snaps: dict[str, Snapshot]

    @property
    def db(self) -> Path:
        return self.results / "risk.duckdb"

    def heal(self) -> None:
        """After a killed run: ``tailtrace run`` clears the stale lock and redoes the incomplete step."""
        proc = run_tailtrace(self.data, self.results, self.workdir)
        assert proc.returncode == 0, output_of(proc)[-3000:]
        assert read_figures(self.db) == self.snaps["cores1_threads1"].figures


@pytest.fixture(scope="module")
def runs(tmp_path_factory) -> Runs:
    """Four cold runs of the same inputs; the last leaves a complete results folder."""
    root = tmp_path_factory.mktemp("concurrency")
    data = write_tiny_dataset(root / "data")
    results, workdir = root / "results", root / "work"

    def cold(folder: Path, *, cores: int, n_threads: int, config: dict | None = None) -> Snapshot:
        shutil.rmtree(folder, ignore_errors=True)
        shutil.rmtree(workdir / ".snakemake", ignore_errors=True)
        proc = run_tailtrace(data, folder, workdir, cores=cores, config=config, env=pipeline_env(**threads(n_threads)))
        assert proc.returncode == 0, output_of(proc)[-4000:]
        parquet = {str(p.relative_to(folder)): sha256(p) for p in sorted(folder.rglob("*.parquet"))}
        return Snapshot(read_figures(folder / "risk.duckdb"), parquet)

    # The last run leaves the complete folder the concurrency tests use.
    snaps = {
        "cores2_threads2": cold(results, cores=2, n_threads=2),
        "mc_only_threads1": cold(root / "results-mc", cores=2, n_threads=1, config={"methods": ["monte_carlo"]}),
        "cores1_threads1": cold(results, cores=1, n_threads=1),
    }
    return Runs(data, results, workdir, snaps)


# --------------------------------------------------------------------------- determinism

def test_two_cold_runs_are_bitwise_identical_whatever_the_threads_and_job_order(runs):
    """Cold run on 2 cores and 2 BLAS threads, then on 1 core (another job order) and 1 thread."""
    a, b = runs.snaps["cores2_threads2"], runs.snaps["cores1_threads1"]
    assert len(a.figures) == 2 * 4 * 3 * 2
    assert a.figures == b.figures  # every column, run_id included, floats compared as hex
    estimates = sorted(k for k in a.parquet if k.startswith("estimates/"))
    methods = sorted(["parametric_normal", "historical", "historical_overlapping", "monte_carlo"])
    assert estimates == sorted([f"estimates/{m}.parquet" for m in methods]
                               + [f"estimates/notes/{m}.parquet" for m in methods])  # figures and fit notes
    assert len(a.parquet) > len(estimates)  # prices, market, scenarios too
    assert a.parquet == b.parquet


def without_run_id(db: Path, rows: list[tuple]) -> list[tuple]:
    with open_read_only(db) as con:
        names = [r[0] for r in con.execute("DESCRIBE risk_figures").fetchall()]
    i = names.index("run_id")
    return [row[:i] + row[i + 1 :] for row in rows]


def test_monte_carlo_figures_depend_on_neither_threads_nor_job_order(runs):
    """Monte Carlo alone, 1 BLAS thread, 2 cores, another results folder: same figures as both full runs.

    run_id is left out: it hashes the step records, whose file paths name the
    results folder.
    """
    mc_only = without_run_id(runs.db, runs.snaps["mc_only_threads1"].figures)
    assert len(mc_only) == 2 * 3 * 2
    for name in ("cores2_threads2", "cores1_threads1"):
        full = without_run_id(runs.db, [r for r in runs.snaps[name].figures if r[2] == "monte_carlo"])
        assert mc_only == full, name


def test_monte_carlo_figures_depend_on_the_seed(runs, tmp_path):
    from tailtrace.pipeline import run_estimator

    def figures(seed: int) -> np.ndarray:
        out = tmp_path / f"mc-{seed}.parquet"
        r = runs.results
        market = {k: str(r / "market" / f"{k}.parquet") for k in ("local", "base", "observed", "returns")}
        run_estimator(market, str(r / "scenarios" / "exposures.parquet"), str(r / "reference" / "positions.parquet"),
                      str(r / "reference" / "instruments.parquet"), str(out), method="monte_carlo",
                      confidences=[0.95, 0.99], horizons=[1, 10], window_days=60,
                      options={"paths": 2000, "batches": 10, "include_mean": False}, seed=seed, currency="EUR",
                      positions_file="positions.csv", instruments_file="instruments.csv")
        return pq.read_table(out).column("var").to_numpy()

    first, again, other = figures(11), figures(11), figures(12)
    assert first.tobytes() == again.tobytes()
    assert not np.array_equal(first, other)


# --------------------------------------------------------------------------- concurrency

def raw_snakemake(runs: Runs) -> list[str]:
    overrides = runs.workdir / "raw-overrides.yaml"
    overrides.write_text(yaml.safe_dump(TEST_CONFIG))
    return [sys.executable, "-m", "snakemake", "--snakefile", str(ROOT / "Snakefile"), "--cores", "1",
            "--directory", str(runs.workdir), "--configfile", str(overrides),
            "--config", f"results_dir={runs.results}", f"data_dir={runs.data}", "--forcerun", "aggregate"]


def test_a_second_run_is_refused_while_one_is_running(runs):
    before = read_figures(runs.db)
    db_bytes = runs.db.read_bytes()
    log = runs.results / "logs" / "aggregate.log"
    pauses = text_of(log).count("test hook")
    cmd = tailtrace_command(runs.data, runs.results, runs.workdir, extra=["--forcerun", "aggregate"])
    first = subprocess.Popen(cmd, env=pipeline_env(TAILTRACE_TEST_PAUSE_AGGREGATE="120"), cwd=runs.workdir,
                             start_new_session=True, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    try:
        wait_for(lambda: text_of(log).count("test hook") > pauses, first, "the first run to reach its aggregate step")

        second = run_tailtrace(runs.data, runs.results, runs.workdir)
        assert second.returncode == 2
        assert (f"tailtrace: error: another tailtrace run is using {runs.results} (lock {runs.results}/.tailtrace.lock, "
                f"held by pid {first.pid}); wait for it to finish") in second.stderr
        assert "Snakemake" not in second.stdout + second.stderr  # refused before Snakemake started

        raw = subprocess.run(raw_snakemake(runs), env=pipeline_env(), cwd=runs.workdir, capture_output=True, text=True,
                             timeout=300)
        assert raw.returncode != 0
        assert "Directory cannot be locked" in output_of(raw)

        with open_read_only(runs.db, attempts=1) as con:  # the writer works on a copy: readers go on
            assert con.execute("SELECT count(*) FROM risk_figures").fetchone()[0] == len(before)
    finally:
        kill_group(first)
    assert runs.db.read_bytes() == db_bytes
    runs.heal()


def test_raw_snakemake_runs_collide_and_tailtrace_leaves_a_live_one_alone(runs):
    """Two raw runs hit Snakemake's lock; ``tailtrace run`` (no flock to find) must not clear a live run's lock."""
    db_bytes = runs.db.read_bytes()
    log = runs.results / "logs" / "aggregate.log"
    pauses = text_of(log).count("test hook")
    first = subprocess.Popen(raw_snakemake(runs), env=pipeline_env(TAILTRACE_TEST_PAUSE_AGGREGATE="120"),
                             cwd=runs.workdir, start_new_session=True, stdout=subprocess.DEVNULL,
                             stderr=subprocess.DEVNULL)
    try:
        wait_for(lambda: text_of(log).count("test hook") > pauses, first, "the raw run to reach its aggregate step")
        raw = subprocess.run(raw_snakemake(runs), env=pipeline_env(), cwd=runs.workdir, capture_output=True, text=True,
                             timeout=300)
        assert raw.returncode != 0
        assert "Directory cannot be locked" in output_of(raw)
        ours = run_tailtrace(runs.data, runs.results, runs.workdir)
        assert ours.returncode != 0
        assert "Directory cannot be locked" in output_of(ours)
        assert "removing" not in ours.stderr
    finally:
        kill_group(first)
    assert runs.db.read_bytes() == db_bytes
    runs.heal()


def test_reader_keeps_its_snapshot_while_the_pipeline_replaces_the_database(runs):
    with open_read_only(runs.db) as reader:
        n_runs = reader.execute("SELECT count(*) FROM runs").fetchone()[0]
        proc = run_tailtrace(runs.data, runs.results, runs.workdir, extra=["--forcerun", "aggregate"])
        assert proc.returncode == 0, output_of(proc)[-3000:]
        assert reader.execute("SELECT count(*) FROM runs").fetchone()[0] == n_runs  # still the old file
        old_rows = reader.execute(f"SELECT * FROM risk_figures ORDER BY {FIGURE_ORDER}").fetchall()
    with open_read_only(runs.db) as fresh:
        assert fresh.execute("SELECT count(*) FROM runs").fetchone()[0] == n_runs + 1
    assert [tuple(v.hex() if isinstance(v, float) else v for v in r) for r in old_rows] == read_figures(runs.db)


HOLDER = """
import sys, time, duckdb
con = duckdb.connect(sys.argv[1])  # read-write: takes DuckDB's exclusive file lock
print("holding", flush=True)
time.sleep(120)
"""


def test_reader_gets_database_busy_after_bounded_retries(runs, tmp_path, monkeypatch):
    db = tmp_path / "risk.duckdb"
    shutil.copy2(runs.db, db)
    holder = subprocess.Popen([sys.executable, "-c", HOLDER, str(db)], stdout=subprocess.PIPE, text=True)
    try:
        assert holder.stdout.readline().strip() == "holding"
        import tailtrace.database as database

        waits = []
        monkeypatch.setattr(database.time, "sleep", waits.append)
        with pytest.raises(DatabaseBusy, match=rf"{db} is held read-write by another process; gave up after 4 attempts "
                                               r"over 1\.0 s\. Close that process and retry\."):
            with open_read_only(db, attempts=4, wait=0.25):
                pass
        assert waits == [0.25] * 4
    finally:
        holder.kill()
        holder.wait()
    monkeypatch.undo()
    with open_read_only(db, attempts=3, wait=0.1) as con:
        assert con.execute("SELECT count(*) FROM risk_figures").fetchone()[0] == 2 * 4 * 3 * 2
