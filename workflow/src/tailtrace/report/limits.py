"""Risk limits: read ``limits.csv`` and measure the day's figures against it."""

from __future__ import annotations

import csv
import math
import warnings
from pathlib import Path

import numpy as np
import pandas as pd

from tailtrace.errors import DataQualityWarning, InputError

__all__ = [
    "LIMIT_COLUMNS",
    "STATUS_BREACH",
    "STATUS_NEAR",
    "STATUS_OK",
    "STATUS_MISSING",
    "read_limits",
    "limit_utilisation",
]

LIMIT_COLUMNS = ("portfolio", "metric", "confidence", "horizon_days", "limit")
OPTIONAL_LIMIT_COLUMNS = ("method",)
METRICS = ("var", "es")
STATUS_BREACH = "breach"
STATUS_NEAR = "near"
STATUS_OK = "ok"
STATUS_MISSING = "no figure"
_STATUS_ORDER = {STATUS_BREACH: 0, STATUS_MISSING: 1, STATUS_NEAR: 2, STATUS_OK: 3}
_KEY = ["portfolio", "metric", "method", "confidence_key", "horizon_days"]


def _number(text: str, *, file: str, row: int, column: str) -> float:
    try:
        value = float(text)
    except ValueError:
        raise InputError("not a number", file=file, row=row, column=column, value=text) from None
    if not math.isfinite(value):
        raise InputError("must be a finite number", file=file, row=row, column=column, value=text)
    return value


def _parse_row(raw: dict[str, str], default_method: str, *, file: str, row: int) -> dict[str, object]:
    cells = {k: (raw.get(k) or "").strip() for k in (*LIMIT_COLUMNS, *OPTIONAL_LIMIT_COLUMNS)}
    if not cells["portfolio"]:
        raise InputError("portfolio is empty", file=file, row=row, column="portfolio")
    metric = cells["metric"].lower()
    if metric not in METRICS:
        raise InputError("metric must be 'var' or 'es'", file=file, row=row, column="metric", value=cells["metric"])
    confidence = _number(cells["confidence"], file=file, row=row, column="confidence")
    if not 0.0 < confidence < 1.0:
        raise InputError("confidence must lie strictly between 0 and 1", file=file, row=row, column="confidence",
                         value=cells["confidence"])
    horizon = _number(cells["horizon_days"], file=file, row=row, column="horizon_days")
    if horizon < 1 or horizon != int(horizon):
        raise InputError("horizon_days must be a positive whole number of days", file=file, row=row,
                         column="horizon_days", value=cells["horizon_days"])
    limit = _number(cells["limit"], file=file, row=row, column="limit")
    if limit <= 0:
        raise InputError("limit must be a positive amount in base currency", file=file, row=row, column="limit",
                         value=cells["limit"])
    return {
        "portfolio": cells["portfolio"],
        "metric": metric,
        "confidence": confidence,
        "horizon_days": int(horizon),
        "limit": limit,
        "method": cells["method"] or default_method,
        "line": row,
    }


