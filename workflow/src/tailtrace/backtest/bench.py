"""Benchmark of the rolling backtest: prints wall time and peak memory per method.

Run ``python -m tailtrace.backtest.bench --portfolios 50 --history 2500
--days 250``. Figures go to stdout; nothing is asserted.
"""

from __future__ import annotations

import argparse
import resource
import time
import warnings

import numpy as np

from ..errors import ModelWarning
from .rolling import FORECASTERS
from .tables import summary_rows
from .result import run_backtest

__all__ = ["synthetic_pnl", "main"]


def synthetic_pnl(n_portfolios: int, n_days: int, *, seed: int = 0) -> np.ndarray:
    """GARCH(1,1)-t P&L of invented portfolios, (P, T), for timing only."""
    rng = np.random.default_rng(seed)
    e = rng.standard_t(5, (n_days, n_portfolios)) * np.sqrt(3 / 5)
    s2 = np.full(n_portfolios, 1.0)
    x = np.empty((n_days, n_portfolios))
    for t in range(n_days):  # fixture generation, not part of the timed work
        x[t] = np.sqrt(s2) * e[t]
        s2 = 0.01 + 0.08 * x[t] ** 2 + 0.91 * s2
    return np.ascontiguousarray(x.T) * rng.uniform(1e4, 1e6, (n_portfolios, 1))


def main(argv: list[str] | None = None) -> None:
    """Time each method, then the summary, on synthetic data."""
    ap = argparse.ArgumentParser(description=__doc__)
    ap.add_argument("--portfolios", type=int, default=50)
    ap.add_argument("--history", type=int, default=2500)
    ap.add_argument("--days", type=int, default=250)
    ap.add_argument("--window", type=int, default=500)
    ap.add_argument("--methods", nargs="*", default=sorted(FORECASTERS))
    args = ap.parse_args(argv)
    x = synthetic_pnl(args.portfolios, args.history)
    dates = np.arange(np.datetime64("2015-01-01"), np.datetime64("2015-01-01") + args.history)
    conf = [0.99, 0.975]
    print(f"P={args.portfolios} T_all={args.history} D={args.days} window={args.window} C={len(conf)}")
    total = 0.0
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ModelWarning)
        for m in args.methods:
            t = time.perf_counter()
            FORECASTERS[m](x, conf, window=args.window, days=args.days, seed=0)
            dt = time.perf_counter() - t
            total += dt
            print(f"{m:26s} {dt:8.2f} s")
        t = time.perf_counter()
        res = run_backtest(
            x, dates, [f"book_{i:03d}" for i in range(args.portfolios)], methods=["historical"],
            confidences=conf, window=args.window, days=args.days,
        )
        summary_rows(res)
        print(f"{'summary (1 method)':26s} {time.perf_counter() - t:8.2f} s")
    peak_mb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    print(f"{'all methods':26s} {total:8.2f} s   peak RSS {peak_mb:.0f} MB")


if __name__ == "__main__":
    main()
