"""Shared test helpers: repo paths and a runner for the real workflow."""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import pytest
import yaml

REPO = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(Path(__file__).parent))


def write_config(path: Path, overrides: dict) -> Path:
    """Write a config file layered over config/config.yaml (for nested keys)."""
    path.write_text(yaml.safe_dump(overrides, sort_keys=True))
    return path


def snakemake(workdir: Path, *config: str, extra: tuple[str, ...] = (), check: bool = True,
              configfile: Path | None = None) -> subprocess.CompletedProcess:
    """Run the repository's Snakefile in ``workdir`` with config overrides."""
    env = dict(os.environ, PYTHONPATH=str(REPO / "workflow" / "src"))
    cmd = [sys.executable, "-m", "snakemake", "--snakefile", str(REPO / "Snakefile"), "--directory", str(workdir),
           "--cores", "2", "--rerun-incomplete", *extra]
    if configfile is not None:
        cmd += ["--configfile", str(REPO / "config" / "config.yaml"), str(configfile)]
    if config:
        cmd += ["--config", *config]
    proc = subprocess.run(cmd, capture_output=True, text=True, env=env, cwd=workdir)
    if check and proc.returncode != 0:
        raise AssertionError(f"snakemake failed ({proc.returncode}):\n{proc.stdout[-4000:]}\n{proc.stderr[-6000:]}")
    return proc


@pytest.fixture(scope="session")
def repo_root() -> Path:
    return REPO
