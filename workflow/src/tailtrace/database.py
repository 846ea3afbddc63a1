"""The DuckDB risk database: schema, atomic replacement, read access."""

from __future__ import annotations

import logging
import os
import re
import shutil
import time
from contextlib import contextmanager
from pathlib import Path
from typing import Iterator, Mapping, Sequence

import duckdb
import pyarrow as pa

from .errors import TailtraceError

__all__ = ["TABLE_KEYS", "DDL", "PAUSE_ENV", "write_database", "open_read_only", "DatabaseBusy"]

log = logging.getLogger("tailtrace")

# Test hook (tests/integration/test_crash_safety.py): seconds to wait between
# writing the temporary database and renaming it, so a test can kill the run
# at the worst moment. Unset in normal use.
PAUSE_ENV = "TAILTRACE_TEST_PAUSE_AGGREGATE"
# Identifiers are interpolated into SQL (DuckDB cannot bind them): only these pass.
_IDENTIFIER = re.compile(r"[a-z][a-z0-9_]*\Z")

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


def _identifier(name: str, what: str) -> str:
    if not isinstance(name, str) or not _IDENTIFIER.match(name):
        raise TailtraceError(f"invalid {what} {name!r}: use lower-case letters, digits and '_'")
    return name


def _check_unique(table: pa.Table, keys: Sequence[str], name: str) -> None:
    for k in keys:
        _identifier(k, "key column")
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
        _identifier(name, "table name")
        mode = modes.get(name, "as_of")
        if mode not in (None, "append"):
            _identifier(mode, "replacement column")
        if keys and name in keys:
            _check_unique(table, keys[name], name)
    _remove_stale_temps(db_path)
    tmp = _temp_path(db_path, os.getpid())
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
        Path(f"{tmp}.wal").unlink(missing_ok=True)
        raise
    con.close()
    if Path(f"{tmp}.wal").exists():
        raise TailtraceError(f"{tmp}.wal remained after checkpoint; not replacing {db_path}")
    _fsync(tmp)
    pause = os.environ.get(PAUSE_ENV)
    if pause:
        log.warning("test hook %s: %s written, pausing %s s before replacing %s", PAUSE_ENV, tmp, pause, db_path)
        time.sleep(float(pause))
    os.replace(tmp, db_path)
    _fsync(db_path.parent)  # make the rename itself durable


def _temp_path(db_path: Path, pid: int) -> Path:
    return db_path.with_name(f".{db_path.name}.{pid}.tmp")


def _fsync(path: Path) -> None:
    fd = os.open(path, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def _pid_alive(pid: int) -> bool:
    """True while ``pid`` runs; a zombie (killed, not yet reaped) counts as gone."""
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    try:
        stat = Path(f"/proc/{pid}/stat").read_text()
    except OSError:
        return True
    return stat[stat.rindex(")") + 2 :].split()[0] != "Z"


def _remove_stale_temps(db_path: Path) -> None:
    """Delete temporary databases left by writers that were killed.

    Their pid is in the name; one whose process is gone is garbage (the real
    file was never replaced by it).
    """
    for old in db_path.parent.glob(f".{db_path.name}.*.tmp"):
        pid = old.name[len(db_path.name) + 2 : -len(".tmp")]
        if pid.isdigit() and not _pid_alive(int(pid)):
            log.info("removing %s left by a killed writer (pid %s)", old, pid)
            old.unlink(missing_ok=True)
            Path(f"{old}.wal").unlink(missing_ok=True)


@contextmanager
def open_read_only(db_path: str | Path, *, attempts: int = 10, wait: float = 0.5) -> Iterator[duckdb.DuckDBPyConnection]:
    """Open the database read-only, retrying briefly while a writer holds it.

    Parameters
    ----------
    db_path : the database file
    attempts, wait : tries and seconds between them before giving up

    Raises
    ------
    DatabaseBusy
        Another process still holds the file read-write after every attempt.

    Notes
    -----
    The pipeline's own writer works on a temporary copy and renames it into
    place, so it never blocks readers; only a process that opened
    ``risk.duckdb`` itself read-write does.
    """
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
        raise DatabaseBusy(f"{db_path} is held read-write by another process; gave up after {attempts} attempts "
                           f"over {attempts * wait:.1f} s. Close that process and retry. ({last})")
    try:
        yield con
    finally:
        con.close()
