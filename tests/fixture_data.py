"""Seeded tiny input folders for tests (a few instruments, two currencies)."""

from __future__ import annotations

from pathlib import Path

import numpy as np

__all__ = ["write_tiny_dataset", "business_days"]


def business_days(start: str, n: int) -> np.ndarray:
    days = np.arange(np.datetime64(start, "D"), np.datetime64(start, "D") + n * 2)
    weekday = (days.astype("datetime64[D]").view("int64") - 4) % 7  # 1970-01-01 was a Thursday
    return days[weekday < 5][:n]


def write_tiny_dataset(root: Path, *, n_days: int = 160, seed: int = 7) -> Path:
    """Write instruments.csv, positions.csv and two price files under ``root``.

    Instruments: two EUR equities (EQ.A, EQ.B), one USD equity (EQ.C), the FX
    series FX.USD. Portfolios: LONG and HEDGE.
    """
    rng = np.random.default_rng(seed)
    root.mkdir(parents=True, exist_ok=True)
    (root / "prices").mkdir(exist_ok=True)
    dates = business_days("2024-01-01", n_days)
    vols = np.array([0.012, 0.018, 0.015, 0.006])
    corr = np.array([[1, 0.6, 0.4, 0.1], [0.6, 1, 0.3, 0.0], [0.4, 0.3, 1, -0.2], [0.1, 0.0, -0.2, 1]])
    cov = corr * np.outer(vols, vols)
    shocks = rng.standard_t(5, size=(n_days, 4)) * np.sqrt(3 / 5) @ np.linalg.cholesky(cov).T
    start = np.array([100.0, 40.0, 250.0, 0.92])
    prices = start * np.exp(np.cumsum(shocks, axis=0))
    names = ["EQ.A", "EQ.B", "EQ.C", "FX.USD"]
    (root / "instruments.csv").write_text(
        "instrument,asset_class,currency\nEQ.A,equity,EUR\nEQ.B,equity,EUR\nEQ.C,equity,USD\nFX.USD,fx,EUR\n"
    )
    (root / "positions.csv").write_text(
        "portfolio,instrument,quantity\nLONG,EQ.A,1000\nLONG,EQ.C,200\nHEDGE,EQ.A,500\nHEDGE,EQ.B,-800\nHEDGE,FX.USD,-20000\n"
    )
    files = {"equities": [0, 1, 2], "fx": [3]}
    for stem, cols in files.items():
        lines = ["date,instrument,close"]
        for i, d in enumerate(dates):
            for c in cols:
                lines.append(f"{d},{names[c]},{prices[i, c]:.6f}")
        (root / "prices" / f"{stem}.csv").write_text("\n".join(lines) + "\n")
    return root
