"""Rolling 1-day forecasts of the historical-simulation methods.

Each function has the common signature of
:class:`~tailtrace.backtest.rolling_base.RollingForecaster`.
"""

from __future__ import annotations

import warnings
from collections import Counter
from typing import Any, Mapping, Sequence

import numpy as np
from numpy.lib.stride_tricks import sliding_window_view

from ..errors import ConfigError, ModelWarning
from .rolling_base import (
    ForecastSetup,
    RollingForecast,
    day_windows,
    prepare,
    read_options,
    refit_offsets,
    tail_count,
    tail_of_sorted,
)
from .volatility import GarchFit, ewma_variance_path, fit_garch11_many, garch_variance_extend_many

__all__ = [
    "forecast_historical",
    "forecast_age_weighted_historical",
    "forecast_filtered_historical",
    "age_weights",
    "weighted_tail",
]


def _worst_first(windows: np.ndarray) -> np.ndarray:
    """Losses (minus P&L) of each window, sorted largest first."""
    return np.sort(windows, axis=-1) * -1.0


def _hs(setup: ForecastSetup) -> tuple[np.ndarray, np.ndarray]:
    k = tail_count(setup.window, setup.confidences)
    var = np.empty(setup.shape())
    es = np.empty(setup.shape())
    for days, win in day_windows(setup.pnl, setup.window, setup.first, setup.first + setup.days):
        v, e = tail_of_sorted(_worst_first(win), k)  # (P, n, C)
        var[:, :, days] = v.transpose(0, 2, 1)
        es[:, :, days] = e.transpose(0, 2, 1)
    return var, es


def forecast_historical(
    pnl: np.ndarray,
    confidences: Sequence[float],
    *,
    window: int,
    days: int = 250,
    options: Mapping[str, Any] | None = None,
    seed: int | np.random.Generator | None = None,
) -> RollingForecast:
    """Historical-simulation VaR/ES over a rolling window.

    Parameters
    ----------
    pnl : (P, T_all) array
        Daily P&L history per portfolio; the last ``days`` columns are
        backtested.
    confidences : sequence of float
    window : int
        Number n of past days in each window.
    days : int
        Backtest length D.
    options : mapping, optional
        None accepted.
    seed : ignored

    Returns
    -------
    RollingForecast

    Notes
    -----
    ``k = max(1, floor(n (1 - c)))``; VaR is the k-th largest loss of the
    window and ES the mean of the k largest (n = 500, c = 99%: the 5th worst
    loss and the mean of the 5 worst). No interpolation.

    References
    ----------
    Jorion, Value at Risk, ch. 10; Hull, Risk Management and Financial
    Institutions, historical simulation chapter.
    """
    read_options("historical", options, {})
    setup = prepare(pnl, confidences, window, days)
    var, es = _hs(setup)
    return RollingForecast("historical", var, es, diagnostics={})


def age_weights(n: int, lam: float) -> np.ndarray:
    """Boudoukh-Richardson-Whitelaw weights by window position, oldest first.

    Parameters
    ----------
    n : int
        Window length.
    lam : float
        Decay, 0 < lam < 1.

    Returns
    -------
    (n,) array
        The i-th most recent day (i = 1 the latest) weighs
        ``lam^(i-1) (1 - lam) / (1 - lam^n)``; the weights sum to 1.

    References
    ----------
    Boudoukh, J., Richardson, M. and Whitelaw, R. (1998). The best of both
    worlds. Risk 11(5), 64-67.
    """
    if not 0.0 < lam < 1.0:
        raise ValueError(f"age-weighting lambda must lie in (0, 1), got {lam}")
    age = np.arange(n, 0, -1)  # position 0 is the oldest: age n
    return lam ** (age - 1) * (1 - lam) / (1 - lam**n)


