"""Modified (Cornish–Fisher) VaR and ES from sample skewness and kurtosis."""

from __future__ import annotations

import warnings
from typing import Any, Mapping, Sequence

import numpy as np
from scipy.special import ndtri

from ..errors import ModelWarning
from .base import RiskEstimate, RiskSample
from .parametric import portfolio_moments
from .scaling import location_scale_var_es, sqrt_time_labels

__all__ = [
    "DEFAULT_MONOTONE_TAIL",
    "cornish_fisher_z",
    "cornish_fisher_factors",
    "factor_sensitivities",
    "is_monotone",
    "skew_kurtosis",
    "skew_kurtosis_gradients",
    "estimate",
]

DEFAULT_MONOTONE_TAIL = 1e-6


def cornish_fisher_z(z: np.ndarray, skew: np.ndarray, kurt: np.ndarray) -> np.ndarray:
    """Cornish–Fisher quantile ``z_CF`` of a standard normal quantile ``z``.

    Notes
    -----
    ``z_CF = z + (z² − 1)S/6 + (z³ − 3z)K/24 − (2z³ − 5z)S²/36`` with S the
    skewness and K the excess kurtosis.

    References
    ----------
    Zangari, "A VaR methodology for portfolios that include options",
    1996; Favre & Galeano, "Mean-modified
    Value-at-Risk optimization with hedge funds", Journal of Alternative
    Investments 5(2), 2002.
    """
    return z + (z**2 - 1) * skew / 6 + (z**3 - 3 * z) * kurt / 24 - (2 * z**3 - 5 * z) * skew**2 / 36


def cornish_fisher_factors(
    skew: np.ndarray, kurt: np.ndarray, confidences: Sequence[float]
) -> tuple[np.ndarray, np.ndarray]:
    """Loss quantile and tail mean of the standardised Cornish–Fisher law, ``(P, C)``.

    Returns
    -------
    f_var, f_es : (P, C) arrays
        ``VaR = σ f_var − μ`` and ``ES = σ f_es − μ`` for a 1-day P&L.

    Notes
    -----
    With ``z = Φ⁻¹(c)`` the left-tail quantile is ``a = −z`` and
    ``f_var = −z_CF(a)``. ES integrates the quantile function over the tail,
    ``f_es = −(1/(1 − c)) ∫_{−∞}^{a} z_CF(x) φ(x) dx``. As z_CF is a cubic
    and ``∫_{−∞}^{a} xᵏφ`` is ``Φ(a), −φ(a), Φ(a) − aφ(a), −(a² + 2)φ(a)``
    for k = 0…3, the integral is closed:
    ``f_es = φ(z)/(1 − c) · [1 − zS/6 + (z² − 1)K/24 + (1 − 2z²)S²/36]``,
    which is the normal ES factor when S = K = 0.
    """
    skew = np.asarray(skew, dtype=float)[:, None]
    kurt = np.asarray(kurt, dtype=float)[:, None]
    c = np.asarray(confidences, dtype=float)[None, :]
    z = ndtri(c)
    f_var = -cornish_fisher_z(-z, skew, kurt)
    density = np.exp(-0.5 * z**2) / np.sqrt(2 * np.pi)
    bracket = 1 - z * skew / 6 + (z**2 - 1) * kurt / 24 + (1 - 2 * z**2) * skew**2 / 36
    return f_var, density / (1 - c) * bracket


