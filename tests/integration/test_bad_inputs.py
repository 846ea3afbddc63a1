"""The catalogue of rejected inputs, and hostile configuration.

Every case is a small edit of the tiny fixture dataset (or of the config).
Each is reproduced in-process through the functions the pipeline's scripts
call, asserting the message names the file, row and column (config errors:
the key). A representative subset also goes through the real pipeline by
subprocess: non-zero exit, the message in the output, and an existing
``risk.duckdb`` left byte-identical. docs/data-formats.md ("Rejected
inputs") documents every case by its id; a test keeps the two in step.

This module also holds the small harness the other integration modules
(test_crash_safety, test_concurrency) import: how to run ``tailtrace run``
on a folder with this worktree's package, and how to read figures back.
"""

from __future__ import annotations

import ast
import hashlib
import os
import re
import shutil
import subprocess
import sys
import warnings
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable, Mapping, Sequence

import numpy as np
import pyarrow as pa
import pytest
import yaml
from snakemake.exceptions import WorkflowError

ROOT = Path(__file__).resolve().parents[2]
SRC = ROOT / "workflow" / "src"
SCHEMA = ROOT / "workflow" / "schemas" / "config.schema.yaml"
sys.path.insert(0, str(ROOT / "tests"))

from fixture_data import business_days, write_tiny_dataset  # noqa: E402

from tailtrace.errors import ConfigError, DataQualityWarning, InputError  # noqa: E402

# Small enough for a few seconds per run on the tiny dataset (160 days).
# stress, backtest and decomposition have their own tests; leaving them out keeps these runs short
TEST_CONFIG: dict = {"window_days": 60, "monte_carlo": {"paths": 2000}, "stress": {"enabled": False},
                     "backtest": {"enabled": False}, "contributions": {"methods": []},
                     "methods": ["parametric_normal", "historical", "historical_overlapping", "monte_carlo"]}
FIGURE_ORDER = "as_of, portfolio, method, confidence, horizon_days"
N_DAYS = 160
DAYS = business_days("2024-01-01", N_DAYS)


# --------------------------------------------------------------------------- harness

def make_dataset(root: Path) -> Path:
    """The tiny dataset plus oddities the readers must accept (see ACCEPTED).

    instruments.csv starts with a UTF-8 byte-order mark; fx.csv has Windows
    line ends and an unknown column ``source`` (a data-quality warning).
    """
    data = write_tiny_dataset(root)
    for name in ("bom", "crlf_and_extra_column"):
        ACCEPTED[name](data)
    return data


def pipeline_env(**extra: str) -> dict[str, str]:
    """Environment in which Snakemake's script jobs import this worktree's package."""
    env = dict(os.environ)
    env["PYTHONPATH"] = os.pathsep.join([str(SRC)] + [p for p in [env.get("PYTHONPATH")] if p])
    env.pop("TAILTRACE_TEST_PAUSE_AGGREGATE", None)
    env.update(extra)
    return env


def tailtrace_command(data: Path, results: Path, workdir: Path, *, config: Mapping | None = None, cores: int = 2,
                      extra: Sequence[str] = ()) -> list[str]:
    """``tailtrace run`` on a data folder, with config overrides from a YAML file.

    ``--directory`` keeps Snakemake's own state (.snakemake/) in ``workdir``,
    away from the checkout.
    """
    workdir.mkdir(parents=True, exist_ok=True)
    text = yaml.safe_dump({**TEST_CONFIG, **(config or {})}, sort_keys=True)
    overrides = workdir / f"overrides-{hashlib.sha256(text.encode()).hexdigest()[:12]}.yaml"
    overrides.write_text(text)
    return [sys.executable, "-m", "tailtrace.cli", "run", "--results-dir", str(results), "--data-dir", str(data),
            "--cores", str(cores), "--", "--directory", str(workdir), "--configfile", str(overrides), *extra]


def run_tailtrace(data: Path, results: Path, workdir: Path, *, env: Mapping[str, str] | None = None,
                  timeout: float = 600, **kw) -> subprocess.CompletedProcess:
    return subprocess.run(tailtrace_command(data, results, workdir, **kw), env=dict(env or pipeline_env()),
                          cwd=workdir, capture_output=True, text=True, timeout=timeout)


def output_of(proc: subprocess.CompletedProcess) -> str:
    return (proc.stdout or "") + (proc.stderr or "")


def sha256(path: Path) -> str:
    return hashlib.sha256(Path(path).read_bytes()).hexdigest()


