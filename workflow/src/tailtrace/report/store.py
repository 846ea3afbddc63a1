"""Read the tables the report needs from the results database, read-only."""

from __future__ import annotations

import datetime as dt
import time
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path
from typing import Iterator, Sequence

import duckdb
import numpy as np
import pandas as pd

from tailtrace.errors import InputError

__all__ = [
    "REPORT_TABLES",
    "ReportData",
    "as_date",
    "open_read_only",
    "load_report_data",
    "load_scenario_pnl",
]

# Required and optional columns of each table the report reads. Table names
# are identifiers (they cannot be query parameters), so only these are used.
REPORT_TABLES: dict[str, tuple[tuple[str, ...], tuple[str, ...]]] = {
    "risk_figures": (
        ("as_of", "portfolio", "method", "confidence", "horizon_days", "var", "es"),
        ("currency", "scaling", "n_obs", "run_id", "var_se", "es_se", "var_lo", "var_hi", "diagnostics"),
    ),
    "data_quality": (
        ("file", "instrument", "check", "severity"),
        ("first_date", "last_date", "n", "detail"),
    ),
    "backtest_summary": (
        ("as_of", "portfolio", "method", "confidence", "exceptions"),
        (
            "n", "first_date", "last_date", "expected_exceptions", "exception_dates", "kupiec_lr", "kupiec_p",
            "independence_lr", "independence_p", "cc_lr", "cc_p", "zone", "plus_factor", "es_z2", "es_zone",
        ),
    ),
    "backtest_forecasts": (
        ("as_of", "date", "portfolio", "method", "confidence", "var", "pnl", "exception"),
        ("es",),
    ),
    "risk_contributions": (
        ("as_of", "portfolio", "method", "confidence", "horizon_days", "instrument", "component_var"),
        ("position_value", "marginal_var", "incremental_var", "standalone_var", "diversification_benefit"),
    ),
    "provenance": (
        ("run_id",),
        ("recorded_at", "rule", "path", "role", "sha256", "code_version", "git_commit", "git_dirty",
         "tailtrace_version"),
    ),
}
PNL_COLUMNS = ("as_of", "portfolio", "date", "pnl")


@dataclass(frozen=True)
class ReportData:
    """The rows of one as_of, one frame per table.

    A table absent from the database is ``None``; a table present without
    rows for the as_of is an empty frame. Optional columns absent from a
    table are added as nulls so later code need not test for them.
    """

    as_of: dt.date
    db_path: str
    risk_figures: pd.DataFrame | None
    data_quality: pd.DataFrame | None
    backtest_summary: pd.DataFrame | None
    backtest_forecasts: pd.DataFrame | None
    risk_contributions: pd.DataFrame | None
    provenance: pd.DataFrame | None


def as_date(value: object) -> dt.date:
    """Return ``value`` (ISO string, date, datetime or datetime64) as a date.

    Parameters
    ----------
    value : str, datetime.date, datetime.datetime or numpy.datetime64

    Returns
    -------
    datetime.date
    """
    if isinstance(value, dt.datetime):
        return value.date()
    if isinstance(value, dt.date):
        return value
    if isinstance(value, np.datetime64):
        return dt.date.fromisoformat(str(value.astype("datetime64[D]")))
    try:
        return dt.date.fromisoformat(str(value).strip())
    except ValueError as exc:
        raise ValueError(f"as_of must be an ISO date (YYYY-MM-DD), got {value!r}") from exc


def _is_lock_error(exc: BaseException) -> bool:
    text = str(exc).lower()
    return "lock" in text or "conflicting" in text or "different configuration" in text


@contextmanager
def open_read_only(
    db_path: str | Path, *, attempts: int = 10, pause: float = 0.5
) -> Iterator[duckdb.DuckDBPyConnection]:
    """Open the DuckDB file read-only, retrying while a writer holds it.

    Parameters
    ----------
    db_path : str or Path
    attempts : int
        How many times to try before giving up.
    pause : float
        Seconds between attempts.

    Yields
    ------
    duckdb.DuckDBPyConnection

    Notes
    -----
    DuckDB allows one read-write process or many read-only ones, never both;
    the pipeline replaces the file atomically, so a held lock is brief.
    """
    path = Path(db_path)
    if not path.is_file():
        raise InputError("results database not found", file=str(path))
    last: BaseException | None = None
    for attempt in range(attempts):
        try:
            con = duckdb.connect(str(path), read_only=True)
            break
        except duckdb.Error as exc:
            if not _is_lock_error(exc):
                raise InputError(f"cannot open the results database: {exc}", file=str(path)) from exc
            last = exc
            if attempt + 1 < attempts:
                time.sleep(pause)
    else:
        raise InputError(
            f"results database is locked by another process (is a pipeline run writing it?); "
            f"gave up after {attempts} attempts {pause:g} s apart: {last}",
            file=str(path),
        ) from last
    try:
        yield con
    finally:
        con.close()


