"""Rebuild a past run from its recorded inputs and config; compare bit for bit."""

from __future__ import annotations

import json
import os
import shutil
import struct
import subprocess
import tempfile
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Sequence

import pyarrow as pa
import pyarrow.parquet as pq

from .aggregate import FIGURE_KEY
from .database import open_read_only
from .errors import TailtraceError
from .figures import FIGURE_SCHEMA
from .hashing import sha256_file
from .recorded import FileEntry, RecordedRun, load_run
from .runner import REPO_ROOT, snakemake_command

__all__ = ["INPUT_SOURCES", "Difference", "ReproduceReport", "reproduce_run", "diff_figures", "format_reproduce"]

INPUT_SOURCES = ("archive", "live")
_VALUE_COLUMNS = tuple(n for n in FIGURE_SCHEMA.names if n not in FIGURE_KEY)


@dataclass(frozen=True)
class Difference:
    """One figure value (or figure file) that the rebuild did not reproduce."""

    where: str
    key: str
    column: str | None
    stored: Any
    rebuilt: Any


@dataclass(frozen=True)
class ReproduceReport:
    run_id: str
    rebuilt_run_id: str | None
    inputs: tuple[dict[str, Any], ...]
    figure_files: tuple[dict[str, Any], ...]
    rows_compared: int
    differences: tuple[Difference, ...]
    notes: tuple[str, ...] = field(default_factory=tuple)
    workdir: str | None = None

    @property
    def identical(self) -> bool:
        """Every figure (all columns but run_id) and every figure file matches bit for bit."""
        return not self.differences

    def as_dict(self) -> dict[str, Any]:
        return {"run_id": self.run_id, "rebuilt_run_id": self.rebuilt_run_id, "identical": self.identical,
                "same_run_id": self.run_id == self.rebuilt_run_id, "inputs": list(self.inputs),
                "figure_files": list(self.figure_files), "rows_compared": self.rows_compared,
                "differences": [d.__dict__ for d in self.differences], "notes": list(self.notes),
                "workdir": self.workdir}


def _bits(value: Any) -> Any:
    # floats compared by their bytes: NaN equals NaN, 0.0 differs from -0.0
    return struct.pack("<d", value) if isinstance(value, float) else value


def _key_text(row: dict[str, Any]) -> str:
    return (f"{row['as_of']} {row['portfolio']} {row['method']} {row['confidence']:g} "
            f"{row['horizon_days']}d")


def diff_figures(stored: pa.Table, rebuilt: pa.Table, where: str) -> list[Difference]:
    """Every figure value that differs between two figure tables, bit for bit.

    Rows are matched on the figure key (as_of, portfolio, method, confidence,
    horizon_days); all other columns of the figure schema are compared,
    ``run_id`` excepted.
    """
    def by_key(t: pa.Table) -> dict[tuple, dict[str, Any]]:
        return {tuple(r[k] for k in FIGURE_KEY): r for r in t.to_pylist()}

    old, new = by_key(stored), by_key(rebuilt)
    out = []
    for key in sorted(set(old) | set(new), key=str):
        a, b = old.get(key), new.get(key)
        if a is None or b is None:
            row = a or b
            out.append(Difference(where, _key_text(row), None, "absent" if a is None else "present",
                                  "absent" if b is None else "present"))
            continue
        for col in _VALUE_COLUMNS:
            if col in a and col in b and _bits(a[col]) != _bits(b[col]):
                out.append(Difference(where, _key_text(a), col, a[col], b[col]))
    return out