def read_figures(db: Path) -> list[tuple]:
    """Every risk_figures row, ordered by key, floats as exact hex (bitwise comparison)."""
    from tailtrace.database import open_read_only

    with open_read_only(db) as con:
        rows = con.execute(f"SELECT * FROM risk_figures ORDER BY {FIGURE_ORDER}").fetchall()
    return [tuple(v.hex() if isinstance(v, float) else v for v in row) for row in rows]


def temp_files(results: Path) -> list[str]:
    return sorted(p.name for p in results.glob(".risk.duckdb.*"))


# --------------------------------------------------------------------------- edits of the dataset

Edit = Callable[[Path], None]


def _edit_lines(rel: str, change: Callable[[list[bytes]], list[bytes]]) -> Edit:
    """Edit a file as a list of lines (1-based line n is index n - 1); CR line ends are kept."""
    def apply(data: Path) -> None:
        path = data / rel
        raw = path.read_bytes().split(b"\n")
        crlf = raw[0].endswith(b"\r")
        lines = [line.removesuffix(b"\r") for line in (raw[:-1] if raw[-1] == b"" else raw)]
        lines = change(lines)
        end = b"\r\n" if crlf else b"\n"
        path.write_bytes(end.join(lines) + end if lines else b"")
    return apply


def _b(text: str | bytes) -> bytes:
    return text if isinstance(text, bytes) else text.encode()


def replace_line(rel: str, n: int, new: str | bytes) -> Edit:
    return _edit_lines(rel, lambda ls: ls[: n - 1] + [_b(new)] + ls[n:])


def set_field(rel: str, n: int, index: int, value: str | bytes) -> Edit:
    def change(ls: list[bytes]) -> list[bytes]:
        parts = ls[n - 1].split(b",")
        parts[index] = _b(value)
        return ls[: n - 1] + [b",".join(parts)] + ls[n:]
    return _edit_lines(rel, change)


def append_lines(rel: str, *new: str) -> Edit:
    return _edit_lines(rel, lambda ls: ls + [_b(x) for x in new])


def insert_line(rel: str, n: int, new: str) -> Edit:
    return _edit_lines(rel, lambda ls: ls[: n - 1] + [_b(new)] + ls[n - 1 :])


def delete_lines(rel: str, numbers: Sequence[int]) -> Edit:
    drop = set(numbers)
    return _edit_lines(rel, lambda ls: [x for i, x in enumerate(ls, start=1) if i not in drop])


def map_lines(rel: str, fn: Callable[[bytes], bytes]) -> Edit:
    return _edit_lines(rel, lambda ls: [fn(x) for x in ls])


def rewrite(rel: str, data: bytes) -> Edit:
    def apply(root: Path) -> None:
        (root / rel).write_bytes(data)
    return apply


def both(*edits: Edit) -> Edit:
    def apply(data: Path) -> None:
        for e in edits:
            e(data)
    return apply


EQ = "prices/equities.csv"  # line 2 + 3k + j: day k, instrument j of (EQ.A, EQ.B, EQ.C)
FX = "prices/fx.csv"  # line 2 + k: FX.USD on day k
INST = "instruments.csv"  # lines 2-5: EQ.A, EQ.B, EQ.C, FX.USD
POS = "positions.csv"  # lines 2-6: LONG EQ.A, LONG EQ.C, HEDGE EQ.A, HEDGE EQ.B, HEDGE FX.USD
LAST_EQ = 1 + 3 * N_DAYS  # last line of equities.csv
GAP = range(120, 125)  # five business days inside the 60-day window ending on day 159
OPTION_COLS = "underlying,option_type,strike,expiry,implied_vol"


@dataclass(frozen=True)
class Bad:
    """One rejected input: how to make it, what the message must say, which step says it."""

    id: str
    what: str
    edit: Edit | None
    match: str
    where: str
    config: dict = field(default_factory=dict)
    error: type = InputError
    pipeline: bool = False  # also run through Snakemake
    in_process: bool = True  # reproducible without Snakemake


