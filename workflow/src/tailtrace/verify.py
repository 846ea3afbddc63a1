"""Re-hash the files a run recorded: what changed, went missing or is new since."""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from .archive import archived_path
from .database import open_read_only
from .hashing import sha256_file
from .recorded import RecordedRun, load_run

__all__ = ["FileCheck", "VerifyReport", "verify_run", "format_verify", "data_folder_files"]

RAW, FIGURES, INTERMEDIATE = "input", "figures", "intermediate"


@dataclass(frozen=True)
class FileCheck:
    """One file of a run, then and now.

    ``status``: unchanged, changed, missing, new (in the data folder, not
    used by the run) or inconsistent (steps of the run recorded different
    hashes for it). ``archive``: for raw inputs and figure files, whether
    the archive holds the recorded bytes (archived, not archived, corrupt).
    """

    path: str
    kind: str
    status: str
    recorded: str | None
    current: str | None
    steps: tuple[str, ...] = ()
    archive: str | None = None


@dataclass(frozen=True)
class VerifyReport:
    run_id: str
    recorded_at: str
    files: tuple[FileCheck, ...] = field(default_factory=tuple)

    @property
    def problems(self) -> list[FileCheck]:
        return [f for f in self.files if f.status != "unchanged" or f.archive == "corrupt"]

    @property
    def differs(self) -> bool:
        return bool(self.problems)

    def as_dict(self) -> dict[str, Any]:
        counts: dict[str, int] = {}
        for f in self.files:
            counts[f.status] = counts.get(f.status, 0) + 1
        return {"run_id": self.run_id, "recorded_at": self.recorded_at, "differs": self.differs, "counts": counts,
                "files": [f.__dict__ for f in self.files]}


def data_folder_files(run: RecordedRun) -> list[Path]:
    """Price and positions files now in the run's data folder (as the config names them)."""
    inputs = dict(run.config.get("inputs", {}))
    data = run.data_dir()
    found = sorted((data / inputs.get("prices_dir", "prices")).glob("*.csv"))
    found += sorted((data / inputs.get("positions_dir", "positions")).glob("*.csv"))
    undated = data / inputs.get("positions", "positions.csv")
    return found + ([undated] if undated.is_file() else [])


def _archive_state(run: RecordedRun, sha256: str) -> str:
    copy = archived_path(run.archive_dir, sha256)
    if not copy.is_file():
        return "not archived"
    return "archived" if sha256_file(copy) == sha256 else "corrupt"


def verify_run(db_path: str | Path, run_id: str | None = None) -> VerifyReport:
    """Compare every file recorded for a run with the file system now.

    Parameters
    ----------
    db_path : the risk database
    run_id : the run to check (default: the latest)

    Returns
    -------
    VerifyReport; ``differs`` is True when any file changed, is missing,
    is new in the data folder's price or positions folders, or has a
    corrupt archived copy.
    """
    with open_read_only(db_path) as con:
        run = load_run(con, db_path, run_id)
    raw = {e.path for _, e in run.raw_inputs()}
    figures = {s.output("figures").path for s in run.steps if s.rule.startswith("estimate_")}
    seen: dict[str, dict[str, Any]] = {}
    for s in run.steps:
        for e in s.inputs + s.outputs:
            item = seen.setdefault(e.path, {"hashes": set(), "steps": []})
            item["hashes"].add(e.sha256)
            item["steps"].append(f"{s.label}:{e.role}")
    checks = []
    for path, item in sorted(seen.items()):
        kind = RAW if path in raw else FIGURES if path in figures else INTERMEDIATE
        live = run.resolve(path)
        current = sha256_file(live) if live.is_file() else None
        recorded = sorted(item["hashes"])
        if len(recorded) > 1:
            status = "inconsistent"
        elif current is None:
            status = "missing"
        else:
            status = "unchanged" if current == recorded[0] else "changed"
        archive = _archive_state(run, recorded[0]) if kind in (RAW, FIGURES) else None
        checks.append(FileCheck(path, kind, status, ",".join(recorded), current, tuple(sorted(set(item["steps"]))),
                                archive))
    used = {run.resolve(p).resolve() for p in raw}
    for p in data_folder_files(run):
        if p.resolve() not in used:
            shown = p.relative_to(run.workdir) if p.is_relative_to(run.workdir) else p  # like the recorded paths
            checks.append(FileCheck(str(shown), RAW, "new", None, sha256_file(p)))
    return VerifyReport(run.run_id, run.recorded_at, tuple(checks))


def format_verify(report: VerifyReport) -> str:
    """Human-readable verification (what ``tailtrace verify`` prints)."""
    d = report.as_dict()
    counts = ", ".join(f"{n} {k}" for k, n in sorted(d["counts"].items()))
    lines = [f"Run {report.run_id} recorded {report.recorded_at}: {len(report.files)} file(s): {counts}"]
    for f in report.files:
        if f.status == "unchanged" and f.archive != "corrupt":
            continue
        if f.status == "changed":
            detail = f"recorded {f.recorded}, now {f.current}"
        elif f.status == "new":
            detail = f"in the data folder but not used by the run (sha256 {f.current})"
        elif f.status == "missing":
            detail = f"recorded {f.recorded}"
        elif f.status == "inconsistent":
            detail = f"steps recorded different hashes {f.recorded}"
        else:
            detail = f"archived copy of {f.recorded} is corrupt"
        archive = f" [archive: {f.archive}]" if f.archive else ""
        lines.append(f"  {f.status.upper():<12} {f.kind:<12} {f.path}: {detail}{archive}")
    lines.append("Differences found." if report.differs else "All recorded files are unchanged.")
    return "\n".join(lines)
