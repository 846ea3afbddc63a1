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

__all__ = ["REPO_ROOT", "results_lock", "snakemake_command", "run_pipeline", "LockHeld"]

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


def run_pipeline(*, results_dir: str, data_dir: str | None, cores: int, extra: Sequence[str],
                 config: Sequence[str] = ()) -> int:
    overrides = [f"results_dir={results_dir}"] + ([f"data_dir={data_dir}"] if data_dir else []) + list(config)
    cmd = snakemake_command(cores=cores, config=overrides, extra=extra)
    with results_lock(results_dir):
        return subprocess.call(cmd, cwd=str(REPO_ROOT))
