"""Estimator results as tables: the shape every estimate file has."""

from __future__ import annotations

import json
from typing import Sequence

import numpy as np
import pyarrow as pa

from .estimators.base import RiskEstimate

__all__ = ["FIGURE_SCHEMA", "INSTRUMENT_NOTES_SCHEMA", "estimate_table", "instrument_notes_table"]

FIGURE_SCHEMA = pa.schema(
    [
        ("as_of", pa.date32()),
        ("portfolio", pa.string()),
        ("method", pa.string()),
        ("confidence", pa.float64()),
        ("horizon_days", pa.int32()),
        ("var", pa.float64()),
        ("es", pa.float64()),
        ("currency", pa.string()),
        ("scaling", pa.string()),
        ("n_obs", pa.int32()),
        ("var_se", pa.float64()),
        ("es_se", pa.float64()),
        ("var_lo", pa.float64()),
        ("var_hi", pa.float64()),
        ("diagnostics", pa.string()),
    ]
)


INSTRUMENT_NOTES_SCHEMA = pa.schema(
    [
        ("as_of", pa.date32()),
        ("method", pa.string()),
        ("instrument", pa.string()),
        ("model", pa.string()),
        ("reason", pa.string()),
        ("notes", pa.string()),
    ]
)


def _json_default(obj: object) -> object:
    if isinstance(obj, np.generic):
        return obj.item()
    if isinstance(obj, np.ndarray):
        return obj.tolist()
    return str(obj)


def estimate_table(
    result: RiskEstimate,
    *,
    as_of: np.datetime64,
    portfolios: Sequence[str],
    method: str,
    confidences: Sequence[float],
    horizons: Sequence[int],
    currency: str,
) -> pa.Table:
    """Flatten a RiskEstimate into one row per (portfolio, confidence, horizon)."""
    P, C, H = result.var.shape
    p, c, h = (a.reshape(-1) for a in np.meshgrid(np.arange(P), np.arange(C), np.arange(H), indexing="ij"))

    def column(arr: np.ndarray | None) -> pa.Array:
        if arr is None:
            return pa.nulls(P * C * H, type=pa.float64())
        return pa.array(np.asarray(arr, dtype=float).reshape(-1))

    diag = json.dumps(result.diagnostics, sort_keys=True, default=_json_default)
    n = P * C * H
    return pa.table(
        {
            "as_of": pa.array(np.full(n, np.datetime64(as_of, "D")), type=pa.date32()),
            "portfolio": pa.array([portfolios[i] for i in p], type=pa.string()),
            "method": pa.array([method] * n, type=pa.string()),
            "confidence": pa.array(np.asarray(confidences, float)[c]),
            "horizon_days": pa.array(np.asarray(horizons)[h], type=pa.int32()),
            "var": column(result.var),
            "es": column(result.es),
            "currency": pa.array([currency] * n, type=pa.string()),
            "scaling": pa.array([result.scaling[i] for i in h], type=pa.string()),
            "n_obs": pa.array(np.asarray(result.n_obs)[h], type=pa.int32()),
            "var_se": column(result.var_se),
            "es_se": column(result.es_se),
            "var_lo": column(result.var_lo),
            "var_hi": column(result.var_hi),
            "diagnostics": pa.array([diag] * n, type=pa.string()),
        },
        schema=FIGURE_SCHEMA,
    )


def instrument_notes_table(result: RiskEstimate, *, as_of: np.datetime64, method: str) -> pa.Table:
    """One row per instrument of ``result.instrument_notes`` (columns :data:`INSTRUMENT_NOTES_SCHEMA`).

    ``model`` and ``reason`` are lifted out of each instrument's notes when
    present; ``notes`` holds all of them as JSON.
    """
    notes = result.instrument_notes
    names = list(notes)
    day = np.datetime64(as_of, "D")

    def text(key: str) -> pa.Array:
        values = [notes[n].get(key) for n in names]
        return pa.array([None if v is None else str(v) for v in values], type=pa.string())

    return pa.table(
        {
            "as_of": pa.array(np.full(len(names), day), type=pa.date32()),
            "method": pa.array([method] * len(names), type=pa.string()),
            "instrument": pa.array(names, type=pa.string()),
            "model": text("model"),
            "reason": text("reason"),
            "notes": pa.array([json.dumps(notes[n], sort_keys=True, default=_json_default) for n in names],
                              type=pa.string()),
        },
        schema=INSTRUMENT_NOTES_SCHEMA,
    )
