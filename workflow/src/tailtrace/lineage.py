"""The lineage of one figure: steps, input files and rows, parameters, code."""

from __future__ import annotations

import datetime as _dt
import json
from pathlib import Path
from typing import Any, Mapping

import duckdb

from .database import open_read_only
from .errors import TailtraceError
from .recorded import FigureKey, RecordedRun, StepRecord, fetch_dicts, figure_of_run, has_table, load_run

__all__ = ["CHAIN_ORDER", "trace_figure", "format_trace", "to_json", "figure_run_id"]

# The rules a figure passes through, in order (the aggregate has no step record:
# the runs table stands for it).
CHAIN_ORDER = ("ingest_instruments", "ingest_positions", "ingest_prices", "build_returns", "build_scenarios",
               "estimate", "aggregate")
_LINEAGE_TABLES = ("positions_used", "window_inputs", "input_files")


def _json_default(obj: object) -> object:
    if isinstance(obj, (_dt.date, _dt.datetime)):
        return obj.isoformat()
    if isinstance(obj, Path):
        return str(obj)
    raise TypeError(f"not JSON serialisable: {type(obj).__name__}")


def to_json(obj: Any) -> str:
    """JSON text with dates as ISO strings (what ``--json`` prints)."""
    return json.dumps(obj, indent=1, sort_keys=True, default=_json_default)


def figure_run_id(con: duckdb.DuckDBPyConnection, key: FigureKey) -> str:
    """The run whose figure ``risk_figures`` holds for ``key``; a clear error if none."""
    row = con.execute(
        "SELECT run_id FROM risk_figures WHERE as_of = ?::DATE AND portfolio = ? AND method = ? AND confidence = ? "
        "AND horizon_days = ?", [key.as_of, key.portfolio, key.method, float(key.confidence), int(key.horizon)]).fetchone()
    if row is not None:
        return row[0]
    have = con.execute(
        "SELECT string_agg(DISTINCT CAST(as_of AS VARCHAR), ', ' ORDER BY CAST(as_of AS VARCHAR)), "
        "string_agg(DISTINCT portfolio, ', ' ORDER BY portfolio), string_agg(DISTINCT method, ', ' ORDER BY method), "
        "string_agg(DISTINCT CAST(confidence AS VARCHAR), ', ' ORDER BY CAST(confidence AS VARCHAR)), "
        "string_agg(DISTINCT CAST(horizon_days AS VARCHAR), ', ' ORDER BY CAST(horizon_days AS VARCHAR)) "
        "FROM risk_figures").fetchone()
    raise TailtraceError(f"no figure for {key.describe()}; the database has as_of {have[0]}; portfolios {have[1]}; "
                         f"methods {have[2]}; confidences {have[3]}; horizons {have[4]}")


def _relevant_steps(run: RecordedRun, method: str, price_files: set[str], positions_file: str) -> list[StepRecord]:
    chosen = []
    for s in run.steps:
        if s.rule == "ingest_prices" and not {e.path for e in s.inputs_named("prices")} & price_files:
            continue
        producer = "stress" if method.endswith("_stressed") else f"estimate_{method}"
        if s.rule.startswith("estimate_") and s.rule != producer:
            continue
        if s.rule not in CHAIN_ORDER and not s.rule.startswith("estimate_") and s.rule != producer:
            continue  # backtest, contributions, stress, report: they read the figures' inputs, not feed them
        chosen.append(s)
    return sorted(chosen, key=lambda s: (_chain_rank(s.rule), s.label))


def _chain_rank(rule: str) -> int:
    stage = "estimate" if rule.startswith("estimate_") else rule
    return CHAIN_ORDER.index(stage) if stage in CHAIN_ORDER else len(CHAIN_ORDER)


def _step_view(step: StepRecord, keep: set[str]) -> dict[str, Any]:
    return {
        "rule": step.rule, "job": dict(step.job), "label": step.label,
        "code": step.params.get("code"), "started_at": step.started_at, "finished_at": step.finished_at,
        "params": {k: v for k, v in step.params.items() if k != "code"},
        "inputs": [{"name": e.name, "path": e.path, "sha256": e.sha256} for e in step.inputs if e.path in keep],
        "outputs": [{"name": e.name, "path": e.path, "sha256": e.sha256} for e in step.outputs],
    }