CATALOGUE: list[Bad] = [
    # prices/*.csv
    Bad("price_empty_file", "empty price file", rewrite(EQ, b""),
        r"equities\.csv, row 1, column 'date': file is empty", "ingest_prices", pipeline=True),
    Bad("price_header_only", "header row only", rewrite(EQ, b"date,instrument,close\n"),
        r"equities\.csv, row 2, column 'date': no data rows below the header", "ingest_prices"),
    Bad("price_missing_column", "no close column", map_lines(EQ, lambda x: b",".join(x.split(b",")[:2])),
        r"equities\.csv, row 1, column 'close': missing required column\(s\) close", "ingest_prices"),
    Bad("price_wrong_delimiter", "semicolons instead of commas", map_lines(EQ, lambda x: x.replace(b",", b";")),
        r"equities\.csv, row 1, column 'date': missing required .* another delimiter than a comma", "ingest_prices"),
    Bad("price_non_utf8", "Latin-1 byte in a name", set_field(EQ, 3, 1, b"EQ.\xc9"),
        r"equities\.csv, row 3, column 'instrument': file is not valid UTF-8 text", "ingest_prices", pipeline=True),
    Bad("price_date_format", "date as DD/MM/YYYY", set_field(EQ, 5, 0, "02/01/2024"),
        r"equities\.csv, row 5, column 'date': not a valid ISO 8601 date; expected YYYY-MM-DD \(found '02/01/2024'\)",
        "ingest_prices"),
    Bad("price_impossible_date", "30 February", set_field(EQ, 5, 0, "2024-02-30"),
        r"equities\.csv, row 5, column 'date': not a valid ISO 8601 date", "ingest_prices"),
    Bad("price_ancient_date", "year typed as 0024", set_field(EQ, 5, 0, "0024-01-02"),
        r"equities\.csv, row 5, column 'date': date before 1800-01-01", "ingest_prices"),
    Bad("price_future_date", "a date after today", append_lines(EQ, "2099-01-05,EQ.A,101.0"),
        rf"equities\.csv, row {LAST_EQ + 1}, column 'date': date lies in the future", "ingest_prices"),
    Bad("price_duplicate_row", "the same row twice", _edit_lines(EQ, lambda ls: ls + [ls[4]]),
        rf"equities\.csv, row {LAST_EQ + 1}, column 'date': duplicate row: same date and instrument as row 5", "ingest_prices"),
    Bad("price_conflicting_duplicate", "two closes for one date", append_lines(EQ, f"{DAYS[1]},EQ.A,999.0"),
        rf"equities\.csv, row {LAST_EQ + 1}, column 'date': conflicting prices .*rows 5 and {LAST_EQ + 1}", "ingest_prices"),
    Bad("price_zero_close", "close 0", set_field(EQ, 5, 2, "0"),
        r"equities\.csv, row 5, column 'close': must be greater than zero", "ingest_prices"),
    Bad("price_negative_close", "close -101.5", set_field(EQ, 5, 2, "-101.5"),
        r"equities\.csv, row 5, column 'close': must be greater than zero", "ingest_prices"),
    Bad("price_nan_close", "close NaN", set_field(EQ, 5, 2, "NaN"),
        r"equities\.csv, row 5, column 'close': not a plain decimal number", "ingest_prices"),
    Bad("price_inf_close", "close inf", set_field(EQ, 5, 2, "inf"),
        r"equities\.csv, row 5, column 'close': not a plain decimal number", "ingest_prices"),
    Bad("price_overflow_close", "close 1e999", set_field(EQ, 5, 2, "1e999"),
        r"equities\.csv, row 5, column 'close': number out of range", "ingest_prices"),
    Bad("price_text_close", "close n/a", set_field(EQ, 5, 2, "n/a"),
        r"equities\.csv, row 5, column 'close': not a plain decimal number .*\(found 'n/a'\)", "ingest_prices"),
    Bad("price_thousands_quoted", 'close "1,101.50"', set_field(EQ, 5, 2, '"1,101.50"'),
        r"equities\.csv, row 5, column 'close': not a plain decimal number \(no thousands separators", "ingest_prices"),
    Bad("price_thousands_unquoted", "close 1,101.50", set_field(EQ, 5, 2, "1,101.50"),
        r"equities\.csv, row 5, column 'close': 4 fields where the header has 3 .*thousands separator", "ingest_prices",
        pipeline=True),
    Bad("price_missing_value", "a row without its close", replace_line(EQ, 5, f"{DAYS[1]},EQ.A"),
        r"equities\.csv, row 5, column 'close': 2 fields where the header has 3", "ingest_prices"),
    Bad("price_blank_line", "blank line between rows", insert_line(EQ, 5, ""),
        r"equities\.csv, row 5, column 'date': blank line inside the data", "ingest_prices"),
    Bad("price_unbalanced_quote", "an opening quote never closed", set_field(EQ, 5, 2, '"101.5'),
        r"equities\.csv, row 5, column 'close': unbalanced double quote", "ingest_prices"),
    Bad("price_unknown_instrument", "price of an instrument not in instruments.csv", set_field(EQ, 5, 1, "EQ.Z"),
        r"equities\.csv, row 5, column 'instrument': unknown instrument: not listed in instruments\.csv", "ingest_prices"),
    Bad("price_empty_instrument", "empty instrument name", set_field(EQ, 5, 1, ""),
        r"equities\.csv, row 5, column 'instrument': empty value", "ingest_prices"),
    # instruments.csv
    Bad("instruments_duplicate", "an instrument listed twice", append_lines(INST, "EQ.A,equity,EUR"),
        r"instruments\.csv, row 6, column 'instrument': instrument listed twice \(rows 2 and 6\)", "ingest_instruments"),
    Bad("instruments_unknown_asset_class", "asset_class 'stock'", set_field(INST, 2, 1, "stock"),
        r"instruments\.csv, row 2, column 'asset_class': unknown asset_class", "ingest_instruments"),
    Bad("instruments_bad_currency", "currency 'usd'", set_field(INST, 4, 2, "usd"),
        r"instruments\.csv, row 4, column 'currency': currency must be a three-letter ISO 4217 code", "ingest_instruments"),
    Bad("instruments_option_empty_strike", "option row with an empty strike",
        both(map_lines(INST, lambda x: x + (b"," + OPTION_COLS.encode() if x.lstrip(b"\xef\xbb\xbf").startswith(b"instrument,") else b",,,,,")),
             append_lines(INST, "OPT.A,option,EUR,EQ.A,call,,2024-12-20,0.25")),
        r"instruments\.csv, row 6, column 'strike': empty strike; an option needs", "ingest_instruments", pipeline=True),
    Bad("instruments_option_missing_columns", "option row, no option columns", append_lines(INST, "OPT.A,option,EUR"),
        r"instruments\.csv, row 6, column 'underlying': an option row needs column 'underlying'", "ingest_instruments"),
    # positions.csv
    Bad("positions_unknown_instrument", "position in an instrument not listed", append_lines(POS, "LONG,EQ.Z,10"),
        r"positions\.csv, row 7, column 'instrument': position in an unknown instrument", "ingest_positions",
        pipeline=True),
    Bad("positions_non_numeric_quantity", "quantity 'two hundred'", set_field(POS, 3, 2, "two hundred"),
        r"positions\.csv, row 3, column 'quantity': not a plain decimal number", "ingest_positions", pipeline=True),
    Bad("positions_thousands", 'quantity "1,000"', set_field(POS, 2, 2, '"1,000"'),
        r"positions\.csv, row 2, column 'quantity': not a plain decimal number", "ingest_positions"),
    Bad("positions_duplicate", "a position listed twice", append_lines(POS, "LONG,EQ.A,5"),
        r"positions\.csv, row 7, column 'instrument': position listed twice for this portfolio \(rows 2 and 7\)",
        "ingest_positions"),
    Bad("positions_portfolio_no_positions", "a portfolio whose quantities are all zero",
        both(set_field(POS, 4, 2, "0"), set_field(POS, 5, 2, "0"), set_field(POS, 6, 2, "0")),
        r"positions\.csv, row 4, column 'quantity': portfolio has no positions \(every quantity is zero\) \(found 'HEDGE'\)",
        "ingest_positions"),
    Bad("positions_header_only", "no positions at all", rewrite(POS, b"portfolio,instrument,quantity\n"),
        r"positions\.csv, row 2, column 'portfolio': no data rows below the header", "ingest_positions"),
    Bad("positions_no_prices", "position in a listed instrument that has no prices",
        both(append_lines(INST, "EQ.D,equity,EUR"), append_lines(POS, "LONG,EQ.D,10")),
        r"positions\.csv, row 7, column 'instrument': position in an instrument that has no prices", "build_scenarios"),
    # market data across files
    Bad("fx_missing_series", "a currency without an FX rate", set_field(INST, 4, 2, "GBP"),
        r"instruments\.csv, row 4, column 'currency': no FX series FX\.GBP to convert GBP to EUR", "build_returns",
        pipeline=True),
    Bad("fx_series_not_in_base", "FX series quoted in its own currency", set_field(INST, 5, 2, "USD"),
        r"instruments\.csv, row 5, column 'currency': an FX series must be priced in the base currency EUR", "build_returns"),
    Bad("fx_gap_beyond_fill_limit", "FX rate missing on 5 dates (fill limit 3)", delete_lines(FX, [2 + k for k in GAP]),
        r"positions\.csv, row 3, column 'instrument': instrument \S+ lacks prices inside the 60-day window .*"
        r"FX rate converting it to the base currency is missing", "build_scenarios"),
    Bad("price_gap_beyond_fill_limit", "close missing on 5 dates (fill limit 3)", delete_lines(EQ, [3 + 3 * k for k in GAP]),
        r"positions\.csv, row 5, column 'instrument': instrument \S+ lacks prices inside the 60-day window .*"
        r"no close on 2024-06-20: a gap longer than the fill limit", "build_scenarios"),
    Bad("too_little_history", "instrument with 30 days of prices, window 60",
        both(append_lines(INST, "EQ.D,equity,EUR"), append_lines(POS, "LONG,EQ.D,10"),
             append_lines(EQ, *(f"{d},EQ.D,{50 + i / 10:.2f}" for i, d in enumerate(DAYS[-30:])))),
        r"positions\.csv, row 7, column 'instrument': instrument \S+ lacks prices inside the 60-day window .*"
        rf"its first price is on {DAYS[-30]}: too little history for the window",
        "build_scenarios"),
    # configuration
    Bad("config_confidence_above_one", "confidences: [0.99, 1.5]", None,
        r"1\.5 is greater than or equal to the maximum of 1(?s:.*)On instance\['confidences'\]\[1\]", "Snakefile (schema)",
        config={"confidences": [0.99, 1.5]}, error=WorkflowError, pipeline=True),
    Bad("config_confidence_zero", "confidences: [0]", None,
        r"0 is less than or equal to the minimum of 0\.5(?s:.*)On instance\['confidences'\]\[0\]", "Snakefile (schema)",
        config={"confidences": [0]}, error=WorkflowError),
    Bad("config_negative_horizon", "horizons_days: [-10]", None,
        r"-10 is less than the minimum of 1(?s:.*)On instance\['horizons_days'\]\[0\]", "Snakefile (schema)",
        config={"horizons_days": [-10]}, error=WorkflowError),
    Bad("config_unknown_method", "methods: [magic_var]", None,
        r"'magic_var' is not one of \[(?s:.*)On instance\['methods'\]\[1\]", "Snakefile (schema)",
        config={"methods": ["historical", "magic_var"]}, error=WorkflowError, pipeline=True),
    Bad("config_unknown_key", "a misspelt key (window: 60)", None,
        r"Additional properties are not allowed \('window' was unexpected\)", "Snakefile (schema)",
        config={"window": 60}, error=WorkflowError),
    Bad("config_unknown_nested_key", "monte_carlo: {path: 10}", None,
        r"Additional properties are not allowed \('path' was unexpected\)(?s:.*)schema\['properties'\]\['monte_carlo'\]",
        "Snakefile (schema)", config={"monte_carlo": {"path": 10}}, error=WorkflowError),
    Bad("config_window_not_integer", "window_days: sixty", None,
        r"'sixty' is not of type 'integer'(?s:.*)On instance\['window_days'\]", "Snakefile (schema)",
        config={"window_days": "sixty"}, error=WorkflowError),
    Bad("config_base_currency", "base_currency: eur", None,
        r"'eur' does not match(?s:.*)On instance\['base_currency'\]", "Snakefile (schema)",
        config={"base_currency": "eur"}, error=WorkflowError),
    Bad("config_window_larger_than_history", "window_days: 500 with 159 returns", None,
        r"window_days=500 is larger than the history: only 159 daily returns up to 2024-08-09", "build_scenarios",
        config={"window_days": 500}, error=ConfigError, pipeline=True),
    Bad("config_as_of_not_a_price_date", "as_of on a Saturday", None,
        r"as_of 2024-06-15 is not a date of the price files", "build_scenarios",
        config={"as_of": "2024-06-15"}, error=ConfigError),
    Bad("config_path_outside_data_dir", "inputs: {instruments: ../../etc/passwd}", None,
        r"config inputs\.instruments=\.\./\.\./etc/passwd points outside data_dir", "Snakefile (common.smk data_path)",
        config={"inputs": {"instruments": "../../etc/passwd"}}, error=WorkflowError, pipeline=True, in_process=False),
]
PIPELINE_CASES = [c for c in CATALOGUE if c.pipeline]
IN_PROCESS_CASES = [c for c in CATALOGUE if c.in_process]


