"""One function per pipeline step; the Snakemake scripts only call these."""

from __future__ import annotations

import dataclasses
import json
import logging
import warnings
from pathlib import Path
from typing import Any, Mapping, Sequence

import numpy as np
import pyarrow as pa
import pyarrow.compute  # noqa: F401  (pa.compute)
import pyarrow.parquet as pq

from .errors import DataQualityWarning, InputError
from .ingest import quality_checks, read_price_file
from .market import MATRIX_KEYS, MarketData, build_market, market_to_tables, write_market_matrices
from .reference import read_instruments, read_positions

__all__ = [
    "read_parquet",
    "write_parquet",
    "ingest_instruments",
    "ingest_positions",
    "ingest_prices",
    "build_returns",
    "build_scenarios",
    "run_estimator",
    "as_of_seed",
    "parse_json_param",
    "run_dates",
    "run_stress_step",
    "run_backtest_step",
    "run_contributions_step",
]

log = logging.getLogger("tailtrace")


def write_parquet(table: pa.Table, path: str | Path, metadata: Mapping[str, str] | None = None) -> None:
    """Write Parquet deterministically (no pandas metadata, fixed options)."""
    if metadata:
        merged = dict(table.schema.metadata or {})
        merged.update({k.encode(): v.encode() for k, v in metadata.items()})
        table = table.replace_schema_metadata(merged)
    Path(path).parent.mkdir(parents=True, exist_ok=True)
    tmp = Path(f"{path}.partial")
    # Prices and returns barely compress: dictionary pages and zstd on them triple the write and double the read
    # time of the wide market tables for ~10 % of size. Text and dates keep both.
    floats = {f.name for f in table.schema if pa.types.is_floating(f.type)}
    pq.write_table(table, tmp, row_group_size=1 << 20, use_dictionary=[n for n in table.column_names if n not in floats],
                   compression={n: "lz4" if n in floats else "zstd" for n in table.column_names})
    tmp.replace(path)


def read_parquet(path: str | Path, columns: Sequence[str] | None = None) -> pa.Table:
    """Read a Parquet file (or some of its columns) with its schema metadata.

    ``ParquetFile.read`` rather than ``pq.read_table``: the latter goes through
    pyarrow.dataset, which imports pandas (about 0.4 s per job).
    """
    with pq.ParquetFile(path) as handle:
        return handle.read(columns=list(columns) if columns is not None else None)


def known_instruments(instruments_csv: str) -> list[str]:
    """Instrument names of instruments.csv, validated as ingest_instruments validates them.

    The price and positions ingests read the CSV themselves rather than wait
    for the instruments step: one job level less. That step reports the
    file's warnings.
    """
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DataQualityWarning)
        return read_instruments(instruments_csv).column("instrument").to_pylist()


def ingest_instruments(path: str, out: str) -> None:
    table = read_instruments(path)
    write_parquet(table, out, {"tailtrace.source": str(path)})
    log.info("instruments: %d rows from %s", table.num_rows, path)


def _position_date(path: Path) -> str | None:
    try:
        np.datetime64(path.stem, "D")
    except ValueError:
        return None
    return path.stem


def ingest_positions(paths: Sequence[str], instruments_csv: str, out: str) -> None:
    """Validate every positions file into one table with its source and date.

    The undated file (positions.csv) applies to every as_of without a dated
    file positions/<YYYY-MM-DD>.csv.
    """
    known = known_instruments(instruments_csv)
    parts = []
    for p in sorted(paths):
        table = read_positions(p, known)
        day = _position_date(Path(p))
        parts.append(table.append_column("source", pa.array([str(p)] * table.num_rows, pa.string()))
                     .append_column("positions_date", pa.array([day] * table.num_rows, pa.string())))
    write_parquet(pa.concat_tables(parts), out)


def ingest_prices(path: str, instruments_csv: str, out_prices: str, out_quality: str, *, stale_days: int) -> None:
    known = known_instruments(instruments_csv)
    prices, extra = read_price_file(path, known)
    write_parquet(prices, out_prices, {"tailtrace.source": str(path)})
    quality = quality_checks(prices, str(path), stale_days=stale_days, extra_columns=extra)
    write_parquet(quality, out_quality)
    log.info("%s: %d rows, %d instruments, %d quality notes", path, prices.num_rows,
             pa.compute.count_distinct(prices.column("instrument")).as_py(), quality.num_rows)


