"""Horizon scaling shared by the methods that scale a 1-day figure."""

from __future__ import annotations

from typing import Sequence

import numpy as np

from .base import SCALING_NONE, SCALING_SQRT_TIME

__all__ = ["sqrt_time_labels", "scale_sqrt_time"]


def sqrt_time_labels(horizons: Sequence[int]) -> tuple[str, ...]:
    """``scaling`` labels of a square-root-of-time method: ``none`` for 1 day."""
    return tuple(SCALING_NONE if int(h) == 1 else SCALING_SQRT_TIME for h in horizons)


def scale_sqrt_time(one_day: np.ndarray, horizons: Sequence[int]) -> np.ndarray:
    """Scale ``(..., C)`` 1-day figures to ``(..., C, H)`` by √h.

    Notes
    -----
    ``X_h = X_1 √h`` holds for iid zero-mean returns (common practice, no
    source); it understates risk when volatility clusters or returns trend.
    """
    root_h = np.sqrt(np.asarray(horizons, dtype=float))
    return np.asarray(one_day, dtype=float)[..., None] * root_h