def test_catalogue_is_large_and_unique():
    ids = [c.id for c in CATALOGUE]
    assert len(ids) == len(set(ids))
    assert len(CATALOGUE) >= 25 and len(PIPELINE_CASES) >= 8


# --------------------------------------------------------------------------- in-process reproduction

def full_config(data: Path, results: Path, overrides: Mapping) -> dict:
    """config/config.yaml + test overrides, validated and filled like the Snakefile does."""
    from snakemake.utils import validate

    config = yaml.safe_load((ROOT / "config" / "config.yaml").read_text())
    for part in (TEST_CONFIG, overrides, {"data_dir": str(data), "results_dir": str(results)}):
        for key, value in part.items():
            config[key] = {**config[key], **value} if isinstance(value, dict) and isinstance(config.get(key), dict) else value
    validate(config, str(SCHEMA))
    return config


def run_steps(data: Path, out: Path, config: Mapping) -> list[str]:
    """The pipeline's steps up to the scenarios, called as the rules call them."""
    from tailtrace import pipeline as pl

    inputs = config["inputs"]
    out.mkdir(parents=True, exist_ok=True)
    instruments = str(out / "instruments.parquet")
    pl.ingest_instruments(str(data / inputs["instruments"]), instruments)
    positions = [str(data / inputs["positions"])] + sorted(str(p) for p in (data / inputs["positions_dir"]).glob("*.csv"))
    pl.ingest_positions(positions, str(data / inputs["instruments"]), str(out / "positions.parquet"))
    prices = []
    for f in sorted((data / inputs["prices_dir"]).glob("*.csv")):
        prices.append(str(out / f"prices-{f.stem}.parquet"))
        pl.ingest_prices(str(f), str(data / inputs["instruments"]), prices[-1], str(out / f"quality-{f.stem}.parquet"),
                         stale_days=config["data_quality"]["stale_days"])
    market = {k: str(out / f"{k}.parquet") for k in ("local", "base", "observed", "returns", "filled")}
    pl.build_returns(prices, instruments, market, base_currency=config["base_currency"],
                     max_fill_days=config["returns"]["max_fill_days"], instruments_file=str(data / inputs["instruments"]))
    return pl.build_scenarios(market, str(out / "positions.parquet"), instruments,
                              {"exposures": str(out / "exposures.parquet"), "pnl": str(out / "pnl.parquet"),
                               "sensitivities": str(out / "sensitivities.parquet")},
                              as_of=config["as_of"], window_days=config["window_days"],
                              positions_file=str(data / inputs["positions"]),
                              instruments_file=str(data / inputs["instruments"]),
                              base_currency=config["base_currency"])