def build_returns(price_files: Sequence[str], instruments: str, outputs: Mapping[str, str], *,
                  base_currency: str, max_fill_days: int, instruments_file: str) -> None:
    """Align all ingested prices and write base prices, flags and log returns."""
    tables = []
    for p in sorted(price_files):
        t = read_parquet(p)
        source = (t.schema.metadata or {}).get(b"tailtrace.source", p.encode()).decode()
        tables.append((source, t))
    market, filled = build_market(tables, read_parquet(instruments), base_currency=base_currency,
                                  max_fill_days=max_fill_days, instruments_file=instruments_file)
    for key, table in market_to_tables(market).items():
        write_parquet(table, outputs[key])
    if all(matrix_key(k) in outputs for k in MATRIX_KEYS):
        write_market_matrices(market, {k: outputs[matrix_key(k)] for k in MATRIX_KEYS})
    write_parquet(filled, outputs["filled"])


def _positions_for(positions: pa.Table, as_of: np.datetime64, default_file: str) -> tuple[pa.Table, str]:
    day = str(np.datetime64(as_of, "D"))
    dated = positions.filter(pa.compute.equal(positions.column("positions_date"), day))
    if dated.num_rows:
        return dated, str(dated.column("source")[0])
    undated = positions.filter(pa.compute.is_null(positions.column("positions_date")))
    if undated.num_rows == 0:
        raise InputError(f"no positions for as_of {day}: neither a dated file {day}.csv nor the undated file",
                         file=default_file)
    return undated, str(undated.column("source")[0])


def matrix_key(key: str) -> str:
    """Name of a market matrix (``.npy``) among a rule's inputs and outputs."""
    return f"{key}_matrix"


def _market_for_books(market_files: Mapping[str, str], *, local: bool = True) -> MarketData:
    from .market import market_from_matrices, market_from_tables

    keys = MATRIX_KEYS if local else tuple(k for k in MATRIX_KEYS if k != "local")
    if all(matrix_key(k) in market_files for k in keys):
        with pq.ParquetFile(market_files["base"]) as base:
            names = base.schema_arrow.names
            dates = base.read(columns=["date"]).column("date").to_numpy()
        return market_from_matrices(dates, names[1:], {k: market_files[matrix_key(k)] for k in keys})
    return market_from_tables({k: read_parquet(market_files[k]) for k in keys})


def run_dates(exposures: str) -> list[np.datetime64]:
    """The as_of dates of the run, as the scenarios step resolved them into the exposures file."""
    days = read_parquet(exposures, columns=["as_of"]).column("as_of").to_numpy().astype("datetime64[D]")
    return sorted(set(days))


def books_for(market: MarketData, positions: pa.Table, instruments: pa.Table, dates: Sequence[np.datetime64], *,
              base_currency: str, positions_file: str, instruments_file: str) -> list:
    """The book of every as_of, from its dated positions file or the undated one."""
    from .scenarios import make_book

    books = []
    for day in dates:  # a handful of as_of dates; each book is vectorised
        part, source = _positions_for(positions, day, positions_file)
        books.append(make_book(day, part, source, market, instruments, base_currency=base_currency,
                               instruments_file=instruments_file))
    return books


def build_scenarios(market_files: Mapping[str, str], positions: str, instruments: str, outputs: Mapping[str, str], *,
                    as_of: Any, window_days: int, positions_file: str, instruments_file: str,
                    base_currency: str) -> list[str]:
    """Resolve as_of dates, value today's holdings, write exposures, sensitivities and 1-day P&L."""
    from .scenarios import build_sample, option_instruments, pnl_table, resolve_as_of

    market = _market_for_books(market_files)
    pos = read_parquet(positions)
    instr = read_parquet(instruments)
    options = option_instruments(instr)
    held = sorted(set(pos.column("instrument").to_pylist()) - options)
    missing = [i for i in held if i not in market.instruments]
    if missing:
        rows = pos.filter(pa.compute.equal(pos.column("instrument"), missing[0]))
        raise InputError("position in an instrument that has no prices in any price file",
                         file=str(rows.column("source")[0]), row=int(rows.column("row")[0].as_py()),
                         column="instrument", value=missing[0])
    dates = resolve_as_of(as_of, market, held)
    books = books_for(market, pos, instr, dates, base_currency=base_currency, positions_file=positions_file,
                      instruments_file=instruments_file)
    pnls = [pnl_table(build_sample(market, book, window_days)) for book in books]
    write_parquet(pa.concat_tables([b.exposures for b in books]), outputs["exposures"])
    write_parquet(pa.concat_tables(pnls), outputs["pnl"])
    sens = [b.sensitivities for b in books if b.sensitivities is not None]
    write_parquet(pa.concat_tables(sens) if sens else _empty_sensitivities(), outputs["sensitivities"])
    return [str(d) for d in dates]