def _layout(run: RecordedRun, root: Path) -> tuple[dict[str, Any], dict[str, Path]]:
    """Config of the rebuild and the place of every raw input in it.

    With relative data and results folders (the default config), the rebuild
    mirrors the original layout under ``root``: every recorded path, and so
    the run id, comes out the same. Otherwise inputs go to root/data and
    outputs to root/results, and the run id differs because it hashes paths.
    """
    config = json.loads(json.dumps(dict(run.config)))
    raws = [e for _, e in run.raw_inputs()]

    def inside(p: Path) -> bool:
        return not p.is_absolute() and ".." not in p.parts

    def settings_file(e: FileEntry) -> bool:  # stress windows, shocks, limits: files of the checkout
        return not inside(Path(e.path)) and run.resolve(e.path).resolve().is_relative_to(REPO_ROOT)

    if all(inside(Path(config.get(k, "."))) for k in ("data_dir", "results_dir")) and all(
            inside(Path(e.path)) or settings_file(e) for e in raws):
        targets = {}
        for e in raws:
            if inside(Path(e.path)):
                targets[e.path] = root / e.path
            else:
                src = run.resolve(e.path).resolve()
                targets[e.path] = root / "settings" / src.relative_to(REPO_ROOT)
                _repoint(config, src, targets[e.path])
        return config, targets
    data = run.data_dir().resolve()
    targets = {}
    for e in raws:
        src = run.resolve(e.path).resolve()
        if src.is_relative_to(data):
            targets[e.path] = root / "data" / src.relative_to(data)
        elif src.is_relative_to(REPO_ROOT):  # settings files of the checkout (stress windows, shocks, limits)
            targets[e.path] = root / "settings" / src.relative_to(REPO_ROOT)
            _repoint(config, src, targets[e.path])
        else:
            raise TailtraceError(f"cannot place input {e.path} in the rebuild: it lies outside the data folder {data}")
    config.update(data_dir=str(root / "data"), results_dir=str(root / "results"))
    return config, targets


def _repoint(config: dict[str, Any], original: Path, target: Path) -> None:
    """Point every config value naming ``original`` (relative to the checkout or absolute) at ``target``."""
    for key, value in config.items():
        if isinstance(value, dict):
            _repoint(value, original, target)
        elif isinstance(value, str) and value:
            p = Path(value)
            if (p if p.is_absolute() else REPO_ROOT / p).resolve() == original:
                config[key] = str(target)


def _restore(run: RecordedRun, entry: FileEntry, target: Path, source: str) -> dict[str, Any]:
    if source == "archive":
        path, origin = run.copy_of(entry)
    else:
        live = run.resolve(entry.path)
        path, origin = (live, "live") if live.is_file() else (None, f"{live} is missing")
    if path is None:
        return {"path": entry.path, "sha256": entry.sha256, "source": None, "problem": origin}
    target.parent.mkdir(parents=True, exist_ok=True)
    shutil.copyfile(path, target)
    now = sha256_file(target)
    return {"path": entry.path, "sha256": entry.sha256, "source": origin, "restored_sha256": now,
            "as_recorded": now == entry.sha256}


def _run_snakemake(root: Path, config_file: Path, cores: int) -> None:
    src = str(Path(__file__).resolve().parents[1])  # this package's code, also for the rule scripts
    env = dict(os.environ, PYTHONPATH=os.pathsep.join([src] + [p for p in [os.environ.get("PYTHONPATH")] if p]))
    cmd = snakemake_command(cores=cores, config=(), extra=["--directory", str(root), "--configfile", str(config_file)])
    log = root / "reproduce.log"
    with open(log, "w") as fh:
        rc = subprocess.call(cmd, cwd=str(root), env=env, stdout=fh, stderr=subprocess.STDOUT)
    if rc != 0:
        tail = "\n".join(log.read_text().splitlines()[-25:])
        raise TailtraceError(f"the rebuild failed (exit {rc}); log {log}:\n{tail}")


def _read_figures(path: Path) -> pa.Table:
    return pq.read_table(path).select(list(FIGURE_SCHEMA.names))