@pytest.fixture(scope="module")
def base_data(tmp_path_factory) -> Path:
    return make_dataset(tmp_path_factory.mktemp("catalogue") / "data")


def test_the_base_dataset_passes_every_step(base_data, tmp_path):
    with pytest.warns(DataQualityWarning, match="'source'"):
        dates = run_steps(base_data, tmp_path / "out", full_config(base_data, tmp_path, {}))
    assert dates == [str(DAYS[-1])]


@pytest.mark.parametrize("case", IN_PROCESS_CASES, ids=[c.id for c in IN_PROCESS_CASES])
def test_rejected_in_process(case, base_data, tmp_path):
    data = tmp_path / "data"
    shutil.copytree(base_data, data)
    if case.edit:
        case.edit(data)
    with pytest.raises(case.error, match=case.match) as info, warnings.catch_warnings():
        warnings.simplefilter("ignore", DataQualityWarning)  # fx.csv's extra column
        run_steps(data, tmp_path / "out", full_config(data, tmp_path / "results", case.config))
    if isinstance(info.value, InputError):  # located: a file inside the data folder, a row, a column
        assert Path(info.value.file).is_relative_to(data)
        assert info.value.row is not None and info.value.column is not None
        assert re.search(rf"^file {re.escape(str(data))}/\S+, row \d+, column '\w+': ", str(info.value))


