"""What each as_of of a run used: input files, positions rows, price rows.

Written by the aggregate next to the figures, so that a figure can be traced,
verified and explained from the database (and the archive) alone, after the
Parquet caches have been rebuilt by later runs.
"""

from __future__ import annotations

import json
import logging
from pathlib import Path
from typing import Any, Mapping, Sequence

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq

from .archive import archive_file
from .errors import TailtraceError
from .hashing import sha256_file
from .market import MarketData
from .recorded import FileEntry, StepRecord, raw_inputs
from .reference import fx_instrument

log = logging.getLogger("tailtrace")

__all__ = [
    "LINEAGE_MODES",
    "SPINE_STEPS",
    "INPUT_FILES_SCHEMA",
    "WINDOW_INPUTS_SCHEMA",
    "input_kind",
    "lineage_tables",
    "window_usage",
]

# Rows are replaced per run: a rerun of the same run_id does not duplicate them,
# and the history of earlier runs stays (trace and explain of older runs need it).
LINEAGE_MODES: dict[str, str] = {"input_files": "run_id", "positions_used": "run_id", "window_inputs": "run_id"}

INPUT_FILES_SCHEMA = pa.schema([
    ("run_id", pa.string()), ("kind", pa.string()), ("rule", pa.string()), ("job", pa.string()),
    ("path", pa.string()), ("sha256", pa.string()), ("bytes", pa.int64()), ("rows", pa.int64()),
    ("instruments", pa.string()), ("first_date", pa.date32()), ("last_date", pa.date32()),
    ("archive", pa.string()), ("archive_note", pa.string()),
])

WINDOW_INPUTS_SCHEMA = pa.schema([
    ("run_id", pa.string()), ("as_of", pa.date32()), ("instrument", pa.string()), ("series", pa.string()),
    ("file", pa.string()), ("first_date", pa.date32()), ("last_date", pa.date32()), ("n_rows", pa.int64()),
    ("n_filled", pa.int64()), ("window_first", pa.date32()), ("window_last", pa.date32()), ("n_obs", pa.int64()),
])

SPINE_STEPS = ("ingest_instruments", "ingest_positions", "build_returns", "build_scenarios")
_KINDS = {"ingest_instruments": "instruments", "ingest_positions": "positions", "ingest_prices": "prices"}


def input_kind(rule: str) -> str:
    """instruments / positions / prices for the ingest rules, else "other"."""
    return _KINDS.get(rule, "other")


def _one(steps: Sequence[StepRecord], rule: str) -> StepRecord:
    found = [s for s in steps if s.rule == rule]
    if len(found) != 1:
        raise TailtraceError(f"expected one step record of {rule}, found {len(found)}")
    return found[0]


def _read_checked(entry: FileEntry, columns: Sequence[str] | None = None) -> pa.Table:
    """Read a Parquet output, refusing one that changed since its step wrote it."""
    found = sha256_file(entry.path)
    if found != entry.sha256:
        raise TailtraceError(f"{entry.path} changed after its step wrote it (sha256 {found}, recorded "
                             f"{entry.sha256}); rerun the pipeline")
    return pq.read_table(entry.path, columns=columns)


