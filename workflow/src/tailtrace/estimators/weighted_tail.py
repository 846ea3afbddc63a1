"""VaR and ES of a loss sample whose observations carry weights."""

from __future__ import annotations

from typing import Sequence

import numpy as np

__all__ = ["worst_first", "mass_index", "weighted_var_es", "weighted_tail_weights", "effective_size"]

_MASS_TOL = 1e-12  # cumulative weights j/n summed in floating point fall short by ~1e-16 j


def worst_first(losses: np.ndarray, weights: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Sort losses from the worst and carry their weights along.

    Parameters
    ----------
    losses : (..., n) array
    weights : (n,) or (..., n) array, positive, summing to 1 along the last axis

    Returns
    -------
    order : (..., n) int
        ``losses[..., order]`` is sorted worst first (stable for ties).
    sorted_losses, sorted_weights : (..., n) arrays
    """
    losses = np.asarray(losses, dtype=float)
    weights = np.broadcast_to(np.asarray(weights, dtype=float), losses.shape)
    order = np.argsort(-losses, axis=-1, kind="stable")
    sorted_losses = np.take_along_axis(losses, order, axis=-1)
    return order, sorted_losses, np.take_along_axis(weights, order, axis=-1)


def mass_index(cumulative: np.ndarray, masses: np.ndarray) -> np.ndarray:
    """Position of the first observation where the cumulative weight reaches each mass.

    Parameters
    ----------
    cumulative : (..., n) non-decreasing array
    masses : (M,) array

    Returns
    -------
    (..., M) int array, clipped to ``n - 1``.
    """
    masses = np.asarray(masses, dtype=float)
    before = (cumulative[..., None, :] < masses[:, None] - _MASS_TOL).sum(axis=-1)
    return np.minimum(before, cumulative.shape[-1] - 1)


def weighted_var_es(
    losses: np.ndarray, weights: np.ndarray, confidences: Sequence[float]
) -> tuple[np.ndarray, np.ndarray]:
    """Weighted VaR and ES, vectorised over leading axes.

    Parameters
    ----------
    losses : (..., n) array
        Loss samples (positive = loss).
    weights : (n,) or (..., n) array
        Probability of each observation (positive, summing to 1).
    confidences : sequence of float

    Returns
    -------
    var, es : (..., C) arrays

    Notes
    -----
    Sort the losses worst first and accumulate weights until the tail mass
    ``p = 1 − c`` is reached: VaR is the loss at which it is reached, with no
    interpolation between neighbours. ES is the weighted mean of the tail of
    mass exactly ``p``: observations before the VaR one count fully and the
    VaR observation carries the part of its weight still needed,
    ``ES = [Σ_{j<k} w_j L_j + (p − W_{k−1}) L_k] / p``.

    With equal weights ``1/n`` and integer ``n p`` this is the k-th worst
    loss and the mean of the k worst (:func:`tail.tail_count`); otherwise VaR
    is the ⌈np⌉-th worst loss (the spine's rule takes the ⌊np⌋-th) and ES
    gives the ⌈np⌉-th worst loss the fractional weight ``np − ⌊np⌋``.

    References
    ----------
    Acerbi & Tasche, "On the coherence of expected shortfall", Journal of
    Banking & Finance 26(7), 2002 (ES of a discrete distribution).
    """
    var, es, _ = _tail(losses, weights, confidences, want_tail=False)
    return var, es


def weighted_tail_weights(losses: np.ndarray, weights: np.ndarray, confidences: Sequence[float]) -> np.ndarray:
    """Weight of each observation in the ES of :func:`weighted_var_es`.

    Returns
    -------
    (..., C, n) array in the original observation order, each row summing
    to 1, so that ``ES = Σ_j tail_j L_j``.
    """
    return _tail(losses, weights, confidences, want_tail=True)[2]


def effective_size(weights: np.ndarray) -> np.ndarray:
    """Kish effective sample size ``(Σw)² / Σw²`` along the last axis.

    Values within 1e-9 of an integer are rounded, so that equal weights give
    exactly ``n``.
    """
    weights = np.asarray(weights, dtype=float)
    n_eff = weights.sum(axis=-1) ** 2 / np.square(weights).sum(axis=-1)
    rounded = np.round(n_eff)
    return np.where(np.abs(n_eff - rounded) < 1e-9 * rounded, rounded, n_eff)


def _tail(
    losses: np.ndarray, weights: np.ndarray, confidences: Sequence[float], *, want_tail: bool
) -> tuple[np.ndarray, np.ndarray, np.ndarray | None]:
    order, sorted_losses, sorted_w = worst_first(losses, weights)
    cumulative = np.cumsum(sorted_w, axis=-1)
    p = 1.0 - np.asarray(confidences, dtype=float)
    k = mass_index(cumulative, p)  # (..., C)
    var = np.take_along_axis(sorted_losses, k, axis=-1)
    before_w = np.where(k > 0, np.take_along_axis(cumulative, np.maximum(k - 1, 0), axis=-1), 0.0)
    running = np.cumsum(sorted_w * sorted_losses, axis=-1)
    before_s = np.where(k > 0, np.take_along_axis(running, np.maximum(k - 1, 0), axis=-1), 0.0)
    partial = p - before_w
    es = (before_s + partial * var) / p
    if not want_tail:
        return var, es, None
    # tail weights in sorted order, then back to the original order
    position = np.arange(sorted_losses.shape[-1])
    full = position < k[..., None]
    at_k = position == k[..., None]
    tail_sorted = (np.where(full, sorted_w[..., None, :], 0.0) + np.where(at_k, partial[..., None], 0.0)) / p[:, None]
    tail = np.empty_like(tail_sorted)
    np.put_along_axis(tail, np.broadcast_to(order[..., None, :], tail.shape), tail_sorted, axis=-1)
    return var, es, tail
