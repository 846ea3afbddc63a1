"""Read back what a run recorded: its step records, config and figures."""

from __future__ import annotations

import json
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Iterable, Mapping, Sequence

import duckdb
import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq

from .archive import archive_dir_for, recorded_copy
from .errors import TailtraceError

__all__ = [
    "FileEntry",
    "StepRecord",
    "RecordedRun",
    "FigureKey",
    "raw_inputs",
    "fetch_dicts",
    "has_table",
    "load_run",
    "list_runs",
    "figure_of_run",
]


@dataclass(frozen=True)
class FileEntry:
    """One file a step read or wrote, with its sha256 at the time."""

    role: str
    name: str
    path: str
    sha256: str


@dataclass(frozen=True)
class StepRecord:
    """One Snakemake job as recorded by :func:`tailtrace.provenance.step`."""

    rule: str
    job: Mapping[str, Any]
    params: Mapping[str, Any]
    notes: Mapping[str, Any]
    started_at: str
    finished_at: str
    packages: Mapping[str, Any]
    inputs: tuple[FileEntry, ...]
    outputs: tuple[FileEntry, ...]

    @classmethod
    def from_dict(cls, record: Mapping[str, Any]) -> "StepRecord":
        """From the JSON step record a job wrote."""
        def files(entries: Iterable[Mapping[str, str]]) -> tuple[FileEntry, ...]:
            return tuple(FileEntry(e["role"], e["name"], e["path"], e["sha256"]) for e in entries)

        return cls(record["rule"], dict(record["wildcards"]), dict(record["params"]), dict(record.get("notes", {})),
                   record["started_at"], record["finished_at"], dict(record["packages"]),
                   files(record["inputs"]), files(record["outputs"]))

    @property
    def label(self) -> str:
        """``rule`` or ``rule[name=...]`` for jobs with wildcards."""
        if not self.job:
            return self.rule
        return self.rule + "[" + ",".join(f"{k}={v}" for k, v in sorted(self.job.items())) + "]"

    def output(self, name: str) -> FileEntry:
        for e in self.outputs:
            if e.name == name:
                return e
        raise TailtraceError(f"step {self.label} recorded no output {name!r}")

    def inputs_named(self, name: str) -> list[FileEntry]:
        return [e for e in self.inputs if e.name == name]


def raw_inputs(steps: Sequence[StepRecord]) -> list[tuple[StepRecord, FileEntry]]:
    """(step, entry) of every input that no step of the run produced: the raw files."""
    produced = {e.path for s in steps for e in s.outputs}
    return [(s, e) for s in steps for e in s.inputs if e.path not in produced]


@dataclass(frozen=True)
class FigureKey:
    """Which figure: as_of (ISO date), portfolio, method, confidence, horizon in days."""

    as_of: str
    portfolio: str
    method: str
    confidence: float
    horizon: int

    def describe(self) -> str:
        return (f"as_of {self.as_of}, portfolio {self.portfolio}, method {self.method}, "
                f"confidence {self.confidence:g}, horizon {self.horizon} day(s)")


@dataclass(frozen=True)
class RecordedRun:
    """A run as the database remembers it.

    Paths in step records are as Snakemake saw them: relative ones are
    relative to ``workdir`` (the folder the pipeline ran in).
    """

    db_path: Path
    run_id: str
    recorded_at: str
    as_of_dates: tuple[str, ...]
    config: Mapping[str, Any]
    git_commit: str | None
    git_dirty: bool | None
    packages: Mapping[str, Any]
    workdir: Path
    steps: tuple[StepRecord, ...]

    @property
    def archive_dir(self) -> Path:
        return archive_dir_for(self.db_path)

    def resolve(self, path: str | Path) -> Path:
        """A recorded path as a path usable from here."""
        p = Path(path)
        return p if p.is_absolute() else self.workdir / p

    def step(self, rule: str, **job: str) -> StepRecord:
        found = [s for s in self.steps if s.rule == rule and all(s.job.get(k) == v for k, v in job.items())]
        if len(found) != 1:
            raise TailtraceError(f"run {self.run_id}: expected one record of step {rule} {job or ''}, found {len(found)}")
        return found[0]

    def has_step(self, rule: str) -> bool:
        return any(s.rule == rule for s in self.steps)

    def raw_inputs(self) -> list[tuple[StepRecord, FileEntry]]:
        return raw_inputs(self.steps)

    def copy_of(self, entry: FileEntry) -> tuple[Path | None, str]:
        """The recorded bytes of a file: the archived copy or the unchanged live file."""
        return recorded_copy(self.resolve(entry.path), entry.sha256, self.archive_dir)

    def data_dir(self) -> Path:
        return self.resolve(self.config.get("data_dir", "data_demo"))


def fetch_dicts(con: duckdb.DuckDBPyConnection, sql: str, params: Sequence[Any] = ()) -> list[dict[str, Any]]:
    """Rows of a parameterised query as dicts."""
    return con.sql(sql, params=list(params)).to_arrow_table().to_pylist()


def has_table(con: duckdb.DuckDBPyConnection, name: str) -> bool:
    return bool(con.execute("SELECT count(*) FROM information_schema.tables WHERE table_name = ?", [name]).fetchone()[0])


