"""Empirical tail measures shared by the historical and simulation methods."""

from __future__ import annotations

from typing import Sequence

import numpy as np

__all__ = ["tail_count", "empirical_var_es", "batch_standard_errors"]


def tail_count(n: int, confidence: float) -> int:
    """Number of worst observations ``k`` that define VaR and ES.

    Parameters
    ----------
    n : int
        Sample size.
    confidence : float
        Confidence level ``c`` in (0, 1).

    Returns
    -------
    int
        ``k = max(1, floor(n (1 - c)))``.

    Notes
    -----
    VaR is the k-th worst loss; ES is the mean of the k worst losses (the VaR
    observation and those beyond it). With n = 500 and c = 0.99, k = 5: the
    5th worst loss (common practice, no source). A tiny tolerance guards
    against ``n * (1 - c)`` falling just below an integer in floating point.
    """
    return max(1, int(np.floor(n * (1.0 - confidence) + 1e-9)))


def empirical_var_es(losses: np.ndarray, confidences: Sequence[float]) -> tuple[np.ndarray, np.ndarray]:
    """VaR and ES from samples of losses, vectorised over leading axes.

    Parameters
    ----------
    losses : (..., n) array
        Loss samples (positive = loss), the last axis being observations.
    confidences : sequence of float
        Confidence levels.

    Returns
    -------
    var, es : (..., C) arrays
        k-th worst loss and mean of the k worst, ``k = tail_count(n, c)``.
    """
    losses = np.asarray(losses, dtype=float)
    n = losses.shape[-1]
    worst_first = -np.sort(-losses, axis=-1)
    running = np.cumsum(worst_first, axis=-1)
    ks = np.array([tail_count(n, c) for c in confidences])
    var = worst_first[..., ks - 1]
    es = running[..., ks - 1] / ks
    return var, es


def batch_standard_errors(
    losses: np.ndarray, confidences: Sequence[float], n_batches: int = 10
) -> tuple[np.ndarray, np.ndarray]:
    """Batch-means standard errors of empirical VaR and ES.

    The samples are split into ``n_batches`` equal batches; the standard
    error is the standard deviation of the batch estimates divided by
    ``sqrt(n_batches)``.

    Parameters
    ----------
    losses : (..., n) array
    confidences : sequence of float
    n_batches : int

    Returns
    -------
    var_se, es_se : (..., C) arrays

    References
    ----------
    Glasserman, *Monte Carlo Methods in Financial Engineering*, 2003,
    section on output analysis (batch means).
    """
    losses = np.asarray(losses, dtype=float)
    n = losses.shape[-1] // n_batches * n_batches
    batches = losses[..., :n].reshape(*losses.shape[:-1], n_batches, n // n_batches)
    var_b, es_b = empirical_var_es(batches, confidences)  # (..., B, C)
    scale = np.sqrt(n_batches)
    return var_b.std(axis=-2, ddof=1) / scale, es_b.std(axis=-2, ddof=1) / scale
