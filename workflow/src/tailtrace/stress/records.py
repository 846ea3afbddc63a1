"""Rows of the DuckDB table ``stress_results``."""

from __future__ import annotations

import json
from dataclasses import astuple, dataclass
from typing import Any, Iterable, Mapping

import numpy as np

__all__ = [
    "StressRecord",
    "STRESS_RESULTS_COLUMNS",
    "STRESS_RESULTS_KEY",
    "STRESS_KINDS",
    "KIND_WORST_1D",
    "KIND_WORST_HD",
    "KIND_WINDOW",
    "KIND_HYPOTHETICAL",
    "KIND_REVERSE",
    "make_detail",
    "records_to_frame",
    "check_unique",
]

KIND_WORST_1D = "historical_worst_1d"
KIND_WORST_HD = "historical_worst_hd"
KIND_WINDOW = "window"
KIND_HYPOTHETICAL = "hypothetical"
KIND_REVERSE = "reverse"
STRESS_KINDS = (KIND_WORST_1D, KIND_WORST_HD, KIND_WINDOW, KIND_HYPOTHETICAL, KIND_REVERSE)

# column -> DuckDB type; the lead's aggregate adds run_id
STRESS_RESULTS_COLUMNS: dict[str, str] = {
    "as_of": "DATE",
    "portfolio": "VARCHAR",
    "scenario": "VARCHAR",
    "kind": "VARCHAR",
    "horizon_days": "INTEGER",
    "start_date": "DATE",
    "end_date": "DATE",
    "pnl": "DOUBLE",
    "detail": "VARCHAR",
}
STRESS_RESULTS_KEY = ("as_of", "portfolio", "kind", "scenario", "horizon_days")


@dataclass(frozen=True)
class StressRecord:
    """One row of ``stress_results``.

    Attributes
    ----------
    as_of : numpy.datetime64
    portfolio, scenario, kind : str
        ``kind`` is one of :data:`STRESS_KINDS`.
    horizon_days : int
        Days over which the shock acts (0 = instantaneous).
    start_date, end_date : numpy.datetime64 or None
        First and last trading day whose returns enter (historical kinds);
        None for hypothetical and reverse scenarios.
    pnl : float
        Base-currency P&L of today's book, negative = loss.
    detail : str
        JSON object with kind-specific facts (sorted keys).
    """

    as_of: np.datetime64
    portfolio: str
    scenario: str
    kind: str
    horizon_days: int
    start_date: np.datetime64 | None
    end_date: np.datetime64 | None
    pnl: float
    detail: str

    def __post_init__(self) -> None:
        if self.kind not in STRESS_KINDS:
            raise ValueError(f"unknown stress kind {self.kind!r}")


def _plain(value: Any) -> Any:
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, np.datetime64) or hasattr(value, "isoformat"):
        return str(value)
    if isinstance(value, Mapping):
        return {str(k): _plain(v) for k, v in value.items()}
    if isinstance(value, (list, tuple, np.ndarray)):
        return [_plain(v) for v in value]
    return value


def make_detail(**facts: Any) -> str:
    """JSON text of ``facts`` with sorted keys; NaN and infinity are refused."""
    return json.dumps(_plain(facts), sort_keys=True, allow_nan=False)


def check_unique(records: Iterable[StressRecord]) -> None:
    """Raise ValueError when two records share the table key (DuckDB would keep one silently)."""
    seen: set[tuple] = set()
    for rec in records:
        key = tuple(str(getattr(rec, k)) for k in STRESS_RESULTS_KEY)
        if key in seen:
            raise ValueError(f"duplicate stress_results key {dict(zip(STRESS_RESULTS_KEY, key))}")
        seen.add(key)


def records_to_frame(records: Iterable[StressRecord]):
    """A pandas DataFrame with the columns of :data:`STRESS_RESULTS_COLUMNS`.

    Dates become ``datetime64[s]`` (NaT where absent), ``horizon_days``
    int32, ``pnl`` float64; rows keep the order given.
    """
    import pandas as pd  # only the writer needs pandas

    records = list(records)
    check_unique(records)
    rows = [astuple(r) for r in records]
    frame = pd.DataFrame(rows, columns=list(STRESS_RESULTS_COLUMNS))
    for col in ("as_of", "start_date", "end_date"):
        frame[col] = pd.to_datetime(frame[col].map(lambda d: None if d is None else str(d))).astype("datetime64[s]")
    frame["horizon_days"] = frame["horizon_days"].astype("int32")
    frame["pnl"] = frame["pnl"].astype("float64")
    return frame