def _empty_sensitivities() -> pa.Table:
    from .options.book import SENSITIVITY_COLUMNS

    fields = [("as_of", pa.date32())] + [(c, pa.float64()) for c in SENSITIVITY_COLUMNS]
    text = {"portfolio", "instrument", "underlying", "model", "currency", "option_type"}
    fields = [(n, pa.string() if n in text else pa.date32() if n == "expiry" else t) for n, t in fields]
    return pa.schema(fields).empty_table()


def as_of_seed(seed: int, as_of: np.datetime64) -> np.random.Generator:
    """A Generator for one as_of: figures of a date do not depend on the other dates run."""
    day = int(np.datetime64(as_of, "D").astype(np.int64))
    return np.random.default_rng(np.random.SeedSequence([int(seed), day]))


def run_estimator(market_files: Mapping[str, str], exposures: str, positions: str, instruments: str, out: str, *,
                  method: str, confidences: Sequence[float], horizons: Sequence[int], window_days: int,
                  options: Mapping[str, Any], seed: int, currency: str, positions_file: str,
                  instruments_file: str, out_notes: str | None = None) -> dict[str, Any]:
    """Run one method for every as_of in the exposures file.

    ``out`` gets the figures; ``out_notes`` (if given) the per-instrument
    notes of the fits (:func:`figures.instrument_notes_table`), empty for
    methods that have none.
    """
    from .estimators.registry import get_estimator
    from .figures import INSTRUMENT_NOTES_SCHEMA, estimate_table, instrument_notes_table
    from .scenarios import build_sample

    estimator = get_estimator(method)
    market = _market_for_books(market_files, local=False)  # estimators value books in base currency only
    books = books_for(market, read_parquet(positions), read_parquet(instruments), run_dates(exposures),
                      base_currency=currency,
                      positions_file=positions_file, instruments_file=instruments_file)
    tables, fit_notes, notes = [], [], {}
    for book in books:
        sample = build_sample(market, book, window_days)
        result = estimator(sample, confidences, horizons, options=options, seed=as_of_seed(seed, book.as_of))
        tables.append(estimate_table(result, as_of=book.as_of, portfolios=sample.portfolios, method=method,
                                     confidences=confidences, horizons=horizons, currency=currency))
        fit_notes.append(instrument_notes_table(result, as_of=book.as_of, method=method))
        notes[str(book.as_of)] = {"window_first": str(sample.dates[0]), "window_last": str(sample.dates[-1]),
                                  "n_obs": sample.n_obs, "instruments": list(sample.instruments)}
    write_parquet(pa.concat_tables(tables), out)
    if out_notes is not None:
        write_parquet(pa.concat_tables(fit_notes) if fit_notes else INSTRUMENT_NOTES_SCHEMA.empty_table(), out_notes)
    return notes


def parse_json_param(value: str | Mapping[str, Any]) -> Any:
    return json.loads(value) if isinstance(value, str) else value




def _rows_table(rows: list[dict], columns: Mapping[str, str]) -> pa.Table:
    types = {"DATE": pa.date32(), "VARCHAR": pa.string(), "DOUBLE": pa.float64(), "INTEGER": pa.int32(),
             "BIGINT": pa.int64(), "BOOLEAN": pa.bool_()}
    schema = pa.schema([(name, types[kind.split()[0]]) for name, kind in columns.items()])
    clean = [{k: (v.item() if isinstance(v, np.generic) else v) for k, v in r.items()} for r in rows]
    return pa.Table.from_pylist(clean, schema=schema)


