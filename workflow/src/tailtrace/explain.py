"""Why a figure moved between two as_of dates: positions, market window, parameters, code.

Sequential substitution: starting from the earlier figure, replace one
driver at a time by its later value and recompute the figure with the
estimator registry; each step's change is that driver's contribution.
"""

from __future__ import annotations

import decimal
import json
import tempfile
import textwrap
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Mapping, Sequence

import duckdb
import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq

from .database import open_read_only
from .errors import InputError, TailtraceError
from .hashing import sha256_file
from .lineage import figure_run_id
from .market import MarketData
from .recorded import FigureKey, RecordedRun, fetch_dicts, figure_of_run, load_run

__all__ = [
    "ORDERING",
    "Parameters",
    "State",
    "figure_value",
    "attribute",
    "explain_change",
    "format_explain",
    "load_market",
]

ORDERING = (
    "Sequential substitution, in this order: (1) positions: the later positions, valued on the earlier date's "
    "prices and window; (2) market window: the later date's market data (its prices for valuation, its window "
    "of returns: new days in, old days out, and any revision of the data); (3) parameters: the later run's "
    "estimation parameters (window_days, method options, seed); (4) code: the difference between each stored "
    "figure and its recomputation with the current code (zero when the code and libraries are unchanged). "
    "Each step changes one driver, so the contributions telescope: they sum to the total change exactly "
    "(the exact amounts are computed in decimal arithmetic on the double-precision figures)."
)

COMPONENTS = ("positions", "market", "parameters", "code")


@dataclass(frozen=True)
class Parameters:
    """The estimation parameters a figure depends on (from the estimate step's params)."""

    window_days: int
    confidences: tuple[float, ...]
    horizons: tuple[int, ...]
    options: Mapping[str, Any]
    seed: int

    @classmethod
    def from_params(cls, params: Mapping[str, Any]) -> "Parameters":
        options = params.get("options", "{}")
        return cls(int(params["window_days"]), tuple(float(c) for c in params["confidences"]),
                   tuple(int(h) for h in params["horizons"]),
                   json.loads(options) if isinstance(options, str) else dict(options), int(params["seed"]))

    def differences(self, other: "Parameters") -> list[str]:
        out = []
        for name in ("window_days", "options", "seed"):
            a, b = getattr(self, name), getattr(other, name)
            if a != b:
                out.append(f"{name} {a} -> {b}")
        return out


@dataclass(frozen=True)
class State:
    """Everything a figure is a function of: book, market data, date, parameters."""

    positions: pa.Table  # portfolio, instrument, quantity, row
    positions_file: str
    market: MarketData
    as_of: np.datetime64
    params: Parameters
    instruments: pa.Table | None = None  # with option terms: options are priced, not looked up
    base_currency: str = "EUR"


def _index(values: Sequence[Any], value: Any, what: str) -> int:
    try:
        return list(values).index(value)
    except ValueError:
        raise TailtraceError(f"{what} {value!r} was not computed in this run (it has {list(values)})") from None


def figure_value(state: State, key: FigureKey) -> tuple[float, float]:
    """Recompute one figure (VaR, ES) from a state, as the estimate step does.

    Raises
    ------
    InputError
        The state cannot be valued: a held instrument has no price on as_of
        in that market data, or no returns over the window.
    """
    from .estimators.registry import get_estimator
    from .pipeline import as_of_seed
    from .scenarios import build_sample, linear_book, make_book, option_instruments

    market = state.market
    if state.as_of not in market.dates:
        raise InputError(f"as_of {state.as_of} is not a date of this market data", file="market data")
    options = option_instruments(state.instruments) if state.instruments is not None else set()
    unpriced = sorted(set(state.positions.column("instrument").to_pylist()) - set(market.instruments) - options)
    if unpriced:
        raise InputError("instrument has no prices in this market data", file=state.positions_file,
                         column="instrument", value=unpriced[0])
    if options:
        book = make_book(state.as_of, state.positions, state.positions_file, market, state.instruments,
                         base_currency=state.base_currency, instruments_file="instruments.csv")
    else:
        book = linear_book(state.as_of, state.positions, state.positions_file, market)
    sample = build_sample(market, book, state.params.window_days)
    p = _index(sample.portfolios, key.portfolio, "portfolio")
    c = _index(state.params.confidences, float(key.confidence), "confidence")
    h = _index(state.params.horizons, int(key.horizon), "horizon")
    result = get_estimator(key.method)(
        sample, state.params.confidences, state.params.horizons, options=state.params.options,
        seed=as_of_seed(state.params.seed, state.as_of))
    return float(result.var[p, c, h]), float(result.es[p, c, h])


