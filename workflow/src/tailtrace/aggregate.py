"""Collect every step's output into the risk database, with provenance."""

from __future__ import annotations

import datetime as _dt
import json
from pathlib import Path
from typing import Any, Mapping, Sequence

import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq

from .archive import archive_dir_for
from .database import write_database
from .errors import TailtraceError
from .figures import FIGURE_SCHEMA
from .ingest import QUALITY_SCHEMA
from .provenance import git_state, package_versions, read_records, run_id
from .usage import LINEAGE_MODES, lineage_tables

__all__ = ["FIGURE_KEY", "EXTRA_TABLES", "aggregate", "provenance_rows"]

# Tables other steps produce, stored beside the figures and replaced by as_of.
EXTRA_TABLES = (
    "sensitivities", "stress_results", "liquidity_es", "stressed_windows", "backtest_forecasts", "backtest_summary",
    "risk_contributions", "instrument_notes",
)

FIGURE_KEY = ("as_of", "portfolio", "method", "confidence", "horizon_days")


def _concat(paths: Sequence[str], schema: pa.Schema | None = None) -> pa.Table:
    tables = [pq.read_table(p) for p in sorted(paths)]
    if schema is not None:
        tables = [t.select(schema.names).cast(schema) for t in tables]
        return pa.concat_tables(tables) if tables else schema.empty_table()
    return pa.concat_tables(tables, promote_options="default")


def provenance_rows(records: list[dict[str, Any]], rid: str, recorded_at: str) -> pa.Table:
    rows = []
    for r in records:
        job = json.dumps(r["wildcards"], sort_keys=True)
        common = dict(run_id=rid, recorded_at=recorded_at, rule=r["rule"], job=job,
                      params=json.dumps(r["params"], sort_keys=True), notes=json.dumps(r.get("notes", {}), sort_keys=True),
                      started_at=r["started_at"], finished_at=r["finished_at"],
                      packages=json.dumps(r["packages"], sort_keys=True))
        for e in r["inputs"] + r["outputs"]:
            rows.append({**common, "role": e["role"], "name": e["name"], "path": e["path"], "sha256": e["sha256"]})
    names = ["run_id", "recorded_at", "rule", "job", "role", "name", "path", "sha256", "params", "notes",
             "started_at", "finished_at", "packages"]
    return pa.Table.from_pylist(rows, schema=pa.schema([(n, pa.string()) for n in names]))


def _sorted(table: pa.Table, keys: Sequence[str]) -> pa.Table:
    return table.sort_by([(k, "ascending") for k in keys])


def aggregate(
    db_path: str | Path,
    *,
    figure_files: Sequence[str],
    quality_files: Sequence[str],
    record_files: Sequence[str],
    extra_tables: Mapping[str, Sequence[str]] | None = None,
    config_snapshot: Mapping[str, Any],
    workdir: str | Path = ".",
) -> dict[str, Any]:
    """Write figures, data quality, extra tables and provenance in one go.

    Parameters
    ----------
    db_path : risk database to create or update
    figure_files : estimate Parquet files (one per method)
    quality_files : data-quality Parquet files
    record_files : step records (JSON) of every job that fed this run
    extra_tables : DuckDB table name → Parquet files (replaced by as_of)
    config_snapshot : the configuration of this run, stored in ``runs``

    Returns
    -------
    dict with run_id, recorded_at, row counts: the rule's receipt.
    """
    records = read_records(list(record_files))
    rid = run_id(records)
    recorded_at = _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="milliseconds")
    figures = _concat(figure_files, FIGURE_SCHEMA)
    if figures.num_rows == 0:
        raise TailtraceError("no risk figures were produced; nothing to write")
    figures = _sorted(figures, FIGURE_KEY).append_column("run_id", pa.array([rid] * figures.num_rows, pa.string()))
    quality = _concat(quality_files, QUALITY_SCHEMA)
    quality = quality.append_column("run_id", pa.array([rid] * quality.num_rows, pa.string()))
    as_of_dates = sorted({d.isoformat() for d in pc.unique(figures.column("as_of")).to_pylist()})
    git = git_state(Path(__file__).resolve().parent)  # the checkout holding the code, not the working folder
    runs = pa.Table.from_pylist([{
        "run_id": rid, "recorded_at": recorded_at, "as_of_dates": json.dumps(as_of_dates),
        "config": json.dumps(config_snapshot, sort_keys=True), "git_commit": git["commit"], "git_dirty": git["dirty"],
        "packages": json.dumps(package_versions(), sort_keys=True), "workdir": str(Path(workdir).resolve()),
    }])
    tables: dict[str, pa.Table] = {
        "risk_figures": figures,
        "data_quality": quality,
        "provenance": provenance_rows(records, rid, recorded_at),
        "runs": runs,
    }
    for name, paths in (extra_tables or {}).items():
        if paths:
            t = _concat(paths)
            tables[name] = t.append_column("run_id", pa.array([rid] * t.num_rows, pa.string())) if "run_id" not in t.column_names else t
    tables.update(lineage_tables(records, rid, archive_dir=archive_dir_for(db_path)))
    write_database(db_path, tables, keys={"risk_figures": FIGURE_KEY}, modes=LINEAGE_MODES)
    return {"run_id": rid, "recorded_at": recorded_at, "as_of": as_of_dates, "database": str(db_path),
            "rows": {k: v.num_rows for k, v in tables.items()}, "git": git}
