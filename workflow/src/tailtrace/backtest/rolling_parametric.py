"""Rolling 1-day forecasts of the parametric methods.

Each function has the common signature of
:class:`~tailtrace.backtest.rolling_base.RollingForecaster` and models the
portfolio P&L series directly (see docs/methodology.md, "Backtesting").
"""

from __future__ import annotations

import warnings
from typing import Any, Mapping, Sequence

import numpy as np
from scipy.special import ndtri

from ..errors import ConfigError, ModelWarning
from ..estimators.base import as_generator
from .cornish_fisher import cf_quantile, cf_tail_mean, cf_tail_monotone
from .rolling_base import (
    RollingForecast,
    day_chunks,
    normal_factors,
    prepare,
    read_options,
    refit_offsets,
    rolling_moments,
    tail_count,
)
from .student_t import fit_t_dof, t_factors
from .volatility import ewma_variance_path

__all__ = [
    "forecast_parametric_normal",
    "forecast_ewma_normal",
    "forecast_parametric_t",
    "forecast_cornish_fisher",
    "forecast_monte_carlo",
]


def _location_scale(mean: np.ndarray, std: np.ndarray, unit_var: np.ndarray, unit_es: np.ndarray, include_mean: bool):
    """VaR/ES (P, C, D) from (P, D) location/scale and (C,) or (P, C, D) unit factors."""
    mu = mean[:, None, :] if include_mean else 0.0
    f_var = unit_var[None, :, None] if unit_var.ndim == 1 else unit_var
    f_es = unit_es[None, :, None] if unit_es.ndim == 1 else unit_es
    sd = std[:, None, :]
    return -mu + sd * f_var, -mu + sd * f_es


def forecast_parametric_normal(
    pnl: np.ndarray,
    confidences: Sequence[float],
    *,
    window: int,
    days: int = 250,
    options: Mapping[str, Any] | None = None,
    seed: int | np.random.Generator | None = None,
) -> RollingForecast:
    """Normal VaR/ES from the rolling window mean and standard deviation.

    Parameters
    ----------
    pnl : (P, T_all) array
        Daily P&L history per portfolio; the last ``days`` columns are
        backtested.
    confidences : sequence of float
    window : int
        Estimation window (days before each forecast day).
    days : int
        Backtest length D.
    options : mapping, optional
        ``include_mean`` (bool, default False).
    seed : ignored
        Accepted for the common signature.

    Returns
    -------
    RollingForecast
        var, es of shape (P, C, D).

    Notes
    -----
    ``VaR = -m mu + sigma z_c``, ``ES = -m mu + sigma phi(z_c)/(1-c)``,
    ``m = 1`` if include_mean else 0, sigma the window standard deviation
    (ddof = 1), mu the window mean.

    References
    ----------
    J.P. Morgan/Reuters (1996), RiskMetrics Technical Document; Jorion,
    Value at Risk, ch. 5.
    """
    opts = read_options("parametric_normal", options, {"include_mean": False})
    setup = prepare(pnl, confidences, window, days)
    mom = rolling_moments(setup)
    z, es_f = normal_factors(setup.confidences)
    var, es = _location_scale(mom["mean"], mom["std"], z, es_f, bool(opts["include_mean"]))
    return RollingForecast("parametric_normal", var, es, diagnostics={"include_mean": bool(opts["include_mean"])})


def forecast_ewma_normal(
    pnl: np.ndarray,
    confidences: Sequence[float],
    *,
    window: int,
    days: int = 250,
    options: Mapping[str, Any] | None = None,
    seed: int | np.random.Generator | None = None,
) -> RollingForecast:
    """Normal VaR/ES with an EWMA (RiskMetrics) variance, zero mean.

    Parameters
    ----------
    pnl, confidences, window, days, seed
        See :func:`forecast_parametric_normal`.
    options : mapping, optional
        ``lambda`` (float, default 0.94).

    Returns
    -------
    RollingForecast

    Notes
    -----
    ``sigma^2_t = lambda sigma^2_{t-1} + (1 - lambda) x_{t-1}^2``, seeded at
    the start of the first estimation window (``window`` days before the
    first backtest day) with the mean of ``x^2`` over that window, then run
    through it: one pass over the whole series. ``VaR = sigma_t z_c``,
    ``ES = sigma_t phi(z_c)/(1-c)``.

    References
    ----------
    J.P. Morgan/Reuters (1996), RiskMetrics Technical Document, 4th ed.
    """
    opts = read_options("ewma_normal", options, {"lambda": 0.94})
    setup = prepare(pnl, confidences, window, days)
    start = setup.first - setup.window
    s2 = ewma_variance_path(setup.pnl, float(opts["lambda"]), start, setup.first + setup.days, setup.window)
    sigma = np.sqrt(s2[:, setup.window :])
    z, es_f = normal_factors(setup.confidences)
    var, es = _location_scale(sigma, sigma, z, es_f, False)
    return RollingForecast("ewma_normal", var, es, diagnostics={"lambda": float(opts["lambda"])})