def trace_figure(db_path: str | Path, key: FigureKey, *, run_id: str | None = None) -> dict[str, Any]:
    """Everything that went into one figure.

    Parameters
    ----------
    db_path : the risk database
    key : which figure
    run_id : trace the figure as this run produced it (default: the run whose
        figure ``risk_figures`` holds now)

    Returns
    -------
    dict with ``figure`` (the stored row), ``run`` (id, time, code version,
    packages, config snapshot), ``chain`` (the steps from ingest to aggregate
    that feed the figure, with params, code hash, times, and the input and
    output files of each with their sha256), ``inputs`` (only the raw files
    that feed the figure: the instruments file, the positions file of that
    as_of, and the price files of the instruments the portfolio holds or of
    the FX series it needs, each with the price rows the window reads),
    ``positions`` (file, row, instrument, quantity, base price and value),
    ``window`` (the estimation window), ``parameters``, ``code``, ``packages``
    and ``outputs``.

    Notes
    -----
    Reads only the database: the step records (``provenance``, ``runs``) and
    the lineage tables the aggregate writes (``positions_used``,
    ``window_inputs``, ``input_files``).
    """
    with open_read_only(db_path) as con:
        missing = [t for t in _LINEAGE_TABLES if not has_table(con, t)]
        if missing:
            raise TailtraceError(f"{db_path} has no {', '.join(missing)} table(s): it was written before lineage "
                                 "was recorded; rerun the pipeline")
        rid = run_id or figure_run_id(con, key)
        run = load_run(con, db_path, rid)
        figure, figure_source = figure_of_run(con, run, key)
        if figure is None and run_id is None:
            raise TailtraceError(f"no figure for {key.describe()} in run {rid}: {figure_source}")
        positions = fetch_dicts(con, "SELECT positions_file AS file, positions_row AS row, instrument, quantity, price_base, "
                               "value_base FROM positions_used WHERE run_id = ? AND as_of = ?::DATE AND portfolio = ? "
                               "ORDER BY positions_row", [rid, key.as_of, key.portfolio])
        if not positions:
            raise TailtraceError(f"run {rid} has no positions of portfolio {key.portfolio} for as_of {key.as_of}")
        held = sorted({p["instrument"] for p in positions})
        window_rows = fetch_dicts(con, "SELECT instrument, series, file, first_date, last_date, n_rows, n_filled, "
                                 "window_first, window_last, n_obs FROM window_inputs WHERE run_id = ? AND as_of = ?::DATE "
                                 "AND list_contains(?, instrument) ORDER BY file, series, instrument",
                            [rid, key.as_of, held])
        files = {f["path"]: f for f in fetch_dicts(con, "SELECT * FROM input_files WHERE run_id = ?", [rid])}

    positions_file = positions[0]["file"]
    price_files = {w["file"] for w in window_rows}
    inputs = _feeding_inputs(run, positions, window_rows, files)
    steps = _relevant_steps(run, key.method, price_files, positions_file)
    keep = {i["path"] for i in inputs} | {e.path for s in steps for e in s.outputs}
    chain = [_step_view(s, keep) for s in steps]
    chain.append({"rule": "aggregate", "job": {}, "label": "aggregate", "code": None, "started_at": None,
                  "finished_at": run.recorded_at, "params": {"database": str(db_path)},
                  "inputs": [e for e in chain[-1]["outputs"] if e["name"] == "figures"] if chain else [],
                  "outputs": [{"name": "risk_figures", "path": str(db_path), "sha256": None}]})
    estimate = run.step(f"estimate_{key.method}")
    window = dict(estimate.notes.get("windows", {}).get(key.as_of, {}))
    if window_rows:
        window.update({"window_first": window_rows[0]["window_first"], "window_last": window_rows[0]["window_last"],
                       "n_obs": window_rows[0]["n_obs"],
                       "first_price_date": min(w["first_date"] for w in window_rows),
                       "calendar_files": sorted(p for p, f in files.items() if f["kind"] == "prices")})
    figure_entry = estimate.output("figures")
    return {
        "figure": {**key.__dict__, **(figure or {}), "found_in": figure_source},
        "run": {"run_id": run.run_id, "recorded_at": run.recorded_at, "as_of_dates": list(run.as_of_dates),
                "workdir": str(run.workdir), "config": dict(run.config)},
        "chain": chain,
        "inputs": inputs,
        "positions": positions,
        "window": window,
        "parameters": {label: p for label, p in ((s.label, {k: v for k, v in s.params.items() if k != "code"})
                                                 for s in steps) if p},
        "code": {"git_commit": run.git_commit, "git_dirty": run.git_dirty,
                 "package_source": run.packages.get("tailtrace.source"),
                 "package_version": run.packages.get("tailtrace"),
                 "steps": {s.label: s.params.get("code") for s in steps}},
        "packages": dict(estimate.packages or run.packages),
        "outputs": [{"kind": "figures", "path": figure_entry.path, "sha256": figure_entry.sha256,
                     "archive": files.get(figure_entry.path, {}).get("archive")},
                    {"kind": "database", "path": str(db_path), "table": "risk_figures", "run_id": run.run_id}],
    }