def _exact(x: float) -> decimal.Decimal:
    return decimal.Decimal(x)  # exact: every double is a finite decimal


def attribute(values: Sequence[tuple[str, tuple[float, float]]]) -> list[dict[str, Any]]:
    """Contributions of a chain of figure values.

    Parameters
    ----------
    values : (component the step belongs to, (VaR, ES) after the step),
        the first entry being the start (its component is ignored)

    Returns
    -------
    one dict per component in the order first seen: exact decimal sums of
    the step differences (``var_exact``, ``es_exact`` as text) and their
    nearest doubles.

    Notes
    -----
    With S₀ … Sₙ the chain, contribution(k) = Σ_{steps i of k} (Sᵢ − Sᵢ₋₁);
    Σ_k contribution(k) = Sₙ − S₀ exactly, because the sums are done in
    decimal with enough digits to hold any difference of doubles.
    """
    with decimal.localcontext() as ctx:
        ctx.prec = 1200  # > digits of any difference of two doubles: no rounding
        totals: dict[str, list[decimal.Decimal]] = {}
        for (_, before), (component, after) in zip(values[:-1], values[1:]):
            acc = totals.setdefault(component, [decimal.Decimal(0), decimal.Decimal(0)])
            for j in (0, 1):
                acc[j] += _exact(after[j]) - _exact(before[j])
    return [{"component": k, "var": float(v[0]), "es": float(v[1]), "var_exact": _text(v[0]), "es_exact": _text(v[1])}
            for k, v in totals.items()]


def _text(d: decimal.Decimal) -> str:
    s = format(d, "f")
    return s.rstrip("0").rstrip(".") if "." in s else s


def _market_from(base: pa.Table, returns: pa.Table) -> MarketData:
    names = tuple(base.column_names[1:])
    return MarketData(dates=base.column("date").to_numpy().astype("datetime64[D]"), instruments=names, local=None,
                      base=np.column_stack([base.column(c).to_numpy() for c in names]), observed=None,
                      log_returns=np.column_stack([returns.column(c).to_numpy() for c in names]))


def load_market(run: RecordedRun) -> tuple[MarketData, str]:
    """The market data (base prices, log returns) a run's figures were computed from.

    The Parquet caches are used while they still hold the recorded bytes;
    otherwise the returns step is rerun in a temporary folder from the
    archived raw inputs with the run's recorded parameters.

    Returns
    -------
    (market, where it came from)
    """
    step = run.step("build_returns")
    base, returns = step.output("base"), step.output("returns")
    paths = [run.copy_of(e) for e in (base, returns)]
    if all(p is not None for p, _ in paths):
        return _market_from(pq.read_table(paths[0][0]), pq.read_table(paths[1][0])), "recorded market caches"
    return _rebuild_market(run)


def _rebuild_market(run: RecordedRun) -> tuple[MarketData, str]:
    from .pipeline import build_returns, ingest_instruments, ingest_prices

    def fetch(entry):  # the recorded bytes of a raw input
        path, origin = run.copy_of(entry)
        if path is None:
            raise TailtraceError(f"run {run.run_id}: cannot rebuild its market data: {entry.path} is not available "
                                 f"({origin})")
        return str(path)

    step = run.step("build_returns")
    with tempfile.TemporaryDirectory(prefix="tailtrace-explain-") as tmp:
        root = Path(tmp)
        instruments = str(root / "instruments.parquet")
        instruments_csv = fetch(run.step("ingest_instruments").inputs_named("instruments")[0])
        ingest_instruments(instruments_csv, instruments)
        prices = []
        for s in sorted((s for s in run.steps if s.rule == "ingest_prices"), key=lambda s: s.label):
            out = str(root / "prices" / f"{s.job['name']}.parquet")
            ingest_prices(fetch(s.inputs_named("prices")[0]), instruments_csv, out, str(root / f"q-{s.job['name']}.parquet"),
                          stale_days=int(s.params["stale_days"]))
            prices.append(out)
        outputs = {k: str(root / f"{k}.parquet") for k in ("local", "base", "observed", "returns", "filled")}
        build_returns(prices, instruments, outputs, base_currency=str(step.params["base_currency"]),
                      max_fill_days=int(step.params["max_fill_days"]),
                      instruments_file=str(step.params.get("instruments_file", "instruments.csv")))
        same = all(sha256_file(outputs[k]) == step.output(k).sha256 for k in ("base", "returns"))
        market = _market_from(pq.read_table(outputs["base"]), pq.read_table(outputs["returns"]))
    note = "rebuilt from archived inputs" + ("" if same else
                                             " (differs from the recorded caches: the returns code changed since)")
    return market, note


