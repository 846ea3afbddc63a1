"""A deliberately straightforward implementation to benchmark the pipeline against.

It computes what a risk analyst would script by hand: pandas ``read_csv`` of
every price file and a pivot to a date × instrument table, conversion to the
base currency, then a Python loop over portfolios for historical and
parametric normal VaR/ES (scipy called per figure) and a 250-day backtest
with ``rolling().quantile()`` and ``rolling().std()``. No caching, no
vectorisation across portfolios.

It follows the package's documented rules so that the figures must agree:

- missing closes carried forward at most ``max_fill_days`` dates;
- historical VaR is the k-th worst loss and ES the mean of the k worst,
  ``k = max(1, floor(T (1 - c)))`` (``tailtrace.estimators.tail``);
- parametric normal uses the ddof = 1 covariance of daily simple returns,
  zero mean, ``VaR = σ√h z``, ``ES = σ√h φ(z)/(1 − c)``
  (``tailtrace.estimators.parametric``);
- the backtest forecast for day t uses the window of P&L before t; an
  exception is a P&L below −VaR (``tailtrace.backtest.coverage``).

Only ``positions.csv`` is read (the benchmark data has no dated books).
"""

from __future__ import annotations

import argparse
import json
import math
from dataclasses import dataclass
from pathlib import Path
from typing import Sequence

import numpy as np
import pandas as pd
from scipy import stats

__all__ = ["ReferenceResult", "run_reference", "main"]


@dataclass(frozen=True)
class ReferenceResult:
    """Figures of the reference run.

    Attributes
    ----------
    figures : DataFrame with portfolio, method, confidence, horizon_days, var, es
    exceptions : DataFrame with portfolio, method, confidence, exceptions, n
    as_of : the date the figures are for
    """

    figures: pd.DataFrame
    exceptions: pd.DataFrame
    as_of: str


def _k(n: int, confidence: float) -> int:
    return max(1, int(math.floor(n * (1.0 - confidence) + 1e-9)))


def _base_prices(data_dir: Path, base_currency: str, max_fill_days: int) -> pd.DataFrame:
    frames = [pd.read_csv(p) for p in sorted((data_dir / "prices").glob("*.csv"))]
    long = pd.concat(frames, ignore_index=True)
    long["date"] = pd.to_datetime(long["date"])
    local = long.pivot(index="date", columns="instrument", values="close").sort_index()
    local = local.ffill(limit=max_fill_days)
    instruments = pd.read_csv(data_dir / "instruments.csv")
    base = local.copy()
    for _, row in instruments.iterrows():
        if row["currency"] != base_currency and row["instrument"] in base.columns:
            base[row["instrument"]] = local[row["instrument"]] * local[f"FX.{row['currency']}"]
    return base


def run_reference(
    data_dir: str | Path,
    *,
    as_of: str,
    confidences: Sequence[float],
    horizons: Sequence[int],
    window_days: int,
    backtest_days: int = 250,
    backtest_window: int | None = None,
    base_currency: str = "EUR",
    max_fill_days: int = 3,
) -> ReferenceResult:
    """Historical and parametric normal VaR/ES plus backtest exception counts.

    Parameters
    ----------
    data_dir : folder with instruments.csv, positions.csv, prices/*.csv
    as_of : ISO date of the figures
    confidences, horizons : as in the pipeline config
    window_days : estimation window of the figures
    backtest_days : number of backtested days ending at as_of
    backtest_window : window of each backtest forecast (default window_days)
    base_currency, max_fill_days : as in the pipeline config

    Returns
    -------
    ReferenceResult
    """
    data_dir = Path(data_dir)
    backtest_window = backtest_window or window_days
    base = _base_prices(data_dir, base_currency, max_fill_days)
    log_returns = np.log(base).diff()
    simple = np.expm1(log_returns)
    day = pd.Timestamp(as_of)
    positions = pd.read_csv(data_dir / "positions.csv")
    held_all = sorted(positions["instrument"].unique())
    upto = simple.loc[:day, held_all].iloc[1:]
    history = upto[upto.notna().all(axis=1)]  # full history of the whole book (as the pipeline)
    window = upto.iloc[-window_days:]
    price_today = base.loc[day]

    figures, exceptions = [], []
    for portfolio, book in positions.groupby("portfolio", sort=True):
        names = list(book["instrument"])
        values = book["quantity"].to_numpy() * price_today[names].to_numpy()
        pnl = window[names].to_numpy() @ values
        losses = np.sort(-pnl)[::-1]
        cov = np.cov(window[names].to_numpy(), rowvar=False, ddof=1)
        sigma = float(np.sqrt(values @ cov @ values))
        for c in confidences:
            k = _k(len(pnl), c)
            var_h, es_h = losses[k - 1], losses[:k].mean()
            z = stats.norm.ppf(c)
            es_factor = stats.norm.pdf(z) / (1 - c)
            for h in horizons:
                root = math.sqrt(h)
                figures.append((portfolio, "historical", c, h, var_h * root, es_h * root))
                figures.append((portfolio, "parametric_normal", c, h, sigma * z * root, sigma * es_factor * root))

        series = pd.Series(history[names].to_numpy() @ values, index=history.index)
        tested = series.iloc[-backtest_days:]
        rolling = series.rolling(backtest_window)
        for c in confidences:
            k = _k(backtest_window, c)
            # 'lower' picks sorted index floor(q (n - 1)) = k - 1: the k-th worst P&L
            q = (k - 0.5) / (backtest_window - 1)
            hs_var = -rolling.quantile(q, interpolation="lower").shift(1).iloc[-backtest_days:]
            pn_var = rolling.std(ddof=1).shift(1).iloc[-backtest_days:] * stats.norm.ppf(c)
            for method, var in (("historical", hs_var), ("parametric_normal", pn_var)):
                exceptions.append((portfolio, method, c, int((tested < -var).sum()), int(var.notna().sum())))

    return ReferenceResult(
        figures=pd.DataFrame(figures, columns=["portfolio", "method", "confidence", "horizon_days", "var", "es"]),
        exceptions=pd.DataFrame(exceptions, columns=["portfolio", "method", "confidence", "exceptions", "n"]),
        as_of=str(day.date()),
    )


def main(argv: Sequence[str] | None = None) -> int:
    """Command line used by run_bench.py, so the timing includes the imports."""
    parser = argparse.ArgumentParser(description="Straightforward reference VaR/ES and backtest (benchmark only).")
    parser.add_argument("data_dir")
    parser.add_argument("--as-of", required=True)
    parser.add_argument("--confidences", type=float, nargs="+", required=True)
    parser.add_argument("--horizons", type=int, nargs="+", required=True)
    parser.add_argument("--window-days", type=int, required=True)
    parser.add_argument("--backtest-days", type=int, default=250)
    parser.add_argument("--backtest-window", type=int, default=None)
    parser.add_argument("--base-currency", default="EUR")
    parser.add_argument("--max-fill-days", type=int, default=3)
    parser.add_argument("--out", required=True, help="JSON file for the figures and exception counts")
    args = parser.parse_args(argv)
    result = run_reference(args.data_dir, as_of=args.as_of, confidences=args.confidences, horizons=args.horizons,
                           window_days=args.window_days, backtest_days=args.backtest_days,
                           backtest_window=args.backtest_window, base_currency=args.base_currency,
                           max_fill_days=args.max_fill_days)
    Path(args.out).write_text(json.dumps({"as_of": result.as_of, "figures": result.figures.to_dict("list"),
                                          "exceptions": result.exceptions.to_dict("list")}))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