def reproduce_run(db_path: str | Path, run_id: str | None = None, *, inputs: str = "archive", cores: int = 2,
                  keep: bool = False, workdir: str | Path | None = None) -> ReproduceReport:
    """Rebuild a run in a temporary folder and compare its figures with the stored ones.

    Parameters
    ----------
    db_path : the risk database
    run_id : the run to rebuild (default: the latest)
    inputs : "archive" (the recorded bytes: archived copy, or the live file if
        unchanged; refuses when neither is available) or "live" (the files as
        they are now, to see what an edit would change)
    cores : Snakemake cores
    keep : keep the rebuild folder (always kept when the rebuild fails)
    workdir : rebuild here instead of a new temporary folder

    Returns
    -------
    ReproduceReport: per figure file, recorded and rebuilt sha256; every
    figure value that differs (stored rows of the run in risk_figures and the
    run's figure files, compared bit for bit, run_id excepted); notes on the
    run id and on code that changed since the run.
    """
    if inputs not in INPUT_SOURCES:
        raise TailtraceError(f"inputs must be one of {', '.join(INPUT_SOURCES)}, not {inputs!r}")
    with open_read_only(db_path) as con:
        run = load_run(con, db_path, run_id)
        stored = con.sql("SELECT * FROM risk_figures WHERE run_id = ?", params=[run.run_id]).to_arrow_table()
    root = Path(workdir) if workdir else Path(tempfile.mkdtemp(prefix=f"tailtrace-reproduce-{run.run_id}-"))
    root.mkdir(parents=True, exist_ok=True)
    try:
        report = _rebuild_and_compare(run, stored, root, inputs, cores)
    except BaseException:
        keep = True
        raise
    finally:
        if not keep:
            shutil.rmtree(root, ignore_errors=True)
    return report if not keep else ReproduceReport(**{**report.__dict__, "workdir": str(root)})


def _rebuild_and_compare(run: RecordedRun, stored: pa.Table, root: Path, inputs: str, cores: int) -> ReproduceReport:
    config, targets = _layout(run, root)
    restored = tuple(_restore(run, e, targets[e.path], inputs) for _, e in run.raw_inputs())
    missing = [r for r in restored if r["source"] is None]
    if missing:
        raise TailtraceError("cannot rebuild run " + run.run_id + ": " + "; ".join(
            f"{r['path']} (sha256 {r['sha256'][:12]}…) is not available: {r['problem']}" for r in missing))
    config_file = root / "reproduce-config.json"
    config_file.write_text(json.dumps(config, indent=1, sort_keys=True))
    _run_snakemake(root, config_file, cores)

    results = Path(config["results_dir"])
    db = results if results.is_absolute() else root / results
    with open_read_only(db / "risk.duckdb") as con:
        rebuilt_run = load_run(con, db / "risk.duckdb")
        rebuilt_rows = con.sql("SELECT * FROM risk_figures").to_arrow_table()

    differences: list[Difference] = []
    files, notes = [], []
    for step in (s for s in run.steps if s.rule.startswith("estimate_")):
        entry = step.output("figures")
        new = rebuilt_run.step(step.rule).output("figures")
        item = {"method": step.rule.removeprefix("estimate_"), "path": entry.path, "recorded": entry.sha256,
                "rebuilt": new.sha256, "identical": entry.sha256 == new.sha256}
        files.append(item)
        if item["identical"]:
            continue
        old_path, origin = run.copy_of(entry)
        rebuilt_table = _read_figures(rebuilt_run.resolve(new.path))
        if old_path is None:
            differences.append(Difference("figure file", entry.path, None, entry.sha256, new.sha256))
            notes.append(f"the recorded figure file {entry.path} is not available ({origin}); compared hashes only")
        else:
            found = diff_figures(_read_figures(old_path), rebuilt_table, "figure file")
            differences += found or [Difference("figure file", entry.path, "bytes", entry.sha256, new.sha256)]
    if stored.num_rows:
        keys = set(zip(*(stored.column(k).to_pylist() for k in FIGURE_KEY)))
        mask = [k in keys for k in zip(*(rebuilt_rows.column(k).to_pylist() for k in FIGURE_KEY))]
        differences += diff_figures(stored, rebuilt_rows.filter(pa.array(mask, pa.bool_())), "risk_figures")
    else:
        notes.append(f"risk_figures holds no rows of run {run.run_id} any more (later runs replaced its dates); "
                     "compared its figure files only")
    differences = _merge(differences)
    notes += _code_notes(run, rebuilt_run)
    if rebuilt_run.run_id != run.run_id:
        notes.append(f"run id differs: recorded {run.run_id}, rebuilt {rebuilt_run.run_id} (the id hashes every "
                     "file path, hash and parameter; paths differ unless the run used relative folders)")
    changed_inputs = [r["path"] for r in restored if not r["as_recorded"]]
    if changed_inputs:
        notes.append("rebuilt from inputs that differ from the recorded ones: " + ", ".join(changed_inputs))
    return ReproduceReport(run.run_id, rebuilt_run.run_id, restored, tuple(files), stored.num_rows,
                           tuple(differences), tuple(notes))