def _positions(con: duckdb.DuckDBPyConnection, run: RecordedRun, as_of: str) -> tuple[pa.Table, str]:
    rows = fetch_dicts(con, "SELECT portfolio, instrument, quantity, positions_row AS row, positions_file FROM "
                            "positions_used WHERE run_id = ? AND as_of = ?::DATE ORDER BY portfolio, instrument",
                       [run.run_id, as_of])
    if not rows:
        raise TailtraceError(f"run {run.run_id} recorded no positions for as_of {as_of} (positions_used)")
    table = pa.Table.from_pylist([{k: r[k] for k in ("portfolio", "instrument", "quantity", "row")} for r in rows],
                                 schema=pa.schema([("portfolio", pa.string()), ("instrument", pa.string()),
                                                   ("quantity", pa.float64()), ("row", pa.int64())]))
    return table, rows[0]["positions_file"]


def _position_notes(a: pa.Table, b: pa.Table, portfolio: str) -> list[str]:
    def qty(t: pa.Table) -> dict[tuple[str, str], float]:
        return {(p, i): q for p, i, q in zip(t.column("portfolio").to_pylist(), t.column("instrument").to_pylist(),
                                              t.column("quantity").to_pylist())}

    qa, qb = qty(a), qty(b)
    mine = [f"{i}: {qa.get((p, i), 0):g} -> {qb.get((p, i), 0):g}" for p, i in sorted(set(qa) | set(qb))
            if p == portfolio and qa.get((p, i)) != qb.get((p, i))]
    others = sorted({p for p, i in set(qa) | set(qb) if p != portfolio and qa.get((p, i)) != qb.get((p, i))})
    notes = [f"positions of {portfolio} changed: " + "; ".join(mine)] if mine else [f"positions of {portfolio} unchanged"]
    if others:
        notes.append("other portfolios changed too (" + ", ".join(others) + "): they can move this figure only through "
                     "the set of instruments in the book (e.g. the simulated risk factors of Monte Carlo)")
    return notes


def _window_dates(market: MarketData, as_of: np.datetime64, window: int) -> np.ndarray:
    end = int(np.searchsorted(market.dates, as_of, side="right"))
    return market.dates[max(end - window, 0):end]


def _market_notes(s1: State, s2: State, held: Sequence[str]) -> list[str]:
    w1 = _window_dates(s1.market, s1.as_of, s1.params.window_days)
    w2 = _window_dates(s2.market, s2.as_of, s1.params.window_days)
    new, old = np.setdiff1d(w2, w1), np.setdiff1d(w1, w2)
    notes = [f"window {w1[0]} .. {w1[-1]} -> {w2[0]} .. {w2[-1]}: {len(new)} day(s) in"
             + (f" ({new[0]} .. {new[-1]})" if len(new) else "") + f", {len(old)} day(s) out"
             + (f" ({old[0]} .. {old[-1]})" if len(old) else "")]
    common = np.intersect1d(w1, w2)
    names = [i for i in held if i in s1.market.instruments and i in s2.market.instruments]
    if len(common) and names:
        r1 = s1.market.log_returns[np.ix_(np.searchsorted(s1.market.dates, common),
                                          [s1.market.column(i) for i in names])]
        r2 = s2.market.log_returns[np.ix_(np.searchsorted(s2.market.dates, common),
                                          [s2.market.column(i) for i in names])]
        revised = int((r1.view(np.int64) != r2.view(np.int64)).sum())
        if revised:
            notes.append(f"{revised} return(s) of the overlapping window were revised between the two runs' data; "
                         "their effect is part of the market component")
    return notes