def factor_sensitivities(
    skew: np.ndarray, kurt: np.ndarray, confidences: Sequence[float]
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Partial derivatives of :func:`cornish_fisher_factors` in S and K, each ``(P, C)``.

    Returns
    -------
    dvar_ds, dvar_dk, des_ds, des_dk
    """
    skew = np.asarray(skew, dtype=float)[:, None]
    c = np.asarray(confidences, dtype=float)[None, :]
    z = ndtri(c)
    shape = np.broadcast_shapes(skew.shape, c.shape)
    density = np.exp(-0.5 * z**2) / np.sqrt(2 * np.pi) / (1 - c)
    dvar_ds = -(z**2 - 1) / 6 - (2 * z**3 - 5 * z) * skew / 18
    dvar_dk = np.broadcast_to((z**3 - 3 * z) / 24, shape)
    des_ds = density * (-z / 6 + (1 - 2 * z**2) * skew / 18)
    des_dk = np.broadcast_to(density * (z**2 - 1) / 24, shape)
    return dvar_ds, dvar_dk, des_ds, des_dk


def is_monotone(
    skew: np.ndarray, kurt: np.ndarray, confidences: Sequence[float], tail_prob: float = DEFAULT_MONOTONE_TAIL
) -> np.ndarray:
    """Whether the Cornish–Fisher map is increasing over the loss tail used.

    Parameters
    ----------
    skew, kurt : (P,) arrays
    confidences : sequence of float
    tail_prob : float
        Depth of the check: from ``Φ⁻¹(tail_prob)`` up to the quantile of
        the lowest confidence (default 1e-6).

    Returns
    -------
    (P,) bool

    Notes
    -----
    ``dz_CF/dz = A z² + B z + C'`` with ``A = K/8 − S²/6``, ``B = S/3``,
    ``C' = 1 − K/8 + 5S²/36``. Its minimum over the interval is at an end or
    at the vertex ``−B/(2A)`` when A > 0 and the vertex lies inside. A
    non-increasing map makes a higher confidence give a lower VaR. Over the
    whole real line the map is rarely monotone (never with K = 0 and S ≠ 0),
    hence the check over the tail the figures rest on.

    References
    ----------
    Maillard, "A user's guide to the Cornish Fisher expansion", SSRN 1997178,
    2012 (domain of validity).
    """
    skew = np.asarray(skew, dtype=float)
    kurt = np.asarray(kurt, dtype=float)
    c = np.asarray(confidences, dtype=float)
    top = -ndtri(c.min())
    bottom = min(ndtri(tail_prob), -ndtri(c.max()))
    a2 = kurt / 8 - skew**2 / 6
    a1 = skew / 3
    a0 = 1 - kurt / 8 + 5 * skew**2 / 36

    def slope(x: np.ndarray | float) -> np.ndarray:
        return a2 * x**2 + a1 * x + a0

    safe_a2 = np.where(a2 > 0, a2, 1.0)
    vertex = np.clip(-a1 / (2 * safe_a2), bottom, top)
    lowest = np.minimum(slope(bottom), slope(top))
    lowest = np.where(a2 > 0, np.minimum(lowest, slope(vertex)), lowest)
    return lowest > 0


def skew_kurtosis(pnl: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Sample skewness and excess kurtosis of each row (moment estimators g1, g2).

    Notes
    -----
    ``S = m3/m2^{3/2}``, ``K = m4/m2² − 3`` with central moments ``m_k``
    (divisor T). Constant rows give S = K = 0.
    """
    centred = pnl - pnl.mean(axis=-1, keepdims=True)
    m2 = np.mean(centred**2, axis=-1)
    ok = _has_spread(m2, pnl)
    safe = np.where(ok, m2, 1.0)
    skew = np.where(ok, np.mean(centred**3, axis=-1) / safe**1.5, 0.0)
    kurt = np.where(ok, np.mean(centred**4, axis=-1) / safe**2 - 3.0, 0.0)
    return skew, kurt


def estimate(
    sample: RiskSample,
    confidences: Sequence[float],
    horizons: Sequence[int],
    *,
    options: Mapping[str, Any],
    seed: int | np.random.Generator | None = None,
) -> RiskEstimate:
    """Cornish–Fisher (modified) VaR and ES.

    Parameters
    ----------
    sample : RiskSample
    confidences, horizons : sequences
    options : mapping
        ``include_mean`` (bool, default False); ``monotone_tail_prob``
        (float, default 1e-6), see :func:`is_monotone`.
    seed : unused

    Notes
    -----
    S and K are those of each portfolio's 1-day P&L; σ and μ those of the
    normal method. ``VaR = σ√h f_var(S, K) − μh`` and likewise ES (see
    :func:`cornish_fisher_factors`). Where the expansion is not monotone
    over the tail, the portfolio falls back to the normal figures (S = K = 0)
    with a ModelWarning; ``diagnostics['model']`` says which was used.
    """
    include_mean = bool(options.get("include_mean", False))
    tail_prob = float(options.get("monotone_tail_prob", DEFAULT_MONOTONE_TAIL))
    mu, sigma, _ = portfolio_moments(sample, include_mean, covariance=False)
    skew, kurt = skew_kurtosis(sample.pnl)
    monotone = is_monotone(skew, kurt, confidences, tail_prob)
    if not monotone.all():
        names = [p for p, m in zip(sample.portfolios, monotone) if not m]
        warnings.warn(
            f"Cornish-Fisher expansion not monotone for {names}; normal VaR and ES used instead",
            ModelWarning,
            stacklevel=2,
        )
    factors = cornish_fisher_factors(np.where(monotone, skew, 0.0), np.where(monotone, kurt, 0.0), confidences)
    var, es = location_scale_var_es(mu, sigma, *factors, horizons)
    return RiskEstimate(
        var=var,
        es=es,
        scaling=sqrt_time_labels(horizons),
        n_obs=np.full(len(horizons), sample.n_obs),
        diagnostics={
            "include_mean": include_mean,
            "skewness": skew.tolist(),
            "excess_kurtosis": kurt.tolist(),
            "model": ["cornish_fisher" if m else "normal_fallback" for m in monotone],
            "monotone_tail_prob": tail_prob,
            "daily_sigma": sigma.tolist(),
        },
    )


def skew_kurtosis_gradients(
    simple: np.ndarray, values: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Skewness and excess kurtosis of linear books and their gradients in the holdings.

    Parameters
    ----------
    simple : (T, N) daily simple returns
    values : (P, N) holdings

    Returns
    -------
    skew, kurt : (P,) arrays
    dskew, dkurt : (P, N) arrays, ∂S/∂v_i and ∂K/∂v_i

    Notes
    -----
    With centred returns X̃ and ``y = X̃v``, ``m_k = E[y^k]`` has gradient
    ``k E[y^{k−1} X̃]``; then ``∂S = ∂m3/m2^{3/2} − (3/2) m3 ∂m2/m2^{5/2}`` and
    ``∂K = ∂m4/m2² − 2 m4 ∂m2/m2³``. S and K are homogeneous of degree 0,
    so ``Σ v_i ∂S/∂v_i = 0`` (likewise for K).

    References
    ----------
    Boudt, Peterson & Croux, "Estimation and decomposition of downside risk
    for portfolios with non-normal returns", Journal of Risk 11(2), 2008.
    """
    centred = simple - simple.mean(axis=0)
    y = values @ centred.T  # (P, T)
    T = centred.shape[0]
    m2, m3, m4 = (np.mean(y**k, axis=1) for k in (2, 3, 4))
    d2, d3, d4 = (k * (y ** (k - 1)) @ centred / T for k in (2, 3, 4))
    raw = values @ simple.T
    ok = _has_spread(m2, raw)[:, None]
    safe = np.where(ok, m2[:, None], 1.0)
    dskew = np.where(ok, d3 / safe**1.5 - 1.5 * m3[:, None] * d2 / safe**2.5, 0.0)
    dkurt = np.where(ok, d4 / safe**2 - 2 * m4[:, None] * d2 / safe**3, 0.0)
    skew, kurt = skew_kurtosis(raw)
    return skew, kurt, dskew, dkurt


def _has_spread(m2: np.ndarray, raw: np.ndarray) -> np.ndarray:
    # a variance at rounding level of the raw P&L counts as none (S and K set to 0)
    return m2 > 1e-28 * np.maximum(np.mean(raw**2, axis=-1), 1e-300)
