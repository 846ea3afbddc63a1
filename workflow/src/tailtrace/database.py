"""The DuckDB risk database: schema, atomic replacement, read access."""

from __future__ import annotations

import os
import shutil
import time
from contextlib import contextmanager
from pathlib import Path
from typing import Iterator, Mapping, Sequence

import duckdb
import pyarrow as pa

from .errors import TailtraceError

__all__ = ["TABLE_KEYS", "DDL", "write_database", "open_read_only", "DatabaseBusy"]

DDL = {
    "risk_figures": """
        CREATE TABLE IF NOT EXISTS risk_figures (
            as_of DATE NOT NULL, portfolio VARCHAR NOT NULL, method VARCHAR NOT NULL,
            confidence DOUBLE NOT NULL, horizon_days INTEGER NOT NULL,
            var DOUBLE, es DOUBLE, currency VARCHAR, scaling VARCHAR, n_obs INTEGER, run_id VARCHAR,
            var_se DOUBLE, es_se DOUBLE, var_lo DOUBLE, var_hi DOUBLE, diagnostics VARCHAR,
            PRIMARY KEY (as_of, portfolio, method, confidence, horizon_days))""",
    "data_quality": """
        CREATE TABLE IF NOT EXISTS data_quality (
            file VARCHAR, instrument VARCHAR, "check" VARCHAR, first_date DATE, last_date DATE,
            n BIGINT, detail VARCHAR, severity VARCHAR, run_id VARCHAR)""",
    "provenance": """
        CREATE TABLE IF NOT EXISTS provenance (
            run_id VARCHAR NOT NULL, recorded_at VARCHAR NOT NULL, rule VARCHAR NOT NULL, job VARCHAR,
            role VARCHAR NOT NULL, name VARCHAR, path VARCHAR, sha256 VARCHAR, params VARCHAR, notes VARCHAR,
            started_at VARCHAR, finished_at VARCHAR, packages VARCHAR)""",
    "runs": """
        CREATE TABLE IF NOT EXISTS runs (
            run_id VARCHAR NOT NULL, recorded_at VARCHAR NOT NULL, as_of_dates VARCHAR, config VARCHAR,
            git_commit VARCHAR, git_dirty BOOLEAN, packages VARCHAR, workdir VARCHAR)""",
}

# How a table's rows are replaced by a rerun: rows whose as_of is in the new data
# go (history of other dates stays); None = the table is a snapshot, replaced whole;
# "append" = history kept (provenance, runs).
TABLE_KEYS: dict[str, str | None] = {
    "risk_figures": "as_of",
    "data_quality": None,
    "provenance": "append",
    "runs": "append",
}


class DatabaseBusy(TailtraceError):
    """The database is held by another process."""


def _check_unique(table: pa.Table, keys: Sequence[str], name: str) -> None:
    con = duckdb.connect()
    con.register("t", table)
    cols = ", ".join(f'"{k}"' for k in keys)
    dup = con.execute(f"SELECT {cols}, count(*) FROM t GROUP BY ALL HAVING count(*) > 1 LIMIT 1").fetchone()
    con.close()
    if dup:
        raise TailtraceError(f"{name}: duplicate key {dup[:-1]} in the new rows; refusing to write")


def write_database(
    db_path: str | Path,
    tables: Mapping[str, pa.Table],
    *,
    keys: Mapping[str, Sequence[str]] | None = None,
    modes: Mapping[str, str | None] | None = None,
) -> None:
    """Merge new rows into the database, atomically.

    The current file is copied to a temporary file beside it, the new rows are
    written there in one transaction, the copy is checkpointed and closed and
    then renamed over the original: readers see the old or the new database,
    never a mix, and a crash leaves the old one in place.

    Parameters
    ----------
    db_path : the database file
    tables : table name → rows to write (Arrow tables)
    keys : table name → unique key columns, checked before writing
    modes : table name → "as_of" (replace rows of the dates present), None
        (replace the whole table) or "append"; defaults from TABLE_KEYS,
        tables not listed there are replaced by as_of.
    """
    db_path = Path(db_path)
    modes = {**TABLE_KEYS, **(modes or {})}
    for name, table in tables.items():
        if not name.replace("_", "").isalnum():
            raise TailtraceError(f"invalid table name {name!r}")
        if keys and name in keys:
            _check_unique(table, keys[name], name)
    tmp = db_path.with_name(f".{db_path.name}.{os.getpid()}.tmp")
    for stale in (tmp, Path(f"{tmp}.wal")):
        stale.unlink(missing_ok=True)
    if db_path.exists():
        if Path(f"{db_path}.wal").exists():
            raise DatabaseBusy(f"{db_path}.wal exists: another process has the database open or it was not closed cleanly")
        shutil.copy2(db_path, tmp)
    con = duckdb.connect(str(tmp))
    try:
        con.execute("BEGIN TRANSACTION")
        for name, table in tables.items():
            con.register("incoming", table)
            if name in DDL:
                con.execute(DDL[name])
            else:
                con.execute(f'CREATE TABLE IF NOT EXISTS "{name}" AS SELECT * FROM incoming LIMIT 0')
            mode = modes.get(name, "as_of")
            if mode is None:
                con.execute(f'DELETE FROM "{name}"')
            elif mode != "append":
                con.execute(f'DELETE FROM "{name}" WHERE "{mode}" IN (SELECT DISTINCT "{mode}" FROM incoming)')
            con.execute(f'INSERT INTO "{name}" BY NAME SELECT * FROM incoming')
            con.unregister("incoming")
        con.execute("COMMIT")
        con.execute("CHECKPOINT")
    except BaseException:
        con.close()
        tmp.unlink(missing_ok=True)
        raise
    con.close()
    if Path(f"{tmp}.wal").exists():
        raise TailtraceError(f"{tmp}.wal remained after checkpoint; not replacing {db_path}")
    fd = os.open(tmp, os.O_RDONLY)
    os.fsync(fd)
    os.close(fd)
    os.replace(tmp, db_path)


@contextmanager
def open_read_only(db_path: str | Path, *, attempts: int = 10, wait: float = 0.5) -> Iterator[duckdb.DuckDBPyConnection]:
    """Open the database read-only, retrying briefly while a writer holds it."""
    db_path = Path(db_path)
    if not db_path.exists():
        raise TailtraceError(f"{db_path}: no risk database yet; run the pipeline first")
    last: Exception | None = None
    for _ in range(attempts):
        try:
            con = duckdb.connect(str(db_path), read_only=True)
            break
        except duckdb.IOException as exc:  # lock held by a writer
            last = exc
            time.sleep(wait)
    else:
        raise DatabaseBusy(f"{db_path} is locked by another process: {last}")
    try:
        yield con
    finally:
        con.close()