def weighted_tail(losses: np.ndarray, weights: np.ndarray, alpha: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """VaR and ES of weighted losses, no interpolation.

    Parameters
    ----------
    losses : (..., n) array
    weights : (n,) or (..., n) array
        Probability of each loss (summing to 1).
    alpha : (C,) array
        Tail probabilities ``1 - c``.

    Returns
    -------
    var, es : (..., C) arrays

    Notes
    -----
    Sort losses from the worst, accumulate their weights ``W_j``; VaR is the
    loss ``L_J`` at which ``W_J`` first reaches alpha. ES puts exactly alpha
    of mass on the tail: ``(sum_{j<J} w_j L_j + (alpha - W_{J-1}) L_J) / alpha``.
    With equal weights and integer ``n alpha`` this is the mean of the
    ``n alpha`` worst losses.
    """
    order = np.argsort(-losses, axis=-1, kind="stable")
    lw = np.take_along_axis(losses, order, axis=-1)
    w = np.take_along_axis(np.broadcast_to(weights, losses.shape), order, axis=-1)
    cw = np.cumsum(w, axis=-1)
    cwl = np.cumsum(w * lw, axis=-1)
    reached = cw[..., None, :] >= alpha[:, None] - 1e-12  # (..., C, n)
    j = np.argmax(reached, axis=-1)  # first index reaching alpha
    var = np.take_along_axis(lw, j, axis=-1)
    w_j = np.take_along_axis(w, j, axis=-1)
    before_w = np.take_along_axis(cw, j, axis=-1) - w_j
    before_l = np.take_along_axis(cwl, j, axis=-1) - w_j * var
    es = (before_l + (alpha - before_w) * var) / alpha
    return var, es


def forecast_age_weighted_historical(
    pnl: np.ndarray,
    confidences: Sequence[float],
    *,
    window: int,
    days: int = 250,
    options: Mapping[str, Any] | None = None,
    seed: int | np.random.Generator | None = None,
) -> RollingForecast:
    """Age-weighted historical simulation (Boudoukh, Richardson and Whitelaw).

    Parameters
    ----------
    pnl, confidences, window, days, seed
        See :func:`forecast_historical`.
    options : mapping, optional
        ``lambda`` (float, default 0.98).

    Returns
    -------
    RollingForecast

    Notes
    -----
    Weights from :func:`age_weights`; VaR and ES from
    :func:`weighted_tail` (accumulate from the worst loss until 1 - c is
    reached, no interpolation).

    References
    ----------
    Boudoukh, Richardson and Whitelaw (1998), Risk 11(5).
    """
    opts = read_options("age_weighted_historical", options, {"lambda": 0.98})
    setup = prepare(pnl, confidences, window, days)
    w = age_weights(setup.window, float(opts["lambda"]))
    alpha = 1.0 - setup.confidences
    var = np.empty(setup.shape())
    es = np.empty(setup.shape())
    for days_slice, win in day_windows(
        setup.pnl, setup.window, setup.first, setup.first + setup.days, extra=4 + setup.confidences.size
    ):
        v, e = weighted_tail(-win, w, alpha)  # (P, n, C)
        var[:, :, days_slice] = v.transpose(0, 2, 1)
        es[:, :, days_slice] = e.transpose(0, 2, 1)
    return RollingForecast("age_weighted_historical", var, es, diagnostics={"lambda": float(opts["lambda"])})


_FHS_DEFAULTS = {"refit_every": 20, "fit_window": 1000, "min_fit_obs": 250, "lambda": 0.94}


def forecast_filtered_historical(
    pnl: np.ndarray,
    confidences: Sequence[float],
    *,
    window: int,
    days: int = 250,
    options: Mapping[str, Any] | None = None,
    seed: int | np.random.Generator | None = None,
) -> RollingForecast:
    """Filtered historical simulation with GARCH(1,1) volatility (Hull-White).

    Parameters
    ----------
    pnl, confidences, window, days, seed
        See :func:`forecast_historical`.
    options : mapping, optional
        ``refit_every`` (20 days), ``fit_window`` (1000: GARCH fit sample,
        at least ``window``, cut to the history available),
        ``min_fit_obs`` (250: shorter samples use the fallback),
        ``lambda`` (0.94: EWMA decay of the fallback).

    Returns
    -------
    RollingForecast
        ``fallback`` is True where the EWMA fallback was used;
        ``diagnostics`` counts the fits and the reasons of the fallbacks.

    Notes
    -----
    Every ``refit_every`` backtest days a zero-mean GARCH(1,1) is fitted per
    portfolio on the ``fit_window`` days before that day
    (:func:`~tailtrace.backtest.volatility.fit_garch11_many`: all
    (refit day, portfolio) samples of one length in one batched fit, arch
    only where that fails); until the next
    refit the parameters are held and the variance recursion continues on
    new data. Each window day is rescaled,
    ``x*_i = x_i sigma_t / sigma_i``, and VaR/ES are the historical figures
    of the rescaled window (k-th worst, mean of the k worst, as in
    :func:`forecast_historical`). When a fit fails, or the sample is shorter
    than ``min_fit_obs``, sigma comes from the EWMA recursion of
    :func:`~tailtrace.backtest.rolling_parametric.forecast_ewma_normal`.

    References
    ----------
    Hull, J. and White, A. (1998). Incorporating volatility updating into
    the historical simulation method for value-at-risk. Journal of Risk
    1(1), 5-19. Barone-Adesi, G., Giannopoulos, K. and Vosper, L. (1999).
    VaR without correlations for portfolios of derivative securities.
    Journal of Futures Markets 19(5).
    """
    opts = read_options("filtered_historical", options, _FHS_DEFAULTS)
    setup = prepare(pnl, confidences, window, days, min_window=10)
    refit_every = int(opts["refit_every"])
    offsets = refit_offsets(setup.days, refit_every)
    if opts["fit_window"] < 1 or opts["min_fit_obs"] < 1:
        raise ConfigError(f"filtered_historical: fit_window and min_fit_obs must be positive, got {opts}")
    fit_window = max(int(opts["fit_window"]), setup.window)
    W, T0, x = setup.window, setup.first, setup.pnl
    # EWMA path (fallback) over [T0 - W, T0 + D): same seeding as ewma_normal.
    ewma = ewma_variance_path(x, float(opts["lambda"]), T0 - W, T0 + setup.days, W)
    k = tail_count(W, setup.confidences)
    var = np.empty(setup.shape())
    es = np.empty(setup.shape())
    garch_used = np.zeros((setup.n_portfolios, setup.days), bool)
    reasons: Counter[str] = Counter()
    params: list[list[list[float] | None]] = []
    fits = _block_fits(x, T0 + offsets, fit_window, int(opts["min_fit_obs"]))
    for b, d0 in enumerate(offsets):  # one refit per block; forecasts inside the block are array ops
        d1 = min(d0 + refit_every, setup.days)
        t0 = T0 + d0
        span = slice(t0 - W, T0 + d1)  # window days of the block plus its forecast days
        s2 = ewma[:, span.start - (T0 - W) : span.stop - (T0 - W)].copy()
        reasons.update(f.reason for f in fits[b])
        ok = np.array([f.ok for f in fits[b]])
        if ok.any():
            good = [f for f in fits[b] if f.ok]
            omega, alpha, beta = (np.array([getattr(f, k) for f in good]) for k in ("omega", "alpha", "beta"))
            path = np.stack([f.variance[-W:] for f in good])
            s2[ok, :W] = path
            s2[ok, W:] = garch_variance_extend_many(omega, alpha, beta, path[:, -1], x[ok, t0 - 1 : T0 + d1 - 1])
            garch_used[ok, d0:d1] = True
        block_params: list[list[float] | None] = [
            [float(f"{v:.6g}") for v in (f.omega, f.alpha, f.beta)] if f.ok else None for f in fits[b]
        ]
        params.append(block_params)
        sigma = np.sqrt(s2)
        z = np.divide(x[:, span], sigma, out=np.zeros(sigma.shape), where=sigma > 0)
        windows = sliding_window_view(z[:, :-1], W, axis=-1)  # (P, d1 - d0, W)
        v, e = tail_of_sorted(_worst_first(windows), k)
        scale = sigma[:, W:, None]  # sigma_t of each forecast day
        var[:, :, d0:d1] = (v * scale).transpose(0, 2, 1)
        es[:, :, d0:d1] = (e * scale).transpose(0, 2, 1)
    fallback = np.broadcast_to(~garch_used[:, None, :], var.shape).copy()
    failed = {r: n for r, n in sorted(reasons.items()) if r != "ok"}
    if failed:
        warnings.warn(
            f"filtered_historical: GARCH(1,1) fit not used for {sum(failed.values())} of "
            f"{sum(reasons.values())} (portfolio, refit) pairs ({failed}); EWMA volatility used there",
            ModelWarning,
            stacklevel=2,
        )
    diag = {
        **opts,
        "fit_window": fit_window,
        "refit_offsets": offsets.tolist(),
        "garch_fits": int(reasons.get("ok", 0)),
        "fallback_reasons": failed,
        "garch_params": params,
    }
    return RollingForecast("filtered_historical", var, es, fallback, diag)


def _block_fits(x: np.ndarray, refit_days: np.ndarray, fit_window: int, min_obs: int) -> list[list[GarchFit]]:
    """GARCH fits of every portfolio at every refit day, ``[block][portfolio]``.

    The sample of day t is the ``min(t, fit_window)`` days before it; all
    samples of one length (every block once t ≥ fit_window) go to one call.
    """
    n_portfolios = x.shape[0]
    lengths = np.minimum(refit_days, fit_window)
    fits: list[list[GarchFit]] = [[] for _ in refit_days]
    for length in np.unique(lengths):
        blocks = np.flatnonzero(lengths == length)
        days = refit_days[blocks, None] - length + np.arange(length)  # (B, L)
        samples = x[:, days].transpose(2, 1, 0).reshape(length, -1)  # column b * P + p
        many = fit_garch11_many(samples, min_obs=min_obs)
        for k, b in enumerate(blocks):
            fits[b] = many[k * n_portfolios : (k + 1) * n_portfolios]
    return fits
