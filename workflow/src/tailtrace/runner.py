"""Run the Snakemake pipeline under an exclusive lock on the results folder."""

from __future__ import annotations

import fcntl
import os
import subprocess
import sys
from contextlib import contextmanager
from pathlib import Path
from typing import Iterator, Sequence

from .errors import TailtraceError

__all__ = ["REPO_ROOT", "results_lock", "snakemake_command", "snakemake_workdir", "snakemake_processes",
           "stale_snakemake_locks", "run_pipeline", "LockHeld"]

REPO_ROOT = Path(__file__).resolve().parents[3]
LOCK_NAME = ".tailtrace.lock"


class LockHeld(TailtraceError):
    """Another pipeline run holds the results folder."""


@contextmanager
def results_lock(results_dir: str | Path) -> Iterator[Path]:
    """Hold an exclusive flock on ``<results_dir>/.tailtrace.lock``.

    Snakemake's own directory lock is not enough: any finishing instance
    removes the whole lock folder, so a third run could start beside a
    running one.
    """
    folder = Path(results_dir)
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / LOCK_NAME
    fh = open(path, "a+")
    try:
        try:
            fcntl.flock(fh, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError:
            fh.seek(0)
            holder = fh.read().strip() or "unknown"
            raise LockHeld(f"another tailtrace run is using {folder} (lock {path}, held by pid {holder}); "
                           "wait for it to finish") from None
        fh.seek(0)
        fh.truncate()
        fh.write(str(os.getpid()))
        fh.flush()
        yield path
    finally:
        fh.close()


def snakemake_command(*, cores: int, config: Sequence[str], extra: Sequence[str], snakefile: Path | None = None) -> list[str]:
    cmd = [sys.executable, "-m", "snakemake", "--snakefile", str(snakefile or REPO_ROOT / "Snakefile"),
           "--cores", str(cores), "--rerun-incomplete"]
    if config:
        cmd += ["--config", *config]
    return cmd + list(extra)


def snakemake_workdir(extra: Sequence[str]) -> Path:
    """The folder Snakemake will run in: ``--directory``/``-d`` from ``extra``, else the checkout.

    Snakemake is started in the checkout, so a relative ``--directory`` is relative to it.
    """
    for i, arg in enumerate(extra):
        if arg in ("--directory", "-d") and i + 1 < len(extra):
            return REPO_ROOT / extra[i + 1]
        if arg.startswith("--directory="):
            return REPO_ROOT / arg.split("=", 1)[1]
    return REPO_ROOT


def snakemake_processes(workdir: str | Path) -> list[int]:
    """Pids of live processes working in ``workdir`` whose command line mentions snakemake.

    Linux only (reads /proc); elsewhere the answer is unknown and every
    process is assumed to be live (see :func:`stale_snakemake_locks`).
    """
    proc = Path("/proc")
    if not proc.is_dir():
        return [-1]
    target = Path(workdir).resolve()
    found = []
    for entry in proc.iterdir():
        if not entry.name.isdigit() or int(entry.name) == os.getpid():
            continue
        try:
            if Path(os.readlink(entry / "cwd")).resolve() != target:
                continue
            argv = (entry / "cmdline").read_bytes().split(b"\0")
        except OSError:  # gone, a zombie, or not ours to inspect
            continue
        if any(b"snakemake" in arg for arg in argv):
            found.append(int(entry.name))
    return sorted(found)


def stale_snakemake_locks(workdir: str | Path, results_dir: str | Path) -> list[Path]:
    """Snakemake lock files in ``workdir`` naming a file inside ``results_dir``, if no Snakemake is alive there.

    Snakemake writes ``.snakemake/locks/<n>.input.lock`` and
    ``<n>.output.lock`` (one path per line) and deletes them on exit; a run
    killed with SIGKILL leaves them, and every later run then stops with
    "Directory cannot be locked". Locks are reported stale only when no live
    process in ``workdir`` mentions snakemake (a raw ``snakemake`` run started
    outside tailtrace keeps its locks, and Snakemake refuses the new run).
    """
    workdir = Path(workdir)
    lockdir = workdir / ".snakemake" / "locks"
    if not lockdir.is_dir() or snakemake_processes(workdir):
        return []
    results = (workdir / results_dir).resolve()
    stale = []
    for lock in sorted(lockdir.glob("*.lock")):
        try:
            named = [(workdir / line.strip()).resolve() for line in lock.read_text().splitlines() if line.strip()]
        except (OSError, UnicodeDecodeError):
            continue
        if any(p.is_relative_to(results) for p in named):
            stale.append(lock)
    return stale


def run_pipeline(*, results_dir: str, data_dir: str | None, cores: int, extra: Sequence[str],
                 config: Sequence[str] = ()) -> int:
    """Run Snakemake under :func:`results_lock`, first clearing locks a killed run left.

    Relative ``results_dir``/``data_dir`` are resolved by Snakemake against its
    working directory (the checkout, or ``--directory`` in ``extra``); the lock
    is taken on the same folder.
    """
    overrides = [f"results_dir={results_dir}"] + ([f"data_dir={data_dir}"] if data_dir else []) + list(config)
    cmd = snakemake_command(cores=cores, config=overrides, extra=extra)
    workdir = snakemake_workdir(extra)
    with results_lock(workdir / results_dir):
        for lock in stale_snakemake_locks(workdir, results_dir):
            print(f"tailtrace: removing {lock}, left by a Snakemake run that was killed "
                  "(no Snakemake process is running in its folder)", file=sys.stderr)
            lock.unlink(missing_ok=True)
        return subprocess.call(cmd, cwd=str(REPO_ROOT))