# --------------------------------------------------------------------------- accepted oddities

def _add_column(rel: str, name: str, value: str) -> Edit:
    return _edit_lines(rel, lambda ls: [ls[0] + b"," + _b(name)] + [x + b"," + _b(value) for x in ls[1:]])


def _crlf(rel: str) -> Edit:
    def apply(data: Path) -> None:
        path = data / rel
        path.write_bytes(path.read_bytes().replace(b"\n", b"\r\n"))
    return apply


ACCEPTED: dict[str, Edit] = {
    "bom": lambda d: (d / INST).write_bytes(b"\xef\xbb\xbf" + (d / INST).read_bytes()),
    "crlf_and_extra_column": both(_add_column(FX, "source", "vendor-x"), _crlf(FX)),
    "unsorted_rows": _edit_lines(EQ, lambda ls: ls[:1] + ls[1:][::-1]),
    "quoted_header": _edit_lines(EQ, lambda ls: [b'"date","instrument","close"'] + ls[1:]),
    "spaces_around_values": _edit_lines(EQ, lambda ls: ls[:1] + [b" , ".join(x.split(b",")) for x in ls[1:]]),
    "trailing_blank_lines": _edit_lines(POS, lambda ls: ls + [b"", b"  "]),
}


@pytest.fixture(scope="module")
def pristine(tmp_path_factory) -> tuple[Path, Path]:
    """The unedited tiny dataset and its scenarios."""
    root = tmp_path_factory.mktemp("pristine")
    data = write_tiny_dataset(root / "data")
    run_steps(data, root / "out", full_config(data, root, {}))
    return data, root / "out"


