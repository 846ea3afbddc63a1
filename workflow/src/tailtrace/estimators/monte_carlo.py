"""Monte Carlo VaR and ES from simulated daily price paths."""

from __future__ import annotations

from typing import Any, Mapping, Sequence

import numpy as np

from .base import SCALING_NONE, SCALING_SIMULATED, RiskEstimate, RiskSample, as_generator
from .tail import batch_standard_errors, empirical_var_es

__all__ = ["estimate", "covariance_factor", "simulate_log_paths"]


def covariance_factor(returns: np.ndarray) -> np.ndarray:
    """A factor ``F`` with ``FᵀF`` equal to the sample covariance of ``returns``.

    Parameters
    ----------
    returns : (T, N) array

    Returns
    -------
    (r, N) array with r = min(T − 1, N)

    Notes
    -----
    Built from the thin SVD of the demeaned returns, so it exists even when
    the covariance is singular (more instruments than observations) where a
    Cholesky factor would fail, and it costs O(r) per draw instead of O(N).
    """
    centred = returns - returns.mean(axis=0)
    _, s, vt = np.linalg.svd(centred, full_matrices=False)
    keep = s > s[0] * 1e-12 if s.size and s[0] > 0 else np.zeros_like(s, dtype=bool)
    return (s[keep, None] * vt[keep]) / np.sqrt(max(returns.shape[0] - 1, 1))


def simulate_log_paths(
    drift: np.ndarray,
    factor: np.ndarray,
    steps: Sequence[int],
    paths: int,
    rng: np.random.Generator,
) -> dict[int, np.ndarray]:
    """Cumulative log returns of correlated daily GBM steps.

    Parameters
    ----------
    drift : (N,) daily log drift
    factor : (r, N) covariance factor (see :func:`covariance_factor`)
    steps : horizons (days) at which to return the cumulative log return
    paths : number of paths S
    rng : numpy Generator

    Returns
    -------
    dict mapping each horizon to an (S, N) array of cumulative log returns.
    """
    wanted = sorted(set(int(s) for s in steps))
    cumulative = np.zeros((paths, factor.shape[1]))
    out: dict[int, np.ndarray] = {}
    for day in range(1, wanted[-1] + 1):  # daily steps, each vectorised over paths
        cumulative += drift + rng.standard_normal((paths, factor.shape[0])) @ factor
        if day in wanted:
            out[day] = cumulative.copy()
    return out


def estimate(
    sample: RiskSample,
    confidences: Sequence[float],
    horizons: Sequence[int],
    *,
    options: Mapping[str, Any],
    seed: int | np.random.Generator | None = None,
) -> RiskEstimate:
    """Monte Carlo VaR and ES with full revaluation of the book.

    Parameters
    ----------
    options : mapping
        ``paths`` (int, default 10000), ``include_mean`` (bool, default
        False), ``batches`` (int, default 10) for the standard errors.
    seed : int or Generator
        Same seed, same figures.

    Notes
    -----
    Daily log returns are drawn from N(m, Σ), Σ the window covariance of log
    returns, and summed over h daily steps (geometric Brownian motion in
    discrete time), so horizons are simulated rather than scaled. The drift
    m is the window mean when ``include_mean`` is set, else −½diag(Σ), which
    makes every price a martingale (no expected gain or loss). VaR and ES are
    the empirical k-th worst loss and the mean of the k worst over the paths;
    their standard errors come from batch means.

    References
    ----------
    Jorion, *Value at Risk*, 3rd ed., 2007, ch. 12; Glasserman, *Monte Carlo
    Methods in Financial Engineering*, 2003, ch. 9.
    """
    paths = int(options.get("paths", 10_000))
    n_batches = int(options.get("batches", 10))
    include_mean = bool(options.get("include_mean", False))
    rng = as_generator(seed)
    factor = covariance_factor(sample.returns)
    variances = np.einsum("rn,rn->n", factor, factor)
    drift = sample.returns.mean(axis=0) if include_mean else -0.5 * variances
    cumulative = simulate_log_paths(drift, factor, horizons, paths, rng)
    P, C, H = len(sample.portfolios), len(confidences), len(horizons)
    var, es, var_se, es_se = (np.empty((P, C, H)) for _ in range(4))
    for j, h in enumerate(horizons):
        losses = -sample.revalue(cumulative[int(h)], int(h))
        var[:, :, j], es[:, :, j] = empirical_var_es(losses, confidences)
        var_se[:, :, j], es_se[:, :, j] = batch_standard_errors(losses, confidences, n_batches)
    scaling = tuple(SCALING_NONE if h == 1 else SCALING_SIMULATED for h in horizons)
    return RiskEstimate(
        var=var,
        es=es,
        scaling=scaling,
        n_obs=np.full(H, paths),
        var_se=var_se,
        es_se=es_se,
        diagnostics={"paths": paths, "include_mean": include_mean, "batches": n_batches, "distribution": "normal"},
    )