def forecast_parametric_t(
    pnl: np.ndarray,
    confidences: Sequence[float],
    *,
    window: int,
    days: int = 250,
    options: Mapping[str, Any] | None = None,
    seed: int | np.random.Generator | None = None,
) -> RollingForecast:
    """Student-t VaR/ES: dof by maximum likelihood, scale matched to the variance.

    Parameters
    ----------
    pnl, confidences, window, days, seed
        See :func:`forecast_parametric_normal`.
    options : mapping, optional
        ``include_mean`` (False), ``refit_every`` (20 days), ``dof_min``
        (2.5), ``dof_max`` (200).

    Returns
    -------
    RollingForecast
        ``diagnostics["dof"]`` lists the fitted dof per refit and portfolio.

    Notes
    -----
    Every ``refit_every`` backtest days the dof nu is fitted by maximising
    the likelihood of the standardised window (unit-variance t, see
    :func:`~tailtrace.backtest.student_t.fit_t_dof`); between refits nu is
    held and mean and standard deviation roll daily. With
    ``q = t_nu^-1(c)`` and ``s = sqrt((nu-2)/nu)``:
    ``VaR = -m mu + sigma s q``,
    ``ES = -m mu + sigma s (nu + q^2)/(nu - 1) f_nu(q)/(1 - c)``.

    References
    ----------
    McNeil, Frey and Embrechts (2005), Quantitative Risk Management, ch. 2.
    """
    opts = read_options(
        "parametric_t", options, {"include_mean": False, "refit_every": 20, "dof_min": 2.5, "dof_max": 200.0}
    )
    setup = prepare(pnl, confidences, window, days, min_window=10)
    offsets = refit_offsets(setup.days, opts["refit_every"])
    cols = (setup.first + offsets)[:, None] - setup.window + np.arange(setup.window)
    sample = setup.pnl[:, cols]  # (P, B, W): the window of each refit day
    mean = sample.mean(axis=-1, keepdims=True)
    sd = sample.std(axis=-1, ddof=1, keepdims=True)
    y = np.divide(sample - mean, sd, out=np.zeros(sample.shape), where=sd > 0)
    nu_fit = fit_t_dof(y, dof_min=float(opts["dof_min"]), dof_max=float(opts["dof_max"]))
    nu_fit = np.where(sd[..., 0] > 0, nu_fit, float(opts["dof_max"]))
    nu = nu_fit[:, np.arange(setup.days) // int(opts["refit_every"])]  # (P, D)
    f_var, f_es = t_factors(nu[:, None, :], setup.confidences[None, :, None])
    mom = rolling_moments(setup)
    var, es = _location_scale(mom["mean"], mom["std"], f_var, f_es, bool(opts["include_mean"]))
    diag = {**opts, "refit_offsets": offsets.tolist(), "dof": np.round(nu_fit, 4).tolist()}
    return RollingForecast("parametric_t", var, es, diagnostics=diag)


def forecast_cornish_fisher(
    pnl: np.ndarray,
    confidences: Sequence[float],
    *,
    window: int,
    days: int = 250,
    options: Mapping[str, Any] | None = None,
    seed: int | np.random.Generator | None = None,
) -> RollingForecast:
    """Cornish-Fisher VaR/ES from rolling mean, variance, skewness and kurtosis.

    Parameters
    ----------
    pnl, confidences, window, days, seed
        See :func:`forecast_parametric_normal`.
    options : mapping, optional
        ``include_mean`` (bool, default False).

    Returns
    -------
    RollingForecast
        ``fallback`` marks the (portfolio, confidence, day) where the
        expansion is not monotone over the left tail and the normal figures
        were used instead.

    Notes
    -----
    ``VaR = -(m mu + sigma z_CF(q))`` with ``q = Phi^-1(1 - c)`` and
    ``z_CF`` from :func:`~tailtrace.backtest.cornish_fisher.cf_quantile`;
    ``ES = -(m mu + sigma E[z_CF | tail])`` in closed form
    (:func:`~tailtrace.backtest.cornish_fisher.cf_tail_mean`). Skewness and
    excess kurtosis are the window's moment ratios (divisor n).

    References
    ----------
    Zangari, P. (1996), RiskMetrics Monitor Q1; Hull, Options, Futures, and
    Other Derivatives, VaR chapter.
    """
    opts = read_options("cornish_fisher", options, {"include_mean": False})
    setup = prepare(pnl, confidences, window, days, min_window=4)
    mom = rolling_moments(setup, order=4)
    alpha = (1.0 - setup.confidences)[None, :, None]
    q = ndtri(alpha)
    s, k = mom["skew"][:, None, :], mom["exkurt"][:, None, :]
    ok = cf_tail_monotone(q, s, k)
    z_var = np.where(ok, cf_quantile(q, s, k), q)
    z_es = np.where(ok, cf_tail_mean(q, alpha, s, k), cf_tail_mean(q, alpha, 0.0, 0.0))
    var, es = _location_scale(mom["mean"], mom["std"], -z_var, -z_es, bool(opts["include_mean"]))
    fallback = ~ok
    if fallback.any():
        warnings.warn(
            f"cornish_fisher: expansion not monotone on {int(fallback.sum())} of {fallback.size} "
            "(portfolio, confidence, day) forecasts; normal figures used there",
            ModelWarning,
            stacklevel=2,
        )
    diag = {"include_mean": bool(opts["include_mean"]), "fallback_count": int(fallback.sum())}
    return RollingForecast("cornish_fisher", var, es, fallback, diag)


def forecast_monte_carlo(
    pnl: np.ndarray,
    confidences: Sequence[float],
    *,
    window: int,
    days: int = 250,
    options: Mapping[str, Any] | None = None,
    seed: int | np.random.Generator | None = None,
) -> RollingForecast:
    """Monte Carlo VaR/ES from S simulated normal P&L outcomes per day.

    Parameters
    ----------
    pnl, confidences, window, days
        See :func:`forecast_parametric_normal`.
    options : mapping, optional
        ``paths`` (S, default 10000), ``include_mean`` (False).
    seed : int or numpy.random.Generator
        Seeds the (D, S) standard normal draws.

    Returns
    -------
    RollingForecast
        ``diagnostics["var_se_rel"]`` gives the approximate relative
        standard error of the VaR from sampling, per confidence.

    Notes
    -----
    Day d draws ``Z_{d,1..S} ~ N(0, 1)``; portfolio p's simulated P&L is
    ``m mu_{p,d} + sigma_{p,d} Z_{d,s}`` from the rolling normal fit. The
    same draws serve every portfolio (common random numbers). Because this
    map is increasing in Z, the k-th worst simulated loss is
    ``-m mu - sigma Z_(k)`` with ``Z_(k)`` the k-th smallest draw: the
    order statistics are computed once per day, not once per portfolio,
    and the result equals simulating every portfolio separately with those
    draws. ``k = max(1, floor(S (1 - c)))``; ES is the mean of the k worst.
    For a linear book with normal returns this matches parametric normal
    up to sampling error.

    References
    ----------
    Glasserman, P. (2004). Monte Carlo Methods in Financial Engineering,
    ch. 9.
    """
    opts = read_options("monte_carlo", options, {"paths": 10_000, "include_mean": False})
    setup = prepare(pnl, confidences, window, days)
    paths = int(opts["paths"])
    k = tail_count(paths, setup.confidences)
    if paths < 2:
        raise ConfigError(f"monte_carlo: paths must be at least 2, got {paths}")
    rng = as_generator(seed)
    unit_var = np.empty((setup.days, k.size))
    unit_es = np.empty((setup.days, k.size))
    for days_slice in day_chunks(setup.days, 2 * paths):
        z = rng.standard_normal((days_slice.stop - days_slice.start, paths))
        worst = np.sort(np.partition(z, int(k.max()) - 1, axis=-1)[:, : int(k.max())], axis=-1)
        csum = np.cumsum(worst, axis=-1)
        unit_var[days_slice] = -worst[:, k - 1]
        unit_es[days_slice] = -csum[:, k - 1] / k
    mom = rolling_moments(setup)
    var, es = _location_scale(
        mom["mean"], mom["std"], unit_var.T[None, :, :], unit_es.T[None, :, :], bool(opts["include_mean"])
    )
    alpha = 1.0 - setup.confidences
    z, _ = normal_factors(setup.confidences)
    pdf = np.exp(-0.5 * z * z) / np.sqrt(2 * np.pi)
    se_rel = np.sqrt(alpha * (1 - alpha) / paths) / pdf / z  # asymptotic sample-quantile error
    diag = {"paths": paths, "include_mean": bool(opts["include_mean"]), "var_se_rel": np.round(se_rel, 6).tolist()}
    return RollingForecast("monte_carlo", var, es, diagnostics=diag)