@pytest.mark.parametrize("name", sorted(ACCEPTED))
def test_accepted_oddities_give_the_same_scenarios(name, pristine, tmp_path):
    import pyarrow.parquet as pq

    data = tmp_path / "data"
    shutil.copytree(pristine[0], data)
    ACCEPTED[name](data)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DataQualityWarning)
        run_steps(data, tmp_path / "out", full_config(data, tmp_path, {}))
    for f in ("pnl", "exposures"):
        odd, plain = (pq.read_table(d / f"{f}.parquet") for d in (tmp_path / "out", pristine[1]))
        if f == "exposures":  # the source path differs, nothing else may
            odd, plain = odd.drop_columns(["positions_file"]), plain.drop_columns(["positions_file"])
        assert odd.equals(plain)


# --------------------------------------------------------------------------- through the real pipeline

@dataclass(frozen=True)
class GoodBuild:
    root: Path
    data: Path
    db: Path
    db_sha: str
    workdir: Path


@pytest.fixture(scope="module")
def good(tmp_path_factory) -> GoodBuild:
    """One successful pipeline run: the database every failing run must leave alone."""
    root = tmp_path_factory.mktemp("bad_inputs_pipeline")
    data = make_dataset(root / "data")
    results, workdir = root / "results", root / "work"
    proc = run_tailtrace(data, results, workdir)
    assert proc.returncode == 0, output_of(proc)[-4000:]
    db = results / "risk.duckdb"
    return GoodBuild(root, data, db, sha256(db), workdir)


@pytest.mark.slow
def test_good_build_recorded_the_extra_column_as_a_warning(good):
    from tailtrace.database import open_read_only

    with open_read_only(good.db) as con:
        rows = con.execute("SELECT file, \"check\", detail FROM data_quality WHERE \"check\" = ?", ["extra_column"]).fetchall()
        n = con.execute("SELECT count(*) FROM risk_figures").fetchone()[0]
    assert [(Path(f).name, c) for f, c, _ in rows] == [("fx.csv", "extra_column")]
    assert "'source'" in rows[0][2]
    assert n == 2 * 4 * 3 * 2  # portfolios × methods × confidences × horizons


@pytest.mark.slow
@pytest.mark.parametrize("case", PIPELINE_CASES, ids=[c.id for c in PIPELINE_CASES])
def test_rejected_by_the_pipeline_leaves_the_database_untouched(case, good, tmp_path):
    data = tmp_path / "data"
    shutil.copytree(good.data, data)
    if case.edit:
        case.edit(data)
    results = tmp_path / "results"
    results.mkdir()
    shutil.copy2(good.db, results / "risk.duckdb")
    proc = run_tailtrace(data, results, good.workdir, config=case.config)
    text = output_of(proc)
    assert proc.returncode != 0, text[-3000:]
    assert re.search(case.match, text), f"expected /{case.match}/ in:\n{text[-3000:]}"
    assert sha256(results / "risk.duckdb") == good.db_sha
    assert not (results / "aggregate.json").exists()
    assert temp_files(results) == []


# --------------------------------------------------------------------------- hostile configuration and data

@pytest.mark.slow
def test_outside_paths_are_refused_unless_allowed(good, tmp_path):
    """An absolute path outside data_dir plans only with allow_outside_paths: true (dry runs)."""
    elsewhere = tmp_path / "elsewhere.csv"
    shutil.copy2(good.data / "instruments.csv", elsewhere)
    results = tmp_path / "results"
    inputs = {"inputs": {"instruments": str(elsewhere)}}
    refused = run_tailtrace(good.data, results, good.workdir, config=inputs, extra=["-n"])
    assert refused.returncode != 0
    assert re.search(r"config inputs\.instruments=\S*elsewhere\.csv points outside data_dir", output_of(refused))
    allowed = run_tailtrace(good.data, results, good.workdir, config={**inputs, "allow_outside_paths": True}, extra=["-n"])
    assert allowed.returncode == 0, output_of(allowed)[-3000:]
    assert str(elsewhere) in output_of(allowed)