def run_stress_step(market_files: Mapping[str, str], exposures: str, positions: str, instruments: str,
                    windows_file: str, shocks_file: str, outputs: Mapping[str, str], *, settings: Mapping[str, Any],
                    stressed_methods: Sequence[str], method_options: Mapping[str, Mapping[str, Any]],
                    confidences: Sequence[float], horizons: Sequence[int], window_days: int, seed: int,
                    currency: str, positions_file: str, instruments_file: str) -> dict[str, Any]:
    """Stress figures of every as_of, and the stressed-calibration figures.

    Stressed calibration: each method in ``stressed_methods`` is rerun on the
    worst window found in the history (``stress.stressed_window``) and
    written with the method name ``<method>_stressed``.
    """
    from .estimators.registry import get_estimator
    from .figures import estimate_table
    from .scenarios import build_sample
    from .stress.historical import load_stress_windows
    from .stress.instruments import InstrumentMeta
    from .stress.liquidity import LIQUIDITY_ES_COLUMNS
    from .stress.records import records_to_frame
    from .stress.run import STRESSED_WINDOW_COLUMNS, StressSettings, run_stress, stressed_samples
    from .stress.shocks import load_shock_scenarios

    market = _market_for_books(market_files)
    instr = read_parquet(instruments)
    asset = dict(zip(instr.column("instrument").to_pylist(), instr.column("asset_class").to_pylist()))
    ccy = dict(zip(instr.column("instrument").to_pylist(), instr.column("currency").to_pylist()))
    books = books_for(market, read_parquet(positions), instr, run_dates(exposures), base_currency=currency,
                      positions_file=positions_file, instruments_file=instruments_file)
    windows = load_stress_windows(windows_file)
    scenarios = load_shock_scenarios(shocks_file)
    config = StressSettings.from_config(settings)
    records, liquidity, scans, figures, notes = [], [], [], [], {}
    for book in books:
        sample = build_sample(market, book, window_days)
        meta = InstrumentMeta.from_columns(sample.instruments, [asset[i] for i in sample.instruments],
                                           [ccy[i] for i in sample.instruments], currency)
        row = int(np.searchsorted(market.dates, book.as_of))
        local = market.local[row, [market.column(i) for i in sample.instruments]]
        first, last = sample.history_dates[0], sample.history_dates[-1]
        inside = [w for w in windows if first <= w.start and w.end <= last]
        for w in windows:
            if w not in inside:  # e.g. a backdated as_of before the episode: replay what the data allows
                log.warning("stress window %s (%s to %s) lies outside the history of as_of %s (%s to %s); skipped",
                            w.name, w.start, w.end, book.as_of, first, last)
        settings_day = config
        if len(sample.history) < config.stressed_length_days:
            log.warning("history of as_of %s has %d days, fewer than the stressed window of %d: the whole history "
                        "is used", book.as_of, len(sample.history), config.stressed_length_days)
            settings_day = dataclasses.replace(config, stressed_length_days=len(sample.history))
        revalue_vol = None
        if book.sensitivities is not None:  # option books: implied-vol shocks reprice the options
            def revalue_vol(log_shocks, vol_shocks, horizon_days, _revalue=book.revalue):
                return _revalue(log_shocks, horizon_days, vol_shocks=vol_shocks)
        run = run_stress(sample, sample.history_dates, meta, windows=inside, scenarios=scenarios,
                         settings=settings_day, prices=local, revalue_vol=revalue_vol)
        records += run.records
        liquidity += run.liquidity_rows
        scans += run.stressed_window_rows
        for stressed in stressed_samples(sample, sample.history_dates, run.stressed):
            for method in stressed_methods:
                result = get_estimator(method)(stressed, confidences, horizons, options=method_options.get(method, {}),
                                               seed=as_of_seed(seed, book.as_of))
                figures.append(estimate_table(result, as_of=book.as_of, portfolios=stressed.portfolios,
                                              method=f"{method}_stressed", confidences=confidences,
                                              horizons=horizons, currency=currency))
        notes[str(book.as_of)] = run.stressed_window_rows
    results = pa.Table.from_pandas(records_to_frame(records), preserve_index=False)
    results = results.cast(pa.schema([(f.name, pa.date32() if f.name in ("as_of", "start_date", "end_date") else f.type)
                                      for f in results.schema]))
    write_parquet(results.replace_schema_metadata(None), outputs["results"])
    write_parquet(_rows_table(liquidity, LIQUIDITY_ES_COLUMNS), outputs["liquidity"])
    write_parquet(_rows_table(scans, STRESSED_WINDOW_COLUMNS), outputs["windows"])
    if figures:
        write_parquet(pa.concat_tables(figures), outputs["figures"])
    else:
        from .figures import FIGURE_SCHEMA

        write_parquet(FIGURE_SCHEMA.empty_table(), outputs["figures"])
    return notes