def _table_columns(con: duckdb.DuckDBPyConnection) -> dict[str, set[str]]:
    rows = con.execute(
        "SELECT table_name, column_name FROM information_schema.columns WHERE table_schema = current_schema()"
    ).fetchall()
    found: dict[str, set[str]] = {}
    for table, column in rows:
        found.setdefault(str(table).lower(), set()).add(str(column).lower())
    return found


def _read_table(
    con: duckdb.DuckDBPyConnection, table: str, columns: set[str], as_of: dt.date, run_ids: list[str] | None,
    db_path: str,
) -> pd.DataFrame:
    required, optional = REPORT_TABLES[table]
    for name in required:
        if name not in columns:
            raise InputError(f"table {table} lacks a required column", file=db_path, column=name)
    present = [c for c in (*required, *optional) if c in columns]
    select = ", ".join(f'"{c}"' for c in present)
    if "as_of" in columns:
        frame = con.execute(f'SELECT {select} FROM "{table}" WHERE as_of = ?', [as_of]).df()
    elif table == "provenance":
        frame = con.execute(
            f'SELECT {select} FROM "{table}" WHERE list_contains(?, CAST(run_id AS VARCHAR))', [run_ids or []]
        ).df()
    else:
        frame = con.execute(f'SELECT {select} FROM "{table}"').df()
    for name in optional:
        if name not in frame.columns:
            frame[name] = None
    return frame


def load_report_data(db_path: str | Path, as_of: object, *, attempts: int = 10, pause: float = 0.5) -> ReportData:
    """Read every report table's rows for ``as_of``.

    Parameters
    ----------
    db_path : str or Path
        The results DuckDB file.
    as_of : date-like
    attempts, pause
        Retry policy while the file is locked (see :func:`open_read_only`).

    Returns
    -------
    ReportData
    """
    day = as_date(as_of)
    path = str(db_path)
    frames: dict[str, pd.DataFrame | None] = {}
    with open_read_only(path, attempts=attempts, pause=pause) as con:
        columns = _table_columns(con)
        for table in REPORT_TABLES:
            if table == "provenance":
                continue
            frames[table] = _read_table(con, table, columns[table], day, None, path) if table in columns else None
        figures = frames["risk_figures"]
        run_ids = sorted({str(r) for r in figures["run_id"].dropna()}) if figures is not None else []
        frames["provenance"] = (
            _read_table(con, "provenance", columns["provenance"], day, run_ids, path)
            if "provenance" in columns else None
        )
    return ReportData(as_of=day, db_path=path, **frames)


def load_scenario_pnl(path: str | Path | Sequence[str | Path] | None, as_of: object) -> pd.DataFrame | None:
    """Read the scenario P&L of ``as_of`` (columns portfolio, date, pnl).

    Parameters
    ----------
    path : str, Path, sequence of them, or None
        Parquet file(s) with columns ``as_of, portfolio, date, pnl``;
        ``None`` when the run produced none.
    as_of : date-like

    Returns
    -------
    pandas.DataFrame or None
    """
    if path is None:
        return None
    files = [str(p) for p in path] if isinstance(path, (list, tuple)) else [str(path)]
    for file in files:
        if not Path(file).exists():
            raise InputError("scenario P&L file not found", file=file)
    day = as_date(as_of)
    with duckdb.connect() as con:
        for file in files:
            names = [r[0] for r in con.execute("DESCRIBE SELECT * FROM read_parquet(?)", [file]).fetchall()]
            for name in PNL_COLUMNS:
                if name not in names:
                    raise InputError("scenario P&L file lacks a required column", file=file, column=name)
        frame = con.execute(
            "SELECT CAST(portfolio AS VARCHAR) AS portfolio, CAST(date AS DATE) AS date, CAST(pnl AS DOUBLE) AS pnl "
            "FROM read_parquet(?, union_by_name = true) WHERE CAST(as_of AS DATE) = ? ORDER BY portfolio, date",
            [files, day],
        ).df()
    return frame
