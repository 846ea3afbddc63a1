#!/usr/bin/env python
"""Time the batched GARCH(1,1) fit against one arch fit per series (prints figures, asserts nothing).

Usage: ``python bench/garch_timing.py [--days 1000] [--series 2000]``. The data
are a seeded simulation (Student-t GARCH(1,1) with random parameters).
"""

from __future__ import annotations

import argparse
import sys
from collections import Counter
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "workflow" / "src"))

from tailtrace.backtest.volatility import fit_garch11, fit_garch11_many  # noqa: E402
from tailtrace.estimators.garch import fit_volatility_many  # noqa: E402
from tailtrace.garch_batch import fit_garch11_batch  # noqa: E402


def simulate(n_days: int, n_series: int, seed: int = 7) -> np.ndarray:
    rng = np.random.default_rng(seed)
    alpha = rng.uniform(0.02, 0.15, n_series)
    beta = np.minimum(rng.uniform(0.80, 0.97, n_series), 0.995 - alpha)
    omega = (1 - alpha - beta) * rng.uniform(0.5, 2.0, n_series) * 1e-4
    e = rng.standard_t(5, (n_days, n_series)) * np.sqrt(3 / 5)
    s2 = omega / (1 - alpha - beta)
    x = np.empty((n_days, n_series))
    for t in range(n_days):
        x[t] = np.sqrt(s2) * e[t]
        s2 = omega + alpha * x[t] ** 2 + beta * s2
    return x


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--days", type=int, default=1000)
    parser.add_argument("--series", type=int, default=2000)
    args = parser.parse_args()
    x = simulate(args.days, args.series)

    t = time.perf_counter()
    batch = fit_garch11_batch(x)
    t_batch = time.perf_counter() - t
    t = time.perf_counter()
    estimator = fit_volatility_many(x)  # filtered_historical's path: keeps maxima on the alpha + beta edge
    t_estimator = time.perf_counter() - t
    arch_loaded = "arch" in sys.modules
    t = time.perf_counter()
    many = fit_garch11_many(x)  # the backtest's path: edge fits go to arch
    t_many = time.perf_counter() - t
    import arch  # noqa: F401  (import time is not the fit's)

    t = time.perf_counter()
    old = [fit_garch11(x[:, j]) for j in range(x.shape[1])]
    t_old = time.perf_counter() - t

    ok = np.array([f.ok for f in old]) & batch.usable
    rel = np.array([abs(batch.variance_next[j] / _next(f, x[-1, j]) - 1) for j, f in enumerate(old) if ok[j]])
    print(f"data: ({args.days}, {args.series}) simulated")
    print(f"arch, one fit per series    : {t_old:7.2f} s")
    print(f"fit_garch11_batch           : {t_batch:7.2f} s  ({batch.usable.sum()} usable, "
          f"iterations mean {batch.iterations.mean():.1f} max {batch.iterations.max()})")
    left = int((~(batch.usable | batch.edge_maximum)).sum())
    print(f"fit_volatility_many (estimator path, edge fits kept): {t_estimator:7.2f} s  "
          f"({left} series left to arch / EWMA; arch imported: {arch_loaded}; "
          f"models {dict(Counter(f.model for f in estimator))})")
    print(f"fit_garch11_many (backtest path, + arch for the rest, incl. its import): {t_many:7.2f} s  "
          f"({sum(f.ok for f in many)} ok)")
    print(f"speed-up (many vs arch)     : {t_old / t_many:7.1f} x")
    print(f"one-day variance forecast, batch vs arch: max rel diff {rel.max():.2e}, median {np.median(rel):.2e}")


def _next(fit, last_x: float) -> float:
    return fit.omega + fit.alpha * last_x**2 + fit.beta * fit.variance[-1]


if __name__ == "__main__":
    main()