def read_limits(path: str | Path, *, default_method: str) -> pd.DataFrame:
    """Read and validate a limits file.

    Parameters
    ----------
    path : str or Path
        CSV with columns ``portfolio, metric, confidence, horizon_days,
        limit`` and optionally ``method``; ``metric`` is ``var`` or ``es``,
        ``limit`` a positive amount in base currency.
    default_method : str
        Method of rows whose ``method`` is absent or empty.

    Returns
    -------
    pandas.DataFrame
        One row per limit: the columns above plus ``line`` (the 1-based line
        of the row in the file, the header being line 1).

    Raises
    ------
    InputError
        Naming file, line and column of the first bad cell, a missing
        column, or a limit defined twice.
    """
    file = str(path)
    if not Path(file).is_file():
        raise InputError("limits file not found", file=file)
    rows: list[dict[str, object]] = []
    with open(file, newline="", encoding="utf-8-sig") as handle:
        reader = csv.DictReader(handle)
        header = [h.strip() for h in (reader.fieldnames or [])]
        reader.fieldnames = header
        for name in LIMIT_COLUMNS:
            if name not in header:
                raise InputError("missing column", file=file, row=1, column=name)
        extra = sorted(set(header) - set(LIMIT_COLUMNS) - set(OPTIONAL_LIMIT_COLUMNS) - {""})
        if extra:
            warnings.warn(f"{file}: ignoring unknown columns {extra}", DataQualityWarning, stacklevel=2)
        seen: dict[tuple[object, ...], int] = {}
        for raw in reader:
            line = reader.line_num
            if None in raw:
                raise InputError("more cells than header columns", file=file, row=line)
            if not any((v or "").strip() for v in raw.values()):
                continue
            parsed = _parse_row(raw, default_method, file=file, row=line)
            key = (parsed["portfolio"], parsed["metric"], parsed["method"], round(float(parsed["confidence"]), 10),
                   parsed["horizon_days"])
            if key in seen:
                raise InputError(f"limit defined twice (first on line {seen[key]})", file=file, row=line,
                                 column="portfolio", value=parsed["portfolio"])
            seen[key] = line
            rows.append(parsed)
    columns = [*LIMIT_COLUMNS, "method", "line"]
    frame = pd.DataFrame(rows, columns=columns)
    return frame.astype({"confidence": float, "horizon_days": int, "limit": float, "line": int})


def limit_utilisation(limits: pd.DataFrame, figures: pd.DataFrame | None, *, near_limit: float) -> pd.DataFrame:
    """Measure each limit against the day's figure.

    Parameters
    ----------
    limits : pandas.DataFrame
        As returned by :func:`read_limits`.
    figures : pandas.DataFrame or None
        ``risk_figures`` rows of the as_of.
    near_limit : float
        Utilisation from which a limit within bounds is reported as near.

    Returns
    -------
    pandas.DataFrame
        The limits with ``figure``, ``utilisation``, ``headroom`` and
        ``status`` (breach, no figure, near, ok), breaches first, each group
        by utilisation, highest first.

    Notes
    -----
    utilisation = figure / limit, headroom = limit - figure. A limit is
    breached when the figure exceeds it (utilisation > 1); a limit with no
    matching figure cannot be checked and is listed right after breaches.
    """
    out = limits.copy()
    out["confidence_key"] = out["confidence"].round(10)
    if figures is None or figures.empty:
        out["figure"] = np.nan
    else:
        long = figures.melt(
            id_vars=["portfolio", "method", "confidence", "horizon_days"], value_vars=["var", "es"],
            var_name="metric", value_name="figure",
        )
        long["confidence_key"] = long["confidence"].astype(float).round(10)
        long["horizon_days"] = long["horizon_days"].astype(int)
        long = long.drop(columns="confidence")
        out = out.merge(long, on=_KEY, how="left", validate="one_to_one")
    figure = out["figure"].astype(float).to_numpy()
    limit = out["limit"].to_numpy(dtype=float)
    out["figure"] = figure
    out["utilisation"] = figure / limit
    out["headroom"] = limit - figure
    util = out["utilisation"].to_numpy()
    known = np.isfinite(util)
    status = np.full(len(out), STATUS_MISSING, dtype=object)
    status[known & (util > 1.0)] = STATUS_BREACH
    status[known & (util <= 1.0) & (util >= near_limit)] = STATUS_NEAR
    status[known & (util < near_limit)] = STATUS_OK
    out["status"] = status
    out["_order"] = out["status"].map(_STATUS_ORDER)
    out = out.sort_values(["_order", "utilisation", "portfolio", "metric", "confidence", "horizon_days"],
                          ascending=[True, False, True, True, True, True], na_position="last", kind="mergesort")
    return out.drop(columns=["_order", "confidence_key"]).reset_index(drop=True)
