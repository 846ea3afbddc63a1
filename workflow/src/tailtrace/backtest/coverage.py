"""Coverage tests of VaR exceptions: Kupiec (1995) and Christoffersen (1998).

All functions broadcast over leading axes, so one call tests every
(method, portfolio, confidence) series at once; time is the last axis.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.special import chdtrc, xlogy

__all__ = [
    "CoverageTests",
    "coverage_tests",
    "exceptions",
    "kupiec_pof",
    "transition_counts",
    "independence_lr",
    "chi2_sf",
]


def exceptions(pnl: np.ndarray, var: np.ndarray) -> np.ndarray:
    """Flag the days whose loss exceeds the VaR forecast.

    Parameters
    ----------
    pnl : array_like
        Realised P&L (profit positive), time on the last axis.
    var : array_like
        VaR forecasts as positive loss amounts, broadcastable to ``pnl``.

    Returns
    -------
    numpy.ndarray of bool
        ``pnl < -var``: a loss strictly larger than the VaR. A loss equal to
        the VaR is not an exception.
    """
    return np.asarray(pnl, dtype=float) < -np.asarray(var, dtype=float)


def chi2_sf(statistic: np.ndarray, dof: int) -> np.ndarray:
    """Upper tail probability of the chi-squared distribution (p-value)."""
    return chdtrc(dof, np.asarray(statistic, dtype=float))


def _ratio(num: np.ndarray, den: np.ndarray) -> np.ndarray:
    """num / den with 0 where den == 0 (the matching counts are then zero)."""
    num, den = np.broadcast_arrays(np.asarray(num, dtype=float), np.asarray(den, dtype=float))
    return np.divide(num, den, out=np.zeros(num.shape), where=den > 0)


def kupiec_pof(n_exceptions: np.ndarray, n_obs: np.ndarray, coverage: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Kupiec's proportion-of-failures likelihood ratio.

    Parameters
    ----------
    n_exceptions, n_obs : array_like of int
        Exceptions N and observations T (broadcast together).
    coverage : array_like of float
        VaR confidence c; the expected exception rate is p = 1 - c.

    Returns
    -------
    lr, p_value : numpy.ndarray
        The statistic and its chi-squared (1 dof) p-value.

    Notes
    -----
    ``LR = -2 ln[(1-p)^(T-N) p^N] + 2 ln[(1-p̂)^(T-N) p̂^N]`` with
    ``p̂ = N/T``. ``xlogy`` makes N = 0 and N = T finite (0 ln 0 = 0).

    References
    ----------
    Kupiec, P. (1995). Techniques for verifying the accuracy of risk
    measurement models. Journal of Derivatives 3(2), 73-84.
    """
    n = np.asarray(n_exceptions, dtype=float)
    t = np.asarray(n_obs, dtype=float)
    p = 1.0 - np.asarray(coverage, dtype=float)
    p_hat = _ratio(n, t)
    lr = 2.0 * (xlogy(t - n, 1.0 - p_hat) + xlogy(n, p_hat) - xlogy(t - n, 1.0 - p) - xlogy(n, p))
    lr = np.maximum(lr, 0.0)  # rounding can give -1e-15 when p̂ == p
    return lr, chi2_sf(lr, 1)