def _run_notes(r1: RecordedRun, r2: RecordedRun, method: str) -> list[str]:
    notes = []
    b1, b2 = r1.step("build_returns").params, r2.step("build_returns").params
    for k in ("base_currency", "max_fill_days"):
        if b1.get(k) != b2.get(k):
            notes.append(f"data parameter {k} changed ({b1.get(k)} -> {b2.get(k)}); its effect is in the market "
                         "component")
    e1, e2 = r1.step(f"estimate_{method}").params, r2.step(f"estimate_{method}").params
    for k in ("code", "libs"):
        if e1.get(k) != e2.get(k):
            notes.append(f"estimate step {k} changed between the runs ({e1.get(k)} -> {e2.get(k)})")
    if r1.step("build_returns").params.get("code") != r2.step("build_returns").params.get("code"):
        notes.append("returns step code changed between the runs; its effect is in the market component")
    return notes


def explain_change(db_path: str | Path, key_from: FigureKey, key_to: FigureKey, *, run_from: str | None = None,
                   run_to: str | None = None) -> dict[str, Any]:
    """Attribute the change of a figure between two as_of dates.

    Parameters
    ----------
    db_path : the risk database
    key_from, key_to : the same portfolio, method, confidence and horizon at two as_of dates
    run_from, run_to : the runs to compare (default: the runs whose figures
        ``risk_figures`` holds); the same as_of with two runs isolates what
        changed between them

    Returns
    -------
    dict with ``from`` and ``to`` (as_of, run, stored and recomputed VaR/ES),
    ``components`` (positions, market, parameters, code: amounts and exact
    decimal text), ``total``, ``chain`` (every intermediate figure),
    ``ordering`` and ``notes``.

    Notes
    -----
    With F(q, m, θ) the figure for positions q on market data m (prices on
    as_of and the window of returns ending there) with parameters θ, and
    F_s the stored figures:

        positions  = F(q₂, m₁, θ₁) − F(q₁, m₁, θ₁)
        market     = F(q₂, m₂, θ₁) − F(q₂, m₁, θ₁)
        parameters = F(q₂, m₂, θ₂) − F(q₂, m₂, θ₁)
        code       = [F(q₁, m₁, θ₁) − F_s,₁] + [F_s,₂ − F(q₂, m₂, θ₂)]

    which sum to F_s,₂ − F_s,₁. If the later positions cannot be valued on
    the earlier market data (an instrument new in the later run's data), the
    market step is split: m₁ → m₂ on the earlier date first (revisions), then
    positions, then the earlier date → the later date.

    References
    ----------
    Sequential (one-at-a-time) substitution as in chain-linked variance
    analysis; the result depends on the ordering, which is stated with it.
    """
    with open_read_only(db_path) as con:
        runs, states, stored = [], [], []
        for key, rid in ((key_from, run_from), (key_to, run_to)):
            run = load_run(con, db_path, rid or figure_run_id(con, key))
            row, where = figure_of_run(con, run, key)
            if row is None:
                raise TailtraceError(f"run {run.run_id} has no stored figure for {key.describe()}: {where}")
            positions, source = _positions(con, run, key.as_of)
            runs.append(run)
            stored.append((row, where))
            instruments_path, _ = run.copy_of(run.step("ingest_instruments").output("instruments"))
            instruments = pq.read_table(instruments_path) if instruments_path is not None else None
            base_ccy = str(run.step("build_returns").params["base_currency"])
            states.append((positions, source, Parameters.from_params(run.step(f"estimate_{key.method}").params),
                           instruments, base_ccy))
    same = [tuple(r.step("build_returns").output(k).sha256 for k in ("base", "returns")) for r in runs]
    markets = [load_market(runs[0])]
    markets.append(markets[0] if same[0] == same[1] else load_market(runs[1]))
    s1 = State(states[0][0], states[0][1], markets[0][0], np.datetime64(key_from.as_of, "D"), states[0][2],
               states[0][3], states[0][4])
    s2 = State(states[1][0], states[1][1], markets[1][0], np.datetime64(key_to.as_of, "D"), states[1][2],
               states[1][3], states[1][4])

    def with_(state: State, **changes: Any) -> State:
        return State(**{**state.__dict__, **changes})

    def value(state: State) -> tuple[float, float]:
        return figure_value(state, key_from)

    start = value(s1)
    q2 = {"positions": s2.positions, "positions_file": s2.positions_file}
    m2 = {"market": s2.market, "as_of": s2.as_of}
    notes = []
    try:
        after_positions = [("positions", value(with_(s1, **q2)))]
    except InputError as exc:  # later positions not valuable on the earlier data: revisions first
        notes.append(f"the later positions cannot be valued on the earlier run's market data ({exc}); the market "
                     "step is split: the later run's data on the earlier date first, then positions, then the date")
        revised = with_(s1, market=s2.market)
        after_positions = [("market", value(revised)), ("positions", value(with_(revised, **q2)))]
    after_market = value(with_(s1, **q2, **m2))
    end = value(s2)
    s_from = (float(stored[0][0]["var"]), float(stored[0][0]["es"]))
    s_to = (float(stored[1][0]["var"]), float(stored[1][0]["es"]))
    chain = [("start", s_from), ("code", start), *after_positions, ("market", after_market), ("parameters", end),
             ("code", s_to)]
    found = {c["component"]: c for c in attribute(chain)}
    components = [found.get(k) or {"component": k, "var": 0.0, "es": 0.0, "var_exact": "0", "es_exact": "0"}
                  for k in COMPONENTS]
    total = attribute([("start", s_from), ("total", s_to)])[0]
    held = sorted(set(s1.positions.column("instrument").to_pylist()) | set(s2.positions.column("instrument").to_pylist()))
    notes += _position_notes(s1.positions, s2.positions, key_from.portfolio)
    notes += _market_notes(s1, s2, held)
    notes += [f"parameter {d}" for d in s1.params.differences(s2.params)]
    notes += _run_notes(runs[0], runs[1], key_from.method)
    for label, st, rec in (("from", stored[0], start), ("to", stored[1], end)):
        if (float(st[0]["var"]), float(st[0]["es"])) != rec:
            notes.append(f"the current code does not reproduce the stored {label} figure bit for bit "
                         f"(stored VaR {st[0]['var']!r}, recomputed {rec[0]!r}): see the code component")
    return {
        "figure": {"portfolio": key_from.portfolio, "method": key_from.method, "confidence": key_from.confidence,
                   "horizon": key_from.horizon, "currency": stored[1][0].get("currency")},
        "from": _side(key_from, runs[0], stored[0], start, states[0][1], markets[0][1]),
        "to": _side(key_to, runs[1], stored[1], end, states[1][1], markets[1][1]),
        "components": components,
        "total": {k: total[k] for k in ("var", "es", "var_exact", "es_exact")},
        "chain": [{"after": label, "var": v[0], "es": v[1]} for label, v in chain],
        "ordering": ORDERING,
        "notes": notes,
    }


