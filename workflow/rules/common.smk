# Helpers shared by every rule: paths, parameter slices, code versions.
import json
from importlib import metadata
from pathlib import Path

from tailtrace.codeversion import code_version as _code_version

SRC = Path(workflow.basedir) / "workflow" / "src" / "tailtrace"
DATA = Path(config["data_dir"])
RESULTS = Path(config["results_dir"])
SAFE_NAME = "[A-Za-z0-9][A-Za-z0-9_.-]*"
ENV = "../envs/tailtrace.yaml"  # used only with --sdm conda


wildcard_constraints:
    name=SAFE_NAME,


def data_path(key):
    """Input file named in config['inputs'][key], resolved inside data_dir."""
    raw = Path(config["inputs"][key])
    resolved = (DATA / raw).resolve()
    if not config["allow_outside_paths"] and not resolved.is_relative_to(DATA.resolve()):
        raise ValueError(
            f"config inputs.{key}={raw} points outside data_dir {DATA}; "
            "set allow_outside_paths: true to allow it"
        )
    return str(DATA / raw) if not raw.is_absolute() else str(raw)


def result_path(*parts):
    return str(RESULTS.joinpath(*parts))


def log_path(rule, *parts):
    return result_path("logs", rule, *parts) if parts else result_path("logs", f"{rule}.log")


def bench_path(rule, *parts):
    return result_path("benchmarks", rule, *parts) if parts else result_path("benchmarks", f"{rule}.tsv")


def prov_path(rule, *parts):
    return result_path("provenance", rule, *parts) if parts else result_path("provenance", f"{rule}.json")


def price_names():
    """Stems of the price files; each is ingested by its own job."""
    folder = Path(data_path("prices_dir"))
    names = sorted(p.stem for p in folder.glob("*.csv"))
    if not names:
        raise ValueError(f"no price files (*.csv) in {folder}")
    import re

    bad = [n for n in names if not re.fullmatch(SAFE_NAME, n)]
    if bad:
        raise ValueError(f"price file name {bad[0]!r} in {folder}: use letters, digits, '_', '-' or '.'")
    return names


def positions_files():
    """positions.csv (if present) plus every dated positions/<YYYY-MM-DD>.csv."""
    files = []
    undated = Path(data_path("positions"))
    if undated.exists():
        files.append(str(undated))
    folder = Path(data_path("positions_dir"))
    if folder.is_dir():
        files += sorted(str(p) for p in folder.glob("*.csv"))
    if not files:
        raise ValueError(f"no positions: neither {undated} nor {folder}/<YYYY-MM-DD>.csv exists")
    return files


def code_version(*modules):
    """Hash of the package modules a rule runs and what they import (Snakemake does not track imports)."""
    return _code_version(SRC, modules)


def lib_versions(*names):
    return ",".join(f"{n}={metadata.version(n)}" for n in names)


def as_json(value):
    """Stable text for a params slice (dict order never causes a rerun)."""
    return json.dumps(value, sort_keys=True)


def method_options(method):
    return as_json(config.get(method, {}))


def method_seed(method):
    section = config.get(method, {})
    return int(section.get("seed", config["seed"]))


def estimator_modules(method):
    from tailtrace.estimators.registry import METHODS

    return ("estimators/registry", METHODS[method][0].removeprefix("tailtrace."))


def estimate_files():
    files = [result_path("estimates", f"{m}.parquet") for m in config["methods"]]
    if stress_enabled():
        files.append(result_path("stress", "stressed_figures.parquet"))
    return files


def quality_files():
    return [result_path("quality", f"{n}.parquet") for n in price_names()] + [result_path("quality", "filled.parquet")]


def record_files():
    rules = ["ingest_instruments", "ingest_positions", "build_returns", "build_scenarios"]
    rules += [f"estimate_{m}" for m in config["methods"]]
    rules += ["stress"] if stress_enabled() else []
    rules += ["backtest"] if backtest_enabled() else []
    rules += ["contributions"] if config["contributions"]["methods"] else []
    return [prov_path(r) for r in rules] + [prov_path("ingest_prices", f"{n}.json") for n in price_names()]


def market_outputs():
    """Wide Parquet tables (for reviewers and DuckDB) and the same matrices as .npy (fast loads for the steps)."""
    keys = ("local", "base", "observed", "returns")
    tables = {k: result_path("market", f"{k}.parquet") for k in keys}
    return {**tables, **{f"{k}_matrix": result_path("market", f"{k}.npy") for k in keys}}


def config_snapshot():
    return as_json(config)


def repo_path(path):
    """A config path: absolute as given, relative ones from the repository root."""
    p = Path(path)
    return str(p if p.is_absolute() else Path(workflow.basedir) / p)


def stress_enabled():
    return bool(config["stress"]["enabled"])


def stress_settings():
    skip = {"enabled", "windows_file", "shocks_file", "stressed_methods"}
    return {k: v for k, v in config["stress"].items() if k not in skip}


def extra_table_files():
    """DuckDB table name -> Parquet file(s) the aggregate stores besides the figures."""
    files = {
        "sensitivities": result_path("scenarios", "sensitivities.parquet"),
        "instrument_notes": [result_path("estimates", "notes", f"{m}.parquet") for m in config["methods"]],
    }
    if config["contributions"]["methods"]:
        files["risk_contributions"] = result_path("contributions", "risk_contributions.parquet")
    if backtest_enabled():
        files.update({
            "backtest_forecasts": result_path("backtest", "forecasts.parquet"),
            "backtest_summary": result_path("backtest", "summary.parquet"),
        })
    if stress_enabled():
        files.update({
            "stress_results": result_path("stress", "stress_results.parquet"),
            "liquidity_es": result_path("stress", "liquidity_es.parquet"),
            "stressed_windows": result_path("stress", "stressed_windows.parquet"),
        })
    return files


def limits_input():
    """The limits file as a named input, or nothing when report.limits is null."""
    path = config["report"]["limits"]
    return {"limits": repo_path(path)} if path else {}


def backtest_enabled():
    return bool(config["backtest"]["enabled"])


def pnl_actual_input():
    """data_dir/pnl_actual.csv (date, portfolio, pnl) when it exists: realised P&L for the backtest."""
    path = Path(data_path("pnl_actual"))
    return {"pnl_actual": str(path)} if path.exists() else {}


SLOW_METHODS = ("filtered_historical", "monte_carlo_t", "monte_carlo")  # longest jobs first on few cores


def slow_method_priority(method):
    return 10 if method in SLOW_METHODS else 0


def book_inputs(local=True):
    """Inputs of every step that rebuilds the day's books: market data, as_of dates, positions, instruments.

    ``local=False`` leaves out the local-currency prices, which the estimators
    never read (each input is also hashed into the step record).
    """
    market = {k: v for k, v in market_outputs().items() if local or not k.startswith("local")}
    return {
        **market,
        "exposures": rules.build_scenarios.output.exposures,
        "positions": rules.ingest_positions.output.positions,
        "instruments": rules.ingest_instruments.output.instruments,
    }


def book_params():
    """Params of every step that rebuilds the day's books (names used in error messages, base currency)."""
    return {
        "currency": config["base_currency"],
        "positions_file": data_path("positions"),
        "instruments_file": data_path("instruments"),
    }