def run_backtest_step(market_files: Mapping[str, str], exposures: str, positions: str, instruments: str,
                      outputs: Mapping[str, str], *, methods: Sequence[str], confidences: Sequence[float],
                      days: int, window_days: int, options: Mapping[str, Mapping[str, Any]], seed: int,
                      plus_factor_rule: str, pnl_actual: str | None, currency: str, positions_file: str,
                      instruments_file: str) -> dict[str, Any]:
    """Rolling 1-day backtest of every method for every as_of of the run.

    The P&L series is today's book revalued under each historical day
    (hypothetical P&L, positions held fixed); ``pnl_actual`` replaces the
    realised side when given. With a history shorter than window + days the
    backtest covers what the history allows (logged).
    """
    from .backtest import forecast_table, read_actual_pnl, run_backtest, summary_table
    from .scenarios import build_sample

    market = _market_for_books(market_files)
    books = books_for(market, read_parquet(positions), read_parquet(instruments), run_dates(exposures),
                      base_currency=currency, positions_file=positions_file, instruments_file=instruments_file)
    forecasts, summaries, notes = [], [], {}
    for book in books:
        sample = build_sample(market, book, window_days)
        pnl = book.revalue(sample.history, 1)
        n_days = min(int(days), pnl.shape[1] - window_days)
        if n_days < 20:
            log.warning("as_of %s: %d days of history leave no backtest beyond the %d-day window; skipped",
                        book.as_of, pnl.shape[1], window_days)
            notes[str(book.as_of)] = {"skipped": True}
            continue
        if n_days < days:
            log.warning("as_of %s: history allows a %d-day backtest, not %d", book.as_of, n_days, days)
        dates = sample.history_dates
        actual = read_actual_pnl(pnl_actual, sample.portfolios, dates[-n_days:]) if pnl_actual else None
        result = run_backtest(pnl, dates, sample.portfolios, methods=methods, confidences=confidences,
                              window=window_days, days=n_days, options=options, actual_pnl=actual,
                              seed=as_of_seed(seed, book.as_of))
        for table, bucket in ((forecast_table(result), forecasts),
                              (summary_table(result, plus_factor_rule=plus_factor_rule), summaries)):
            bucket.append(table.add_column(0, "as_of", pa.array(np.full(table.num_rows, book.as_of), pa.date32())))
        notes[str(book.as_of)] = {"days": n_days, "first": str(dates[-n_days]), "last": str(dates[-1]),
                                  "pnl_source": "actual" if actual is not None else "hypothetical"}
    for key, parts in (("forecasts", forecasts), ("summary", summaries)):
        if parts:
            write_parquet(pa.concat_tables(parts), outputs[key])
        else:
            write_parquet(pa.table({"as_of": pa.array([], pa.date32())}), outputs[key])
    return notes


def run_contributions_step(market_files: Mapping[str, str], exposures: str, positions: str, instruments: str,
                           out: str, *, methods: Sequence[str], method_options: Mapping[str, Mapping[str, Any]],
                           confidences: Sequence[float], horizons: Sequence[int], window_days: int,
                           currency: str, positions_file: str, instruments_file: str) -> dict[str, Any]:
    """Risk decomposition (marginal, component, incremental, stand-alone) of the run's latest as_of.

    Books with options are decomposed on their delta-equivalent linear book
    (the ``allocation`` column says so): Euler allocation needs a P&L that is
    homogeneous in the holdings, which option payoffs are not.
    """
    import pyarrow.compute as pcompute

    from .decomposition import risk_contributions
    from .estimators.samples import linear_sample
    from .scenarios import build_sample

    market = _market_for_books(market_files)
    day = run_dates(exposures)[-1]
    book = books_for(market, read_parquet(positions), read_parquet(instruments), [day], base_currency=currency,
                     positions_file=positions_file, instruments_file=instruments_file)[0]
    sample = build_sample(market, book, window_days)
    with_options: list[str] = []
    if book.sensitivities is not None:
        sens = book.sensitivities
        flags = pcompute.not_equal(sens.column("model"), "linear")
        with_options = sorted(set(sens.filter(flags).column("portfolio").to_pylist()))
    delta_equivalent = sample.gammas is not None
    if delta_equivalent:
        sample = linear_sample(sample.returns, sample.values, history=sample.history, dates=sample.dates,
                               portfolios=sample.portfolios, instruments=sample.instruments)
        sample = dataclasses.replace(sample, as_of=book.as_of)
    tables = []
    for method in methods:
        result = risk_contributions(sample, method, confidences, horizons, options=method_options.get(method, {}),
                                    seed=int(as_of_seed(0, book.as_of).integers(2**31)))
        table = result.to_table()
        table = table.filter(pcompute.not_equal(table.column("position_value"), 0.0))  # instruments not held
        if with_options:
            col = table.column_names.index("allocation")
            marked = pcompute.is_in(table.column("portfolio"), pa.array(with_options))
            label = pcompute.if_else(marked, pcompute.binary_join_element_wise(
                table.column("allocation"), " (delta-equivalent book)", ""), table.column("allocation"))
            table = table.set_column(col, "allocation", label)
        tables.append(table)
    write_parquet(pa.concat_tables(tables), out)
    return {"as_of": str(book.as_of), "methods": list(methods), "delta_equivalent_portfolios": with_options}
