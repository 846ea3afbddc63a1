"""A run killed at the worst moment leaves the old figures; the rerun gives the new.

The pipeline is killed with SIGKILL to its whole process group (runner,
Snakemake and the running job), once while the aggregate step has written
its temporary database but not yet renamed it (the test hook
TAILTRACE_TEST_PAUSE_AGGREGATE in tailtrace.database holds it there), and
once inside an estimator job. Then ``tailtrace run`` is started again (it
passes ``--rerun-incomplete``, so Snakemake's own incomplete-output markers
decide what to redo). The figures are compared with snapshots of cold runs
on each version of the inputs: they must be exactly one or the other.
"""

from __future__ import annotations

import os
import shutil
import signal
import subprocess
import time
from dataclasses import dataclass
from pathlib import Path

import pytest

from test_bad_inputs import (
    output_of,
    pipeline_env,
    read_figures,
    run_tailtrace,
    set_field,
    sha256,
    tailtrace_command,
    temp_files,
    write_tiny_dataset,
)

pytestmark = pytest.mark.slow

POSITIONS = {"old": "1000", "new": "1500"}  # LONG's quantity of EQ.A (positions.csv line 2)
CONFIG = {"methods": ["historical", "monte_carlo"]}  # two estimators keep each run short


@dataclass
class Book:
    data: Path
    results: Path
    workdir: Path
    figures: dict[str, list[tuple]]  # cold-run snapshots per version of the inputs

    @property
    def db(self) -> Path:
        return self.results / "risk.duckdb"

    def use(self, version: str) -> None:
        set_field("positions.csv", 2, 2, POSITIONS[version])(self.data)

    def run(self, **kw) -> subprocess.CompletedProcess:
        proc = run_tailtrace(self.data, self.results, self.workdir, config=CONFIG, **kw)
        assert proc.returncode == 0, output_of(proc)[-4000:]
        return proc

    def settle(self, version: str) -> None:
        """Bring inputs and database to ``version`` (usually nothing to do)."""
        self.use(version)
        self.run()
        assert read_figures(self.db) == self.figures[version]

    def start(self, **env: str) -> subprocess.Popen:
        """Start ``tailtrace run`` in its own process group (so it can be killed whole)."""
        cmd = tailtrace_command(self.data, self.results, self.workdir, config=CONFIG)
        out = open(self.workdir / "killed-run.log", "w")
        return subprocess.Popen(cmd, env=pipeline_env(**env), cwd=self.workdir, start_new_session=True, stdout=out,
                                stderr=subprocess.STDOUT)


def kill_group(proc: subprocess.Popen) -> None:
    """SIGKILL the run's whole process group (runner, Snakemake, its jobs)."""
    try:
        os.killpg(proc.pid, signal.SIGKILL)
    except ProcessLookupError:  # already gone
        pass
    proc.wait(timeout=30)


def wait_for(condition, proc: subprocess.Popen, what: str, timeout: float = 120.0) -> None:
    end = time.monotonic() + timeout
    while time.monotonic() < end:
        if condition():
            return
        if proc.poll() is not None:
            pytest.fail(f"the run ended (exit {proc.returncode}) before {what}")
        time.sleep(0.02)
    kill_group(proc)
    pytest.fail(f"timed out waiting for {what}")


def text_of(path: Path) -> str:
    return path.read_text() if path.exists() else ""


@pytest.fixture(scope="module")
def book(tmp_path_factory) -> Book:
    """Snapshots of cold runs on both versions, at the same paths (run_id includes them)."""
    root = tmp_path_factory.mktemp("crash")
    data = write_tiny_dataset(root / "data")
    book = Book(data, root / "results", root / "work", {})
    for version in ("new", "old"):  # ends with the old version in place
        shutil.rmtree(book.results, ignore_errors=True)
        shutil.rmtree(book.workdir / ".snakemake", ignore_errors=True)
        book.use(version)
        book.run()
        book.figures[version] = read_figures(book.db)
    assert book.figures["old"] != book.figures["new"]
    assert len(book.figures["old"]) == len(book.figures["new"]) == 2 * 2 * 3 * 2
    return book


def test_kill_during_aggregate_keeps_old_figures_and_rerun_gives_new(book):
    book.settle("old")
    old_bytes = book.db.read_bytes()
    log = book.results / "logs" / "aggregate.log"
    pauses_before = text_of(log).count("test hook")
    book.use("new")
    proc = book.start(TAILTRACE_TEST_PAUSE_AGGREGATE="120")
    wait_for(lambda: text_of(log).count("test hook") > pauses_before, proc, "the aggregate step's pause")
    assert len(temp_files(book.results)) == 1  # the new database is written, not yet renamed
    kill_group(proc)

    assert book.db.read_bytes() == old_bytes
    assert read_figures(book.db) == book.figures["old"]
    assert not (book.results / "aggregate.json").exists()  # Snakemake removed the output before the job

    rerun = book.run()
    assert "left by a Snakemake run that was killed" in output_of(rerun)  # runner cleared Snakemake's stale lock
    assert read_figures(book.db) == book.figures["new"]
    assert temp_files(book.results) == []  # the killed writer's temporary file was cleared


def test_kill_inside_an_estimator_keeps_old_figures_and_rerun_gives_new(book):
    book.settle("new")
    new_bytes = book.db.read_bytes()
    log = book.results / "logs" / "estimate_monte_carlo.log"
    log.unlink(missing_ok=True)
    book.use("old")
    proc = book.start()
    wait_for(log.exists, proc, "the Monte Carlo estimator to start")
    kill_group(proc)

    assert book.db.read_bytes() == new_bytes
    assert read_figures(book.db) == book.figures["new"]
    rerun = book.run()
    assert "estimate_monte_carlo" in output_of(rerun)
    assert read_figures(book.db) == book.figures["old"]
    assert temp_files(book.results) == []


def test_failing_night_leaves_yesterdays_database(book):
    book.settle("old")
    before = sha256(book.db)
    prices = book.data / "prices" / "equities.csv"
    good = prices.read_bytes()
    try:
        set_field("prices/equities.csv", 8, 2, "n/a")(book.data)
        proc = run_tailtrace(book.data, book.results, book.workdir, config=CONFIG)
        assert proc.returncode != 0
        assert "equities.csv, row 8, column 'close': not a plain decimal number" in output_of(proc)
        assert sha256(book.db) == before
    finally:
        prices.write_bytes(good)  # the next settle() reruns what the failure left incomplete
