"""Monte Carlo VaR and ES from simulated daily price paths."""

from __future__ import annotations

from typing import Any, Mapping, Sequence

import numpy as np

from .base import SCALING_NONE, SCALING_SIMULATED, RiskEstimate, RiskSample, as_generator
from .tail import batch_standard_errors, empirical_var_es

__all__ = [
    "estimate",
    "estimate_student_t",
    "covariance_factor",
    "simulate_log_paths",
    "simulated_shocks",
    "mahalanobis_sq",
    "DISTRIBUTIONS",
]

DISTRIBUTIONS = ("normal", "t")


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
    Each row's sign is fixed (largest entry positive): LAPACK's sign is
    arbitrary and may flip when, say, a cash column of zeros is added, which
    would change the simulated paths for the same seed.
    """
    centred = returns - returns.mean(axis=0)
    _, s, vt = np.linalg.svd(centred, full_matrices=False)
    keep = s > s[0] * 1e-12 if s.size and s[0] > 0 else np.zeros_like(s, dtype=bool)
    rows = vt[keep]
    pivot = np.take_along_axis(rows, np.argmax(np.abs(rows), axis=1)[:, None], axis=1)
    return (s[keep, None] * rows * np.where(pivot < 0, -1.0, 1.0)) / np.sqrt(max(returns.shape[0] - 1, 1))


def mahalanobis_sq(returns: np.ndarray) -> tuple[np.ndarray, int]:
    """Squared Mahalanobis distance of each demeaned window return.

    Parameters
    ----------
    returns : (T, N) array

    Returns
    -------
    d2 : (T,) array
        ``(r_t − r̄)ᵀ Σ⁺ (r_t − r̄)`` with Σ⁺ the pseudo-inverse of the sample
        covariance (ddof 1), so it exists when Σ is singular.
    rank : int
        Rank of Σ, the dimension of the distribution the distances live in.
    """
    centred = returns - returns.mean(axis=0)
    u, s, _ = np.linalg.svd(centred, full_matrices=False)
    keep = s > s[0] * 1e-12 if s.size and s[0] > 0 else np.zeros_like(s, dtype=bool)
    return (returns.shape[0] - 1) * np.square(u[:, keep]).sum(axis=1), int(keep.sum())


def simulate_log_paths(
    drift: np.ndarray,
    factor: np.ndarray,
    steps: Sequence[int],
    paths: int,
    rng: np.random.Generator,
    *,
    dof: float | None = None,
) -> dict[int, np.ndarray]:
    """Cumulative log returns of correlated daily steps.

    Parameters
    ----------
    drift : (N,) daily log drift
    factor : (r, N) covariance factor (see :func:`covariance_factor`)
    steps : horizons (days) at which to return the cumulative log return
    paths : number of paths S
    rng : numpy Generator
    dof : float, optional
        Degrees of freedom ν > 2 of multivariate Student-t daily steps;
        None for normal steps (GBM in discrete time).

    Returns
    -------
    dict mapping each horizon to an (S, N) array of cumulative log returns.

    Notes
    -----
    A t step is ``drift + Z F √((ν − 2)/W)`` with Z standard normal and
    W ~ χ²_ν drawn once per path and day, so its covariance is ``FᵀF``.
    The normal steps draw only Z, in the same order as before the t option.

    The steps are linear in the draws, so the cumulative return after h days
    is computed as ``h·drift + (Σ_d Z_d c_d) F`` (``c_d`` the t scale, 1 for
    normal steps): one (S, r) × (r, N) product per requested horizon instead
    of one per day. Same draws in the same order; the figures differ from a
    day-by-day sum only by floating-point rounding.

    References
    ----------
    McNeil, Frey & Embrechts, *Quantitative Risk Management*, 2005,
    section 3.2 (normal variance mixtures).
    """
    wanted = sorted(set(int(s) for s in steps))
    draws = np.zeros((paths, factor.shape[0]))
    out: dict[int, np.ndarray] = {}
    for day in range(1, wanted[-1] + 1):  # daily draws, each vectorised over paths
        z = rng.standard_normal((paths, factor.shape[0]))
        if dof is not None:
            z *= np.sqrt((dof - 2.0) / rng.chisquare(dof, size=paths))[:, None]
        draws += z
        if day in wanted:
            out[day] = day * drift + draws @ factor
    return out


def simulated_shocks(
    sample: RiskSample,
    horizons: Sequence[int],
    options: Mapping[str, Any],
    seed: int | np.random.Generator | None,
) -> tuple[dict[int, np.ndarray], dict[str, Any]]:
    """The simulated cumulative log returns :func:`estimate` revalues the book under.

    Parameters
    ----------
    sample : RiskSample
    horizons : sequence of int
    options : mapping
        See :func:`estimate`.
    seed : int or Generator

    Returns
    -------
    shocks : dict mapping each horizon to an (S, N) array
    info : dict
        JSON-serialisable settings and fitted values (``distribution``, ``dof``).
    """
    paths = int(options.get("paths", 10_000))
    include_mean = bool(options.get("include_mean", False))
    distribution = str(options.get("distribution", "normal"))
    if distribution not in DISTRIBUTIONS:
        raise ValueError(f"monte_carlo distribution must be one of {DISTRIBUTIONS}, got {distribution!r}")
    rng = as_generator(seed)
    factor = covariance_factor(sample.returns)
    variances = np.einsum("rn,rn->n", factor, factor)
    # for t steps E[exp(X)] is infinite, so −½σ² is a convention there (zero mean to second order)
    drift = sample.returns.mean(axis=0) if include_mean else -0.5 * variances
    info: dict[str, Any] = {"paths": paths, "include_mean": include_mean, "distribution": distribution}
    dof = None
    if distribution == "t":
        dof, info["dof_fit"] = _student_t_dof(sample.returns, options)
        info["dof"] = dof
    return simulate_log_paths(drift, factor, horizons, paths, rng, dof=dof), info


def _student_t_dof(returns: np.ndarray, options: Mapping[str, Any]) -> tuple[float, str]:
    from .parametric_t import DOF_BOUNDS, fit_t_dof

    bounds = tuple(float(b) for b in options.get("dof_bounds", DOF_BOUNDS))
    if options.get("dof") is not None:
        dof = float(options["dof"])
        if not dof > 2.0:
            raise ValueError(f"monte_carlo dof must exceed 2, got {dof}")
        return dof, "fixed"
    d2, rank = mahalanobis_sq(returns)
    if rank == 0:
        return bounds[1], "degenerate"
    nu, fitted = fit_t_dof(d2[None, :], rank, bounds)
    return float(nu[0]), "ml" if fitted[0] else "moment_fallback"


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
        False), ``batches`` (int, default 10) for the standard errors,
        ``distribution`` ("normal" or "t", default "normal"), and for "t"
        ``dof`` (fixed ν, default None: fitted) and ``dof_bounds`` (default
        [2.1, 200]).
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

    With ``distribution = "t"`` the daily steps are multivariate Student-t
    with covariance Σ (:func:`simulate_log_paths`). ν is fitted by maximum
    likelihood to the window returns with mean and covariance fixed at their
    sample values: the profile likelihood of the squared Mahalanobis
    distances in the rank of Σ (:func:`parametric_t.fit_t_dof`). One ν serves
    every instrument, so all margins share the same tail weight.

    References
    ----------
    Jorion, *Value at Risk*, 3rd ed., 2007, ch. 12; Glasserman, *Monte Carlo
    Methods in Financial Engineering*, 2003, ch. 9; McNeil, Frey & Embrechts,
    *Quantitative Risk Management*, 2005, section 3.2.
    """
    n_batches = int(options.get("batches", 10))
    cumulative, info = simulated_shocks(sample, horizons, options, seed)
    paths = info["paths"]
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
        diagnostics={**info, "batches": n_batches},
    )


def estimate_student_t(
    sample: RiskSample,
    confidences: Sequence[float],
    horizons: Sequence[int],
    *,
    options: Mapping[str, Any],
    seed: int | np.random.Generator | None = None,
) -> RiskEstimate:
    """:func:`estimate` with ``distribution = "t"``, for running beside the normal one."""
    return estimate(sample, confidences, horizons, options={**options, "distribution": "t"}, seed=seed)