def _feeding_inputs(run: RecordedRun, positions: list[dict[str, Any]], window_rows: list[dict[str, Any]],
                    files: Mapping[str, Mapping[str, Any]]) -> list[dict[str, Any]]:
    """The raw files a figure reads: instruments, its positions file, the price files of its series."""
    held = sorted({p["instrument"] for p in positions})
    entry = run.step("ingest_instruments").inputs_named("instruments")[0]
    inputs = [_input_view("instruments", entry.path, entry.sha256, files,
                          {"instruments": held, "fx_series": sorted({w["series"] for w in window_rows} - set(held))})]
    positions_file = positions[0]["file"]
    entry = next((e for e in run.step("ingest_positions").inputs_named("positions") if e.path == positions_file), None)
    if entry is None:
        raise TailtraceError(f"run {run.run_id}: positions file {positions_file} is not among the recorded inputs")
    inputs.append(_input_view("positions", positions_file, entry.sha256, files, {"rows": [p["row"] for p in positions]}))
    for path in sorted({w["file"] for w in window_rows}):
        entry = next(e for s in run.steps if s.rule == "ingest_prices" for e in s.inputs_named("prices") if e.path == path)
        used = [{k: w[k] for k in ("series", "instrument", "first_date", "last_date", "n_rows", "n_filled")}
                for w in window_rows if w["file"] == path]
        inputs.append(_input_view("prices", path, entry.sha256, files, {"series": used}))
    return inputs


def _input_view(kind: str, path: str, sha256: str, files: Mapping[str, Mapping[str, Any]],
                used: Mapping[str, Any]) -> dict[str, Any]:
    info = files.get(path, {})
    return {"kind": kind, "path": path, "sha256": sha256, "bytes": info.get("bytes"), "rows": info.get("rows"),
            "first_date": info.get("first_date"), "last_date": info.get("last_date"),
            "archive": info.get("archive"), "archive_note": info.get("archive_note"), "used": dict(used)}


def _money(x: Any) -> str:
    return "n/a" if x is None else f"{x:,.2f}"


def format_trace(t: Mapping[str, Any]) -> str:
    """Human-readable lineage (what ``tailtrace trace`` prints)."""
    f, run, code = t["figure"], t["run"], t["code"]
    w = t["window"]
    lines = [
        f"Figure   {f['method']} {f['confidence']:g} / {f['horizon']} day(s), portfolio {f['portfolio']}, as_of {f['as_of']}",
        f"         VaR {_money(f.get('var'))}  ES {_money(f.get('es'))} {f.get('currency') or ''}  "
        f"(scaling {f.get('scaling')}, {f.get('n_obs')} obs; from {f['found_in']})",
        f"Run      {run['run_id']} recorded {run['recorded_at']} in {run['workdir']}",
        f"Code     git {code['git_commit'] or 'unknown'}{' (dirty)' if code['git_dirty'] else ''}, "
        f"tailtrace {code['package_version']} source {code['package_source']}",
        "Chain    " + " -> ".join(s["label"] for s in t["chain"]),
        f"Window   {w.get('n_obs')} daily returns {w.get('window_first')} .. {w.get('window_last')} "
        f"(prices read from {w.get('first_price_date')}; calendar = union of the dates of "
        f"{len(w.get('calendar_files', []))} price file(s))",
        "",
        "Input files",
    ]
    for i in t["inputs"]:
        lines.append(f"  {i['kind']:<11} {i['path']}")
        lines.append(f"  {'':<11} sha256 {i['sha256']}  {i['bytes']} bytes  "
                     f"{'archived ' + i['archive'] if i['archive'] else i['archive_note'] or 'not archived'}")
        for s in i["used"].get("series", []):
            kind = "FX" if str(s["series"]).startswith("FX.") else "underlying"
            role = "" if s["series"] == s["instrument"] else f" ({kind} of {s['instrument']})"
            lines.append(f"  {'':<11} {s['series']}{role}: rows {s['first_date']} .. {s['last_date']} "
                         f"({s['n_rows']} closes, {s['n_filled']} date(s) carried forward)")
        if i["kind"] == "positions":
            lines.append(f"  {'':<11} rows used: {', '.join(map(str, i['used']['rows']))}")
        if i["kind"] == "instruments":
            lines.append(f"  {'':<11} instruments used: {', '.join(i['used']['instruments'] + i['used']['fx_series'])}")
    lines += ["", "Positions"]
    for p in t["positions"]:
        lines.append(f"  {p['file']} row {p['row']}: {p['instrument']} quantity {p['quantity']:g} "
                     f"x {p['price_base']:.6g} = {_money(p['value_base'])}")
    lines += ["", "Steps"]
    for s in t["chain"]:
        lines.append(f"  {s['label']}  code {s['code']}  {s['started_at'] or ''} .. {s['finished_at']}")
        if s["params"]:
            lines.append(f"      params {json.dumps(s['params'], sort_keys=True)}")
        for e in s["inputs"]:
            lines.append(f"      in  {e['name']:<12} {e['path']}  {e['sha256']}")
        for e in s["outputs"]:
            lines.append(f"      out {e['name']:<12} {e['path']}  {e['sha256'] or ''}")
    lines += ["", "Packages " + ", ".join(f"{k} {v}" for k, v in sorted(t["packages"].items())),
              "Config   " + json.dumps(run["config"], sort_keys=True)]
    return "\n".join(lines)
