"""Step records: what each pipeline step read, wrote and was configured with."""

from __future__ import annotations

import datetime as _dt
import json
import logging
import os
import subprocess
import sys
from contextlib import contextmanager
from importlib import metadata
from pathlib import Path
from typing import Any, Iterator, Mapping

from .hashing import sha256_file, sha256_text, source_hash

__all__ = [
    "PACKAGES",
    "package_source_hash",
    "package_versions",
    "git_state",
    "file_entries",
    "step",
    "read_records",
    "run_id",
    "setup_logging",
]

PACKAGES = ("tailtrace", "numpy", "scipy", "pandas", "pyarrow", "duckdb", "snakemake", "arch", "matplotlib")


def package_source_hash() -> str:
    """Hash of every module of the installed tailtrace package.

    The version number alone does not change between commits; this does.
    """
    return source_hash(Path(__file__).resolve().parent.rglob("*.py"))


def package_versions() -> dict[str, str]:
    out = {"python": sys.version.split()[0]}
    for name in PACKAGES:
        try:
            out[name] = metadata.version(name)
        except metadata.PackageNotFoundError:
            out[name] = "not installed"
    out["tailtrace.source"] = package_source_hash()
    return out


def git_state(repo: str | Path) -> dict[str, Any]:
    """Commit and dirty flag of the checkout holding the code, if it is one."""
    try:
        commit = subprocess.run(["git", "-C", str(repo), "rev-parse", "HEAD"], capture_output=True, text=True, check=True).stdout.strip()
        status = subprocess.run(["git", "-C", str(repo), "status", "--porcelain", "--untracked-files=no"],
                                capture_output=True, text=True, check=True).stdout
        return {"commit": commit, "dirty": bool(status.strip())}
    except (OSError, subprocess.CalledProcessError):
        return {"commit": None, "dirty": None}


def _now() -> str:
    return _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="milliseconds")


def file_entries(named: Mapping[str, Any], role: str, skip: set[str] = frozenset()) -> list[dict[str, Any]]:
    """Path and sha256 of every file in a Snakemake named input/output list."""
    entries = []
    for key, value in named.items():
        if key in skip:
            continue
        paths = value if isinstance(value, (list, tuple)) else [value]
        for p in paths:
            p = str(p)
            if os.path.isfile(p):
                entries.append({"role": role, "name": key, "path": p, "sha256": sha256_file(p)})
    return sorted(entries, key=lambda e: (e["name"], e["path"]))


def _named(items: Any) -> dict[str, Any]:
    """Snakemake's Namedlist → {name: value}; unnamed entries get their index."""
    names = dict(items.items()) if hasattr(items, "items") else {}
    flat = set()
    for v in names.values():
        flat.update(map(str, v if isinstance(v, (list, tuple)) else [v]))
    for i, v in enumerate(items):
        if str(v) not in flat:
            names[f"_{i}"] = v
    return names


def _plain(value: Any) -> Any:
    if isinstance(value, Mapping):
        return {str(k): _plain(v) for k, v in sorted(value.items(), key=lambda kv: str(kv[0]))}
    if isinstance(value, (list, tuple)):
        return [_plain(v) for v in value]
    if isinstance(value, (str, int, float, bool)) or value is None:
        return value
    return str(value)


@contextmanager
def step(smk: Any, *, prov_key: str = "prov") -> Iterator[dict[str, Any]]:
    """Record one Snakemake job: inputs, outputs (hashed after the work), params.

    Use as ``with step(snakemake) as notes: ...``; anything put in ``notes``
    is stored with the record. The record goes to ``snakemake.output.prov``.
    """
    started = _now()
    notes: dict[str, Any] = {}
    inputs = _named(smk.input)
    yield notes
    outputs = _named(smk.output)
    record = {
        "rule": smk.rule,
        "wildcards": _plain(dict(smk.wildcards.items())),
        "params": _plain(dict(smk.params.items())),
        "inputs": file_entries(inputs, "input"),
        "outputs": file_entries(outputs, "output", skip={prov_key}),
        "notes": _plain(notes),
        "started_at": started,
        "finished_at": _now(),
        "packages": package_versions(),
    }
    Path(outputs[prov_key]).write_text(json.dumps(record, indent=1, sort_keys=True))


def read_records(paths: list[str]) -> list[dict[str, Any]]:
    return [json.loads(Path(p).read_text()) for p in sorted(paths)]


_LOCATION_PARAMS = ("database",)  # params that only say where things are


def run_id(records: list[dict[str, Any]]) -> str:
    """Deterministic id of a run: a hash of every step's file contents and params.

    Two runs on the same inputs, code and configuration share an id, so the
    figure table stays bitwise identical; each run is still recorded with its
    own time in the provenance table. Folder locations do not count (files by
    name and content, location-only params left out), so a run rebuilt
    elsewhere from the same inputs keeps its id.
    """
    def params(p: dict[str, Any]) -> dict[str, Any]:
        return {k: v for k, v in p.items() if k not in _LOCATION_PARAMS and not k.endswith("_file")}

    content = [
        {"rule": r["rule"], "wildcards": r["wildcards"], "params": params(r["params"]),
         "files": sorted((e["role"], e["name"], Path(e["path"]).name, e["sha256"]) for e in r["inputs"] + r["outputs"])}
        for r in sorted(records, key=lambda r: (r["rule"], json.dumps(r["wildcards"], sort_keys=True)))
    ]
    return sha256_text(json.dumps(content, sort_keys=True))[:16]


def setup_logging(smk: Any) -> None:
    """Send logging (and warnings) of a Snakemake script to the rule's log."""
    log = smk.log[0] if len(smk.log) else None
    logging.basicConfig(
        filename=log, level=logging.INFO, format="%(asctime)s %(levelname)s %(name)s: %(message)s", force=True
    )
    logging.captureWarnings(True)