def list_runs(con: duckdb.DuckDBPyConnection) -> list[dict[str, Any]]:
    """Every recorded run, oldest first (a run id recorded twice appears twice)."""
    rows = con.execute("SELECT run_id, recorded_at, as_of_dates, git_commit, git_dirty FROM runs "
                       "ORDER BY recorded_at, run_id").fetchall()
    return [{"run_id": r[0], "recorded_at": r[1], "as_of_dates": json.loads(r[2] or "[]"), "git_commit": r[3],
             "git_dirty": r[4]} for r in rows]


def load_run(con: duckdb.DuckDBPyConnection, db_path: str | Path, run_id: str | None = None) -> RecordedRun:
    """The latest recording of ``run_id`` (default: the latest run).

    Raises
    ------
    TailtraceError
        No such run (the message lists the known ones).
    """
    if run_id is None:
        row = con.execute("SELECT run_id, recorded_at FROM runs ORDER BY recorded_at DESC LIMIT 1").fetchone()
        if row is None:
            raise TailtraceError(f"{db_path}: no runs recorded")
    else:
        row = con.execute("SELECT run_id, recorded_at FROM runs WHERE run_id = ? ORDER BY recorded_at DESC LIMIT 1",
                          [run_id]).fetchone()
        if row is None:
            known = ", ".join(r["run_id"] for r in list_runs(con)[-10:])
            raise TailtraceError(f"{db_path}: no run {run_id!r}; recent runs: {known or 'none'}")
    rid, recorded_at = row
    run = con.execute("SELECT as_of_dates, config, git_commit, git_dirty, packages, workdir FROM runs "
                      "WHERE run_id = ? AND recorded_at = ?", [rid, recorded_at]).fetchone()
    prov = con.execute(
        "SELECT rule, job, role, name, path, sha256, params, notes, started_at, finished_at, packages FROM provenance "
        "WHERE run_id = ? AND recorded_at = ? ORDER BY rule, job, role, name, path", [rid, recorded_at]).fetchall()
    grouped: dict[tuple[str, str], dict[str, Any]] = {}
    for rule, job, role, name, path, sha, params, notes, started, finished, packages in prov:
        rec = grouped.setdefault((rule, job), {
            "rule": rule, "wildcards": json.loads(job), "params": json.loads(params), "notes": json.loads(notes or "{}"),
            "started_at": started, "finished_at": finished, "packages": json.loads(packages or "{}"),
            "inputs": [], "outputs": []})
        rec["inputs" if role == "input" else "outputs"].append({"role": role, "name": name, "path": path, "sha256": sha})
    return RecordedRun(
        db_path=Path(db_path), run_id=rid, recorded_at=recorded_at, as_of_dates=tuple(json.loads(run[0] or "[]")),
        config=json.loads(run[1] or "{}"), git_commit=run[2], git_dirty=run[3], packages=json.loads(run[4] or "{}"),
        workdir=Path(run[5] or "."), steps=tuple(StepRecord.from_dict(r) for r in grouped.values()))


def _match(table: pa.Table, key: FigureKey) -> pa.Table:
    day = table.column("as_of").to_numpy().astype("datetime64[D]")
    mask = ((day == np.datetime64(key.as_of, "D"))
            & pc.equal(table.column("portfolio"), key.portfolio).to_numpy(zero_copy_only=False)
            & pc.equal(table.column("method"), key.method).to_numpy(zero_copy_only=False)
            & (table.column("confidence").to_numpy() == float(key.confidence))
            & (table.column("horizon_days").to_numpy() == int(key.horizon)))
    return table.filter(pa.array(mask))


def figure_of_run(con: duckdb.DuckDBPyConnection, run: RecordedRun, key: FigureKey) -> tuple[dict[str, Any] | None, str]:
    """The figure as ``run`` produced it, and where it was found.

    Looks in ``risk_figures`` first; if a later run replaced that as_of, in
    the run's figure file (archived copy, or the live cache if unchanged).

    Returns
    -------
    (row as a dict, or None; "risk_figures", "figure file <path> (<origin>)"
    or the reason it is not available)
    """
    rows = fetch_dicts(
        con, "SELECT * FROM risk_figures WHERE as_of = ?::DATE AND portfolio = ? AND method = ? AND confidence = ? "
        "AND horizon_days = ? AND run_id = ?",
        [key.as_of, key.portfolio, key.method, float(key.confidence), int(key.horizon), run.run_id])
    if rows:
        return rows[0], "risk_figures"
    rule = f"estimate_{key.method}"
    if not run.has_step(rule):
        return None, f"run {run.run_id} did not run method {key.method}"
    entry = run.step(rule).output("figures")
    path, origin = run.copy_of(entry)
    if path is None:
        return None, f"replaced in risk_figures and the figure file is not available ({origin})"
    found = _match(pq.read_table(path), key)
    if found.num_rows == 0:
        return None, f"run {run.run_id} has no such figure"
    row = found.to_pylist()[0]
    row["run_id"] = run.run_id
    return row, f"figure file {entry.path} ({origin})"