def _side(key: FigureKey, run: RecordedRun, stored: tuple[dict[str, Any], str], recomputed: tuple[float, float],
          positions_file: str, market_source: str) -> dict[str, Any]:
    row, where = stored
    return {"as_of": key.as_of, "run_id": run.run_id, "var": row["var"], "es": row["es"], "stored_in": where,
            "recomputed_var": recomputed[0], "recomputed_es": recomputed[1], "positions_file": positions_file,
            "market_data": market_source}


def format_explain(e: Mapping[str, Any]) -> str:
    """Human-readable attribution (what ``tailtrace explain`` prints)."""
    f, a, b = e["figure"], e["from"], e["to"]
    width = 16
    lines = [f"{f['method']} {f['confidence']:g} / {f['horizon']} day(s), portfolio {f['portfolio']} "
             f"({f['currency']}): {a['as_of']} (run {a['run_id']}) -> {b['as_of']} (run {b['run_id']})",
             f"{'':<14}{'VaR':>{width}}{'ES':>{width}}",
             f"{'from':<14}{a['var']:>{width},.2f}{a['es']:>{width},.2f}"]
    for c in e["components"]:
        lines.append(f"{c['component']:<14}{c['var']:>+{width},.2f}{c['es']:>+{width},.2f}")
    lines += [f"{'to':<14}{b['var']:>{width},.2f}{b['es']:>{width},.2f}",
              f"{'total change':<14}{e['total']['var']:>+{width},.2f}{e['total']['es']:>+{width},.2f}",
              ""]
    lines += textwrap.wrap("Ordering: " + e["ordering"], 100) + [""]
    lines += [line for n in e["notes"] for line in textwrap.wrap(n, 100, initial_indent="- ", subsequent_indent="  ")]
    return "\n".join(lines)