def _objects(schema: Mapping, path: str = "$"):
    if isinstance(schema, Mapping):
        if schema.get("type") == "object":
            yield path, schema
        for key, value in schema.items():
            yield from _objects(value, f"{path}.{key}")
    elif isinstance(schema, list):
        for i, value in enumerate(schema):
            yield from _objects(value, f"{path}[{i}]")


def test_every_object_in_the_config_schema_is_closed():
    objects = list(_objects(yaml.safe_load(SCHEMA.read_text())))
    assert len(objects) > 5
    open_ = [p for p, o in objects if o.get("additionalProperties") is not False]
    assert open_ == [], f"objects accepting unknown keys (typos pass silently): {open_}"


SQL_METHODS = {"execute", "executemany", "sql", "query"}
# Identifiers database.py interpolates, each checked against an allow-list pattern first.
ALLOWED_INTERPOLATIONS = {("database.py", "name"), ("database.py", "mode"), ("database.py", "cols"),
                          # the report's reader: table and column names from its REPORT_TABLES allow-list
                          ("store.py", "select"), ("store.py", "table")}


def test_no_sql_is_built_by_formatting_data_values():
    """Static check of the package: formatted SQL interpolates only allow-listed identifiers."""
    found = set()
    for path in sorted((SRC / "tailtrace").rglob("*.py")):
        for node in ast.walk(ast.parse(path.read_text())):
            if not (isinstance(node, ast.Call) and isinstance(node.func, ast.Attribute) and node.func.attr in SQL_METHODS
                    and node.args):
                continue
            sql = node.args[0]
            assert not isinstance(sql, ast.BinOp), f"{path.name}:{node.lineno}: SQL built with + or %"
            assert not (isinstance(sql, ast.Call) and getattr(sql.func, "attr", "") == "format"), \
                f"{path.name}:{node.lineno}: SQL built with str.format"
            if isinstance(sql, ast.JoinedStr):
                for part in sql.values:
                    if isinstance(part, ast.FormattedValue):
                        found.add((path.name, ast.unparse(part.value)))
    assert found <= ALLOWED_INTERPOLATIONS, f"SQL interpolates {found - ALLOWED_INTERPOLATIONS}; bind values with ?"
    assert found, "the scan found no formatted SQL at all: is it still looking at the package?"


@pytest.mark.parametrize("name", ['risk_figures"; DROP TABLE runs; --', "Risk", "x y", "ümlaut", "1abc", ""])
def test_write_database_refuses_odd_table_names(tmp_path, name):
    from tailtrace.database import write_database
    from tailtrace.errors import TailtraceError

    with pytest.raises(TailtraceError, match="invalid table name"):
        write_database(tmp_path / "risk.duckdb", {name: pa.table({"as_of": [1]})})
    assert not (tmp_path / "risk.duckdb").exists()


def test_write_database_refuses_an_odd_replacement_column(tmp_path):
    from tailtrace.database import write_database
    from tailtrace.errors import TailtraceError

    with pytest.raises(TailtraceError, match="invalid replacement column"):
        write_database(tmp_path / "risk.duckdb", {"extra": pa.table({"as_of": [1]})}, modes={"extra": 'as_of" OR 1=1 --'})


def test_hostile_text_values_are_stored_verbatim(tmp_path):
    from tailtrace.database import open_read_only, write_database

    evil = ["'); DROP TABLE risk_figures; --", 'a"b', "x\x00y", "€ ünïcode", "%s ? $1"]
    write_database(tmp_path / "risk.duckdb", {"notes": pa.table({"as_of": np.arange(5), "text": evil})})
    write_database(tmp_path / "risk.duckdb", {"notes": pa.table({"as_of": [9], "text": ["more"]})})
    with open_read_only(tmp_path / "risk.duckdb") as con:
        got = [r[0] for r in con.execute("SELECT text FROM notes ORDER BY as_of").fetchall()]
        tables = {r[0] for r in con.execute("SELECT table_name FROM information_schema.tables").fetchall()}
    assert got == evil + ["more"]
    assert tables == {"notes"}


def test_catalogue_is_documented():
    """docs/data-formats.md, section "Rejected inputs", lists every case by id."""
    text = (ROOT / "docs" / "data-formats.md").read_text()
    assert "## Rejected inputs" in text
    section = text.split("## Rejected inputs", 1)[1].split("\n## ", 1)[0]
    documented = set(re.findall(r"^\| `(\w+)` \|", section, flags=re.M))
    expected = {c.id for c in CATALOGUE}
    assert expected - documented == set(), f"undocumented: {sorted(expected - documented)}"
    assert documented - expected == set(), f"documented but not tested: {sorted(documented - expected)}"