def window_usage(market: MarketData, as_of_dates: np.ndarray, window_days: int,
                 series: np.ndarray) -> dict[str, np.ndarray]:
    """Price rows of each series that the window of each as_of reads.

    Parameters
    ----------
    market : needs ``dates`` and ``observed``
    as_of_dates : (K,) datetime64[D], one per requested pair
    window_days : returns in the window
    series : (K,) column index of the series in ``market``

    Returns
    -------
    dict of (K,) arrays: first_date, last_date (first and last price rows
    read), n_rows (observed closes between them), n_filled (calendar dates
    of the window's price range that were carried forward), window_first,
    window_last.

    Notes
    -----
    A window of T returns ending at row e reads the prices of rows e−T … e
    (one more than returns). A missing close was carried forward from the
    last observed row, so the first price row actually read is the last
    observed row at or before e−T.
    """
    observed = market.observed
    rows = np.arange(len(market.dates))[:, None]
    last_obs = np.maximum.accumulate(np.where(observed, rows, -1), axis=0)
    counts = np.vstack([np.zeros((1, observed.shape[1]), dtype=np.int64), np.cumsum(observed, axis=0)])
    end = np.searchsorted(market.dates, as_of_dates, side="right") - 1  # as_of's row (same rule as the estimate)
    start = end - window_days + 1  # first return row; its price row is start − 1
    if (start < 1).any():
        raise TailtraceError(f"window_days={window_days} is longer than the history before {as_of_dates[start < 1][0]}")
    first = last_obs[start - 1, series]
    last = last_obs[end, series]
    if (first < 0).any():
        raise TailtraceError("a window reads a series before its first observed price")
    n_rows = counts[last + 1, series] - counts[first, series]
    in_range = counts[end + 1, series] - counts[start - 1, series]
    return {
        "first_date": market.dates[first], "last_date": market.dates[last], "n_rows": n_rows,
        "n_filled": (end - start + 2) - in_range, "window_first": market.dates[start], "window_last": market.dates[end],
    }


def _window_table(steps: Sequence[StepRecord], rid: str, exposures: pa.Table, file_of: Mapping[str, str]) -> pa.Table:
    returns_step, scen_step = _one(steps, "build_returns"), _one(steps, "build_scenarios")
    observed = _read_checked(returns_step.output("observed"))
    instruments = _read_checked(_one(steps, "ingest_instruments").output("instruments"))
    base_ccy = str(returns_step.params["base_currency"])
    window = int(scen_step.params["window_days"])
    names = observed.column_names[1:]
    market = MarketData(dates=observed.column("date").to_numpy().astype("datetime64[D]"), instruments=tuple(names),
                        local=None, base=None,
                        observed=np.column_stack([observed.column(c).to_numpy() for c in names]).astype(bool),
                        log_returns=None)
    ccy = dict(zip(instruments.column("instrument").to_pylist(), instruments.column("currency").to_pylist()))
    pairs = exposures.group_by(["as_of", "instrument"]).aggregate([]).sort_by([("as_of", "ascending"),
                                                                           ("instrument", "ascending")])
    day = pairs.column("as_of").to_numpy().astype("datetime64[D]")
    names_u, inv = np.unique(np.asarray(pairs.column("instrument").to_pylist(), dtype=object), return_inverse=True)
    # each held instrument reads its own series (an option: its underlying's) and, if quoted in
    # another currency, its FX series
    under = {}
    if "underlying" in instruments.column_names:
        under = {i: u for i, u in zip(instruments.column("instrument").to_pylist(),
                                      instruments.column("underlying").to_pylist()) if u}
    own_u = np.array([under.get(i, i) for i in names_u], dtype=object)
    fx_u = np.array([fx_instrument(ccy[i]) if ccy[i] != base_ccy else "" for i in names_u], dtype=object)
    column = {n: j for j, n in enumerate(market.instruments)}
    has_fx = fx_u[inv] != ""
    k_day = np.concatenate([day, day[has_fx]])
    k_inst = np.concatenate([names_u[inv], names_u[inv][has_fx]])
    k_series = np.concatenate([own_u[inv], fx_u[inv][has_fx]])
    series_u, series_inv = np.unique(k_series, return_inverse=True)
    col = np.array([column[x] for x in series_u], dtype=np.int64)[series_inv]
    used = window_usage(market, k_day, window, col)
    files = np.array([file_of[x] for x in series_u], dtype=object)[series_inv]
    return pa.table({
        "run_id": pa.array([rid] * len(k_day), pa.string()), "as_of": pa.array(k_day, pa.date32()),
        "instrument": pa.array(k_inst.tolist(), pa.string()), "series": pa.array(k_series.tolist(), pa.string()),
        "file": pa.array(files.tolist(), pa.string()),
        **{k: pa.array(used[k], pa.date32()) for k in ("first_date", "last_date")},
        "n_rows": pa.array(used["n_rows"], pa.int64()), "n_filled": pa.array(used["n_filled"], pa.int64()),
        **{k: pa.array(used[k], pa.date32()) for k in ("window_first", "window_last")},
        "n_obs": pa.array(np.full(len(k_day), window), pa.int64()),
    }, schema=WINDOW_INPUTS_SCHEMA).sort_by([("as_of", "ascending"), ("instrument", "ascending"),
                                            ("series", "ascending")])