def _merge(differences: Sequence[Difference]) -> list[Difference]:
    """One line per value found different in both the figure file and risk_figures."""
    merged: dict[tuple, Difference] = {}
    for d in differences:
        k = (d.key, d.column, repr(d.stored), repr(d.rebuilt))
        if k in merged and d.where not in merged[k].where:
            d = Difference(f"{merged[k].where}, {d.where}", d.key, d.column, d.stored, d.rebuilt)
        merged[k] = d
    return list(merged.values())


def _code_notes(run: RecordedRun, rebuilt: RecordedRun) -> list[str]:
    out = []
    for s in run.steps:
        other = [r for r in rebuilt.steps if r.rule == s.rule and dict(r.job) == dict(s.job)]
        if not other:
            out.append(f"step {s.label} did not run in the rebuild")
            continue
        for name in ("code", "libs"):
            if s.params.get(name) != other[0].params.get(name):
                out.append(f"step {s.label}: {name} {s.params.get(name)} then, {other[0].params.get(name)} now")
    if run.packages.get("tailtrace.source") != rebuilt.packages.get("tailtrace.source"):
        out.append(f"package source {run.packages.get('tailtrace.source')} then, "
                   f"{rebuilt.packages.get('tailtrace.source')} now (git {run.git_commit} then, {rebuilt.git_commit} now)")
    return out


def format_reproduce(report: ReproduceReport, *, limit: int = 50) -> str:
    """Human-readable comparison (what ``tailtrace reproduce`` prints)."""
    lines = [f"Run {report.run_id} rebuilt as {report.rebuilt_run_id}"]
    for r in report.inputs:
        lines.append(f"  input {r['path']}: {r['source']}" + ("" if r["as_recorded"] else
                                                             f" (CHANGED: sha256 now {r['restored_sha256']})"))
    for f in report.figure_files:
        lines.append(f"  figures {f['method']}: {'identical' if f['identical'] else 'DIFFER'} "
                     f"(recorded {f['recorded'][:16]}, rebuilt {f['rebuilt'][:16]})")
    lines.append(f"  {report.rows_compared} stored figure row(s) compared with the rebuild")
    for d in report.differences[:limit]:
        delta = ""
        if isinstance(d.stored, float) and isinstance(d.rebuilt, float):
            delta = f" (diff {d.rebuilt - d.stored:+.6g})"
        lines.append(f"  DIFF [{d.where}] {d.key} {d.column or ''}: stored {d.stored!r}, rebuilt {d.rebuilt!r}{delta}")
    if len(report.differences) > limit:
        lines.append(f"  ... and {len(report.differences) - limit} more difference(s) (--json lists all)")
    lines += [f"  note: {n}" for n in report.notes]
    if report.workdir:
        lines.append(f"  rebuild kept in {report.workdir}")
    lines.append("Figures reproduced bit for bit." if report.identical else
                 f"{len(report.differences)} difference(s) found.")
    return "\n".join(lines)
