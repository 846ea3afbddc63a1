"""Conditional variance paths: EWMA in one pass, GARCH(1,1) fitted in batches.

scipy.signal and arch are imported inside the functions that need them
(about 0.65 s and 1.7 s), so light jobs importing the package do not pay;
arch only runs for the samples the batched fit cannot fit.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np

from ..garch_batch import fit_garch11_batch

__all__ = [
    "ewma_variance_path",
    "GarchFit",
    "fit_garch11",
    "fit_garch11_many",
    "garch_variance_extend",
    "garch_variance_extend_many",
]


def ewma_variance_path(pnl: np.ndarray, lam: float, start: int, stop: int, seed_window: int) -> np.ndarray:
    """EWMA variance for columns ``start .. stop-1`` of a (P, T) series.

    Parameters
    ----------
    pnl : (P, T) array
    lam : float
        Decay, 0 < lam < 1.
    start : int
        First column of the path; the seed uses columns
        ``start .. start + seed_window - 1``.
    stop : int
        One past the last column needed (at most T).
    seed_window : int

    Returns
    -------
    (P, stop - start) array
        ``s2[:, j]`` is the variance forecast for column ``start + j`` made
        with data before it. Column ``start`` holds the seed.

    Notes
    -----
    ``sigma^2_t = lam sigma^2_{t-1} + (1 - lam) x_{t-1}^2`` (zero mean).
    Seed ``sigma^2_start`` = mean of ``x^2`` over the seed window (the sample
    variance about zero, the same convention as the recursion). The first
    forecast that is used, at ``start + seed_window``, therefore rests on
    data before it only. One ``scipy.signal.lfilter`` pass.

    References
    ----------
    the 1996 industry technical document on EWMA volatility (as discussed in Hull, *Risk Management and Financial Institutions*, volatility chapter);
    Hull, Risk Management and Financial Institutions, volatility chapter.
    """
    from scipy.signal import lfilter

    if not 0.0 < lam < 1.0:
        raise ValueError(f"EWMA lambda must lie in (0, 1), got {lam}")
    x = np.asarray(pnl, dtype=float)
    seed = np.mean(x[:, start : start + seed_window] ** 2, axis=-1)
    if stop - start <= 1:
        return seed[:, None].copy()
    sq = x[:, start : stop - 1] ** 2
    rest = lfilter([1.0 - lam], [1.0, -lam], sq, axis=-1, zi=(lam * seed)[:, None])[0]
    return np.concatenate([seed[:, None], rest], axis=-1)


@dataclass(frozen=True)
class GarchFit:
    """One GARCH(1,1) fit, in the units of the data.

    Attributes
    ----------
    ok : bool
        False when the fit failed; then the other numbers are NaN.
    reason : str
        "ok", "too_short", "constant", "error", "not_converged",
        "non_stationary".
    omega, alpha, beta : float
    variance : (n,) array or None
        Conditional variances over the fit sample (arch's filter).
    """

    ok: bool
    reason: str
    omega: float = np.nan
    alpha: float = np.nan
    beta: float = np.nan
    variance: np.ndarray | None = None


def fit_garch11(x: np.ndarray, *, min_obs: int = 250) -> GarchFit:
    """Fit a zero-mean GARCH(1,1) with normal errors by maximum likelihood.

    Parameters
    ----------
    x : (n,) array
        P&L sample (any unit); it is scaled to unit standard deviation for
        the optimiser and the results are scaled back.
    min_obs : int
        Fewer observations than this is a failed fit ("too_short").

    Returns
    -------
    GarchFit

    Notes
    -----
    ``sigma^2_t = omega + alpha x_{t-1}^2 + beta sigma^2_{t-1}``, fitted with
    ``arch.arch_model(mean="Zero", vol="GARCH", p=1, q=1)``. A fit counts as
    failed when arch raises, reports non-convergence, or gives
    ``alpha + beta >= 1`` or non-finite numbers. arch's own warnings are
    silenced here; the caller records the reason.

    References
    ----------
    Bollerslev, T. (1986). Generalized autoregressive conditional
    heteroskedasticity. Journal of Econometrics 31, 307-327. Sheppard, K.,
    arch (Python package).
    """
    from arch import arch_model

    x = np.asarray(x, dtype=float)
    if x.size < max(min_obs, 10):
        return GarchFit(False, "too_short")
    scale = float(np.std(x))
    if not scale > 0:
        return GarchFit(False, "constant")
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            res = arch_model(x / scale, mean="Zero", vol="GARCH", p=1, q=1, rescale=False).fit(
                disp="off", show_warning=False
            )
    except (ValueError, np.linalg.LinAlgError, RuntimeError):
        return GarchFit(False, "error")
    if res.convergence_flag != 0:
        return GarchFit(False, "not_converged")
    omega, alpha, beta = (float(v) for v in np.asarray(res.params))
    variance = np.asarray(res.conditional_volatility, dtype=float) ** 2 * scale**2
    if not (np.isfinite([omega, alpha, beta]).all() and np.isfinite(variance).all()) or alpha + beta >= 1.0:
        return GarchFit(False, "non_stationary")
    return GarchFit(True, "ok", omega * scale**2, alpha, beta, variance)


def fit_garch11_many(x: np.ndarray, *, min_obs: int = 250) -> list[GarchFit]:
    """:func:`fit_garch11` of every column of ``x``, with one batched fit.

    Parameters
    ----------
    x : (n, M) array
        M P&L samples of equal length, oldest first.
    min_obs : int
        As in :func:`fit_garch11`.

    Returns
    -------
    list of GarchFit, one per column

    Notes
    -----
    Columns that are long enough and not constant are fitted together by
    :func:`~tailtrace.garch_batch.fit_garch11_batch` (the likelihood,
    backcast and bounds of arch's zero-mean GARCH(1,1)); a column it does
    not make usable (not converged, non-finite, α + β ≥ 1) is fitted by
    :func:`fit_garch11` with arch, which gives the reason if that fails too.
    """
    x = np.asarray(x, dtype=float)
    if x.ndim != 2:
        raise ValueError(f"fit_garch11_many needs an (n, M) array, got shape {x.shape}")
    n, m = x.shape
    if n < max(min_obs, 10):
        return [GarchFit(False, "too_short") for _ in range(m)]
    fits: list[GarchFit | None] = [None] * m
    cols = np.flatnonzero(np.std(x, axis=0) > 0)
    batch = fit_garch11_batch(x[:, cols])
    for k in np.flatnonzero(batch.usable):
        fits[cols[k]] = GarchFit(
            True, "ok", float(batch.omega[k]), float(batch.alpha[k]), float(batch.beta[k]), batch.variance[:, k]
        )
    return [f if f is not None else fit_garch11(x[:, j], min_obs=min_obs) for j, f in enumerate(fits)]


def garch_variance_extend(fit: GarchFit, last_x: float, x_after: np.ndarray) -> np.ndarray:
    """Continue a fitted GARCH variance path past the fit sample.

    Parameters
    ----------
    fit : GarchFit
        A successful fit; its last variance is ``sigma^2`` of the fit
        sample's last day.
    last_x : float
        The fit sample's last observation.
    x_after : (m,) array
        Observations after the fit sample (may be empty).

    Returns
    -------
    (m + 1,) array
        ``sigma^2`` for the first day after the fit sample and the next m
        days, with the parameters held fixed (no refit).
    """
    x_prev = np.concatenate([[last_x], np.asarray(x_after, dtype=float)])
    omega, alpha, beta, last = (np.array([v]) for v in (fit.omega, fit.alpha, fit.beta, fit.variance[-1]))
    return garch_variance_extend_many(omega, alpha, beta, last, x_prev[None, :])[0]  # one series of the batch form


def garch_variance_extend_many(
    omega: np.ndarray, alpha: np.ndarray, beta: np.ndarray, last_variance: np.ndarray, x_prev: np.ndarray
) -> np.ndarray:
    """:func:`garch_variance_extend` for several series with their own parameters.

    Parameters
    ----------
    omega, alpha, beta, last_variance : (P,) arrays
        Fitted parameters and ``sigma^2`` of each fit sample's last day.
    x_prev : (P, m + 1) array
        Each fit sample's last observation, then the m observations after it.

    Returns
    -------
    (P, m + 1) array
        ``sigma^2`` for the first day after each fit sample and the next m days.
    """
    x_prev = np.asarray(x_prev, dtype=float)
    drive = omega[:, None] + alpha[:, None] * x_prev**2
    out = np.empty_like(drive)
    prev = np.asarray(last_variance, dtype=float)
    for j in range(drive.shape[1]):  # at most refit_every days, all series side by side
        prev = out[:, j] = drive[:, j] + beta * prev
    return out