def transition_counts(hits: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Count day-to-day transitions of an exception indicator.

    Parameters
    ----------
    hits : array_like of bool, shape (..., T)

    Returns
    -------
    n00, n01, n10, n11 : numpy.ndarray of int, shape (...)
        ``n_ij`` = number of days t >= 1 with ``hits[t-1] == i`` and
        ``hits[t] == j``; they sum to T - 1.
    """
    h = np.asarray(hits, dtype=bool)
    prev, cur = h[..., :-1], h[..., 1:]
    n11 = np.count_nonzero(prev & cur, axis=-1)
    n10 = np.count_nonzero(prev & ~cur, axis=-1)
    n01 = np.count_nonzero(~prev & cur, axis=-1)
    n00 = np.count_nonzero(~prev & ~cur, axis=-1)
    return n00, n01, n10, n11


def independence_lr(
    n00: np.ndarray, n01: np.ndarray, n10: np.ndarray, n11: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """Christoffersen's independence likelihood ratio from transition counts.

    Parameters
    ----------
    n00, n01, n10, n11 : array_like of int
        Transition counts (see :func:`transition_counts`).

    Returns
    -------
    lr, p_value : numpy.ndarray
        Statistic and chi-squared (1 dof) p-value.

    Notes
    -----
    First-order Markov alternative against independence:
    ``π01 = n01/(n00+n01)``, ``π11 = n11/(n10+n11)``,
    ``π = (n01+n11)/(n00+n01+n10+n11)``,
    ``LR = -2 ln[(1-π)^(n00+n10) π^(n01+n11)]
    + 2 ln[(1-π01)^n00 π01^n01 (1-π11)^n10 π11^n11]``.
    Degenerate counts (no exceptions, only exceptions, no exception
    followed by anything) give LR = 0 without NaN: an empty row of the
    transition matrix has zero counts, so its probability never matters.

    References
    ----------
    Christoffersen, P. F. (1998). Evaluating interval forecasts.
    International Economic Review 39(4), 841-862.
    """
    n00, n01, n10, n11 = (np.asarray(x, dtype=float) for x in (n00, n01, n10, n11))
    pi01 = _ratio(n01, n00 + n01)
    pi11 = _ratio(n11, n10 + n11)
    pi = _ratio(n01 + n11, n00 + n01 + n10 + n11)
    log_alt = xlogy(n00, 1 - pi01) + xlogy(n01, pi01) + xlogy(n10, 1 - pi11) + xlogy(n11, pi11)
    log_null = xlogy(n00 + n10, 1 - pi) + xlogy(n01 + n11, pi)
    lr = np.maximum(2.0 * (log_alt - log_null), 0.0)
    return lr, chi2_sf(lr, 1)


@dataclass(frozen=True)
class CoverageTests:
    """Exception counts and coverage test results, shape (...) each.

    Attributes
    ----------
    n_obs : int
        Days tested (T).
    exceptions : numpy.ndarray of int
    kupiec_lr, kupiec_p : numpy.ndarray
        Unconditional coverage (Kupiec POF), chi-squared 1 dof.
    independence_lr, independence_p : numpy.ndarray
        Christoffersen independence, chi-squared 1 dof.
    cc_lr, cc_p : numpy.ndarray
        Conditional coverage ``LR_cc = LR_pof + LR_ind``, chi-squared 2 dof.
    transitions : tuple of numpy.ndarray
        ``(n00, n01, n10, n11)``.
    """

    n_obs: int
    exceptions: np.ndarray
    kupiec_lr: np.ndarray
    kupiec_p: np.ndarray
    independence_lr: np.ndarray
    independence_p: np.ndarray
    cc_lr: np.ndarray
    cc_p: np.ndarray
    transitions: tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]


def coverage_tests(hits: np.ndarray, coverage: np.ndarray) -> CoverageTests:
    """Run the Kupiec and Christoffersen tests on exception indicators.

    Parameters
    ----------
    hits : array_like of bool, shape (..., T)
        Exception indicators (:func:`exceptions`).
    coverage : array_like of float
        VaR confidence, broadcastable to ``hits.shape[:-1]``.

    Returns
    -------
    CoverageTests

    Notes
    -----
    Conditional coverage is the sum ``LR_pof + LR_ind`` (chi-squared, 2
    dof), the usual practical form; Christoffersen's joint statistic
    conditions on the first observation and differs from the sum by the
    first day's term only.

    References
    ----------
    Kupiec (1995); Christoffersen (1998), see :func:`kupiec_pof` and
    :func:`independence_lr`.
    """
    h = np.asarray(hits, dtype=bool)
    if h.ndim == 0 or h.shape[-1] < 2:
        raise ValueError(f"coverage tests need at least 2 days on the last axis, got shape {h.shape}")
    t = h.shape[-1]
    n = np.count_nonzero(h, axis=-1)
    pof, pof_p = kupiec_pof(n, t, coverage)
    counts = transition_counts(h)
    ind, ind_p = independence_lr(*counts)
    cc = pof + ind
    return CoverageTests(
        n_obs=int(t),
        exceptions=n,
        kupiec_lr=pof,
        kupiec_p=pof_p,
        independence_lr=ind,
        independence_p=ind_p,
        cc_lr=cc,
        cc_p=chi2_sf(cc, 2),
        transitions=counts,
    )