def _file_info(kind: str, prices: pa.Table | None, n_rows: int | None) -> dict[str, Any]:
    if kind != "prices" or prices is None:
        return {"rows": n_rows, "instruments": None, "first_date": None, "last_date": None}
    dates = prices.column("date")
    return {"rows": prices.num_rows, "instruments": json.dumps(sorted(pc.unique(prices.column("instrument")).to_pylist())),
            "first_date": pc.min(dates).as_py(), "last_date": pc.max(dates).as_py()}


def lineage_tables(records: Sequence[Mapping[str, Any]], rid: str, *, archive_dir: str | Path) -> dict[str, pa.Table]:
    """Archive a run's raw inputs and figure files and describe what each as_of used.

    Parameters
    ----------
    records : the run's step records (as written by :func:`tailtrace.provenance.step`)
    rid : the run id
    archive_dir : content-addressed store (``<results>/archive``)

    Returns
    -------
    dict with the tables ``input_files`` (every raw input and figure file:
    hash, size, rows, instruments and date range of price files, where it is
    archived), ``positions_used`` (the exposures of every as_of: file, row,
    instrument, quantity, base price and value) and ``window_inputs`` (per
    as_of and held instrument: the price file and the first/last price rows
    the estimation window reads, for the instrument and its FX series).
    """
    steps = [StepRecord.from_dict(r) for r in records]
    price_rows: dict[str, pa.Table] = {}
    file_of: dict[str, str] = {}
    for s in steps:
        if s.rule == "ingest_prices":
            raw = s.inputs_named("prices")[0]
            table = _read_checked(s.output("prices"), ["date", "instrument"])
            price_rows[raw.path] = table
            file_of.update({i: raw.path for i in pc.unique(table.column("instrument")).to_pylist()})
    missing = sorted(set(SPINE_STEPS) - {s.rule for s in steps})
    if missing:  # e.g. an aggregate fed hand-made records; the figures are still written
        log.warning("no step record of %s: positions_used and window_inputs not written", ", ".join(missing))
        count = {}
    else:
        exposures = _read_checked(_one(steps, "build_scenarios").output("exposures"))
        sources = _read_checked(_one(steps, "ingest_positions").output("positions"), ["source"]).column("source")
        n_instruments = _read_checked(_one(steps, "ingest_instruments").output("instruments"), ["instrument"]).num_rows
        count = {"instruments": lambda path: n_instruments, "positions": sources.to_pylist().count}

    files = [(s, e, input_kind(s.rule)) for s, e in raw_inputs(steps)]
    files += [(s, s.output("figures"), "figures") for s in steps if s.rule.startswith("estimate_")]
    rows = []
    for s, e, kind in sorted(files, key=lambda x: (x[2], x[1].path)):
        archived, note = archive_file(e.path, e.sha256, archive_dir)
        rows.append({"run_id": rid, "kind": kind, "rule": s.rule, "job": json.dumps(dict(s.job), sort_keys=True),
                     "path": e.path, "sha256": e.sha256, "bytes": archived.stat().st_size if archived else None,
                     **_file_info(kind, price_rows.get(e.path), count[kind](e.path) if kind in count else None),
                     "archive": str(archived) if archived else None, "archive_note": note})
    tables = {"input_files": pa.Table.from_pylist(rows, schema=INPUT_FILES_SCHEMA)}
    if not missing:
        tables["positions_used"] = exposures.append_column("run_id", pa.array([rid] * exposures.num_rows, pa.string()))
        tables["window_inputs"] = _window_table(steps, rid, exposures, file_of)
    return tables
