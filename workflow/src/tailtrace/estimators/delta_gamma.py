"""Delta-gamma VaR and ES: second-order P&L moments and Cornish–Fisher.

The P&L of each portfolio is approximated by its second-order Taylor
expansion in the log returns, ``ΔP ≈ θ d(h) + e'r + ½ r'Γr`` with
``r ~ N(hμ, hΣ)``. The first four cumulants of this quadratic form are
exact; VaR is the Cornish–Fisher quantile built from them and ES the tail
average of that same quantile function (closed form).
"""

from __future__ import annotations

import warnings
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
from scipy.special import ndtr, ndtri

from tailtrace.errors import ModelWarning
from tailtrace.options.pricing import horizon_calendar_days

from .base import RiskEstimate, RiskSample
from .delta_normal import check_options, gamma_blocks, parametric_inputs

__all__ = [
    "DEFAULTS",
    "delta_gamma_cumulants",
    "cornish_fisher_quantile",
    "cornish_fisher_tail_mean",
    "cornish_fisher_monotone",
    "CF_CHECK_RANGE",
    "estimate",
]

DEFAULTS: Mapping[str, Any] = {"include_mean": False, "include_theta": True}
CF_CHECK_RANGE = 5.0  # Cornish–Fisher must be monotone for standard quantiles in [-5, 5]
_SQRT_2PI = np.sqrt(2.0 * np.pi)


def _spectrum(gammas: np.ndarray, cov: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """``Σ = L L'``; eigenvalues ``λ`` (P, N) and vectors ``Q`` of ``L'ΓL``."""
    s, v = np.linalg.eigh(cov)
    root = v * np.sqrt(np.clip(s, 0.0, None))  # clip: round-off on a singular Σ
    b = root.T @ gammas @ root
    lam, q = np.linalg.eigh(0.5 * (b + np.swapaxes(b, 1, 2)))
    return lam, q, root


def _cumulants(lam, q, root, slopes, constant) -> np.ndarray:
    """Cumulants (P, 4) of ``constant + slopes'x + ½ x'Γx`` from the spectrum."""
    beta = np.einsum("pj,pji->pi", slopes @ root, q)
    b2 = beta * beta
    return np.stack([
        constant + 0.5 * lam.sum(axis=1),
        b2.sum(axis=1) + 0.5 * (lam ** 2).sum(axis=1),
        3.0 * (lam * b2).sum(axis=1) + (lam ** 3).sum(axis=1),
        12.0 * (lam ** 2 * b2).sum(axis=1) + 3.0 * (lam ** 4).sum(axis=1),
    ], axis=1)


def _support_cumulants(blocks, slopes: np.ndarray, cov: np.ndarray, constant: np.ndarray) -> np.ndarray:
    """Cumulants (P, 4) by the trace formulas on each portfolio's gamma support.

    Same quantities as :func:`_cumulants` (see :func:`delta_gamma_cumulants`,
    Notes), evaluated as ``tr((G S)^k)`` and ``u'G u``, ``u'G S G u`` with
    ``S = Σ[idx, idx]``, ``u = (Σ e)[idx]``: Γ vanishes outside ``idx``, so
    the cost is O(k³) per portfolio instead of an O(N³) eigen-decomposition.
    """
    cov_e = slopes @ cov  # (P, N) rows Σe
    out = np.empty((len(blocks), 4))
    for p, (idx, g) in enumerate(blocks):  # supports differ per portfolio; each step is a small matrix product
        s = cov[np.ix_(idx, idx)]
        m = g @ s
        m2 = m @ m
        u = cov_e[p, idx]
        gu = g @ u
        out[p] = (
            constant[p] + 0.5 * np.trace(m),
            slopes[p] @ cov_e[p] + 0.5 * np.sum(m * m.T),
            3.0 * (u @ gu) + np.sum(m2 * m.T),
            12.0 * (gu @ s @ gu) + 3.0 * np.sum(m2 * m2.T),
        )
    return out


def delta_gamma_cumulants(
    exposures: np.ndarray,
    gammas: np.ndarray,
    cov: np.ndarray,
    *,
    constant: np.ndarray | float = 0.0,
) -> np.ndarray:
    """First four cumulants of the delta-gamma P&L under zero-mean normal shocks.

    Parameters
    ----------
    exposures : (P, N) float
        ``e``, first-order sensitivities.
    gammas : (P, N, N) float
        ``Γ``, symmetric second-order sensitivities.
    cov : (N, N) float
        Covariance ``Σ`` of the shocks over the horizon.
    constant : float or (P,) float, default 0
        Deterministic P&L added to the mean (e.g. time decay).

    Returns
    -------
    (P, 4) float
        ``κ1 … κ4`` of ``ΔP = c + e'x + ½ x'Γx``, ``x ~ N(0, Σ)``.

    Notes
    -----
    ``κ1 = c + ½ tr(ΓΣ)``, ``κ2 = e'Σe + ½ tr((ΓΣ)²)``,
    ``κ3 = 3 e'ΣΓΣe + tr((ΓΣ)³)``, ``κ4 = 12 e'ΣΓΣΓΣe + 3 tr((ΓΣ)⁴)``.
    Computed through the eigen-decomposition of ``L'ΓL`` (``Σ = LL'``),
    which writes ``ΔP`` as a sum of independent non-central chi-squares.

    References
    ----------
    Mathai & Provost, *Quadratic Forms in Random Variables* (1992), ch. 3;
    Britten-Jones & Schaefer, "Non-linear value-at-risk", European Finance
    Review 2 (1999); Jorion, *Value at Risk*, 3rd ed. (2007), options chapter.
    """
    e = np.atleast_2d(np.asarray(exposures, dtype=np.float64))
    lam, q, root = _spectrum(np.asarray(gammas, dtype=np.float64), np.atleast_2d(np.asarray(cov, dtype=np.float64)))
    return _cumulants(lam, q, root, e, np.broadcast_to(np.asarray(constant, dtype=np.float64), (e.shape[0],)))


def cornish_fisher_quantile(z: np.ndarray, skew: np.ndarray, exkurt: np.ndarray) -> np.ndarray:
    """Cornish–Fisher adjusted standard quantile.

    Parameters
    ----------
    z : array
        Standard normal quantile (negative in the loss tail of P&L).
    skew, exkurt : array
        Skewness and excess kurtosis.

    Returns
    -------
    numpy.ndarray
        ``z + (z²-1)S/6 + (z³-3z)K/24 - (2z³-5z)S²/36`` (broadcast).

    References
    ----------
    Cornish & Fisher (1937); Zangari, "A VaR methodology for portfolios that
    include options", 1996.
    """
    s, k = np.asarray(skew), np.asarray(exkurt)
    return z + (z * z - 1.0) * s / 6.0 + (z ** 3 - 3.0 * z) * k / 24.0 - (2.0 * z ** 3 - 5.0 * z) * s * s / 36.0


def cornish_fisher_tail_mean(q: np.ndarray, skew: np.ndarray, exkurt: np.ndarray) -> np.ndarray:
    """Mean of the Cornish–Fisher quantile over the tail ``Z < q``.

    Parameters
    ----------
    q : array
        Standard normal quantile of the tail probability ``α = Φ(q)``.
    skew, exkurt : array

    Returns
    -------
    numpy.ndarray
        ``(1/α) ∫₀^α z_CF(Φ⁻¹(u)) du
        = -(φ(q)/α) [1 + qS/6 + (q²-1)K/24 - (2q²-1)S²/36]``.

    Notes
    -----
    From ``E[Z; Z<q] = -φ(q)``, ``E[Z²-1; Z<q] = -qφ(q)`` and
    ``E[Z³; Z<q] = -(q²+2)φ(q)`` (derived here; checked in the tests by
    numerical integration).
    """
    s, k = np.asarray(skew), np.asarray(exkurt)
    density = np.exp(-0.5 * q * q) / _SQRT_2PI
    bracket = 1.0 + q * s / 6.0 + (q * q - 1.0) * k / 24.0 - (2.0 * q * q - 1.0) * s * s / 36.0
    return -density / ndtr(q) * bracket


def cornish_fisher_monotone(
    skew: np.ndarray, exkurt: np.ndarray, *, lo: float = -CF_CHECK_RANGE, hi: float = CF_CHECK_RANGE
) -> np.ndarray:
    """True where the Cornish–Fisher map ``z -> z_CF`` increases on ``[lo, hi]``.

    Parameters
    ----------
    skew, exkurt : array
    lo, hi : float, default ±5
        Range of standard normal quantiles checked (probability outside
        ±5 is 5.7e-7, so the VaR and ES figures rest on this range).

    Returns
    -------
    numpy.ndarray of bool

    Notes
    -----
    ``dz_CF/dz = a z² + b z + c`` with ``a = K/8 - S²/6``, ``b = S/3``,
    ``c = 1 - K/8 + 5S²/36``; its minimum on ``[lo, hi]`` is at an end or at
    the vertex ``-b/(2a)``. Where it is negative the expansion is not a
    quantile function and its figures are unreliable. Requiring monotonicity
    on all of R instead (``a >= 0``, ``b² <= 4ac``) would reject nearly every
    skewed case, since ``a < 0`` whenever ``K < 4S²/3``.

    References
    ----------
    Maillard, "A user's guide to the Cornish Fisher expansion", SSRN 1997178
    (2012).
    """
    s, k = np.asarray(skew, dtype=np.float64), np.asarray(exkurt, dtype=np.float64)
    a = k / 8.0 - s * s / 6.0
    b = s / 3.0
    c = 1.0 - k / 8.0 + 5.0 * s * s / 36.0

    def slope(z):
        return (a * z + b) * z + c

    vertex = np.clip(np.divide(-b, 2.0 * a, where=a > 0, out=np.zeros_like(a)), lo, hi)
    lowest = np.minimum(np.minimum(slope(lo), slope(hi)), np.where(a > 0, slope(vertex), np.inf))
    return lowest >= 0.0


def estimate(
    sample: RiskSample,
    confidences: Sequence[float],
    horizons: Sequence[int],
    *,
    options: Mapping[str, Any] | None = None,
    seed: int | np.random.Generator | None = None,
) -> RiskEstimate:
    """Delta-gamma(-theta) VaR and ES via Cornish–Fisher.

    Parameters
    ----------
    sample : RiskSample
        Uses ``returns`` (window), ``exposures``/``gammas`` (a linear book
        when absent: ``values`` and ``diag(values)``) and ``thetas``.
    confidences : sequence of float
    horizons : sequence of int
    options : mapping, optional
        ``include_mean`` (default False): shocks ``N(hμ, hΣ)`` instead of
        ``N(0, hΣ)``; ``include_theta`` (default True): add the time decay
        ``θ · h·7/5`` calendar days, matching the ageing of full revaluation.
    seed : ignored
        Deterministic method; accepted for the common signature.

    Returns
    -------
    RiskEstimate
        ``scaling`` is ``none`` for h = 1, else ``sqrt_time`` (the
        covariance is scaled by h; VaR itself does not scale with √h).
        ``diagnostics`` holds the moments and a Cornish–Fisher validity flag
        per portfolio and horizon.

    Warns
    -----
    ModelWarning
        When the Cornish–Fisher map is not monotone for the moments found
        (no fallback: the figures are reported and flagged).

    Notes
    -----
    Cumulants as in :func:`delta_gamma_cumulants` with ``Σ_h = hΣ``,
    evaluated by its trace formulas on the instruments where each
    portfolio's Γ is non-zero (O(k³) per portfolio, no N × N eigen-problem
    per portfolio); with a mean, ``e* = e + hΓμ`` and ``c = h e'μ + ½h²μ'Γμ``. With
    ``σ = √κ2``, ``S = κ3/σ³``, ``K = κ4/σ⁴``, ``q = Φ⁻¹(1-c)``:
    ``VaR = -(κ1 + σ z_CF(q))`` and ``ES = -(κ1 + σ T(q))`` with ``T`` the
    tail mean of :func:`cornish_fisher_tail_mean`.

    References
    ----------
    Zangari (1996), "A VaR methodology for portfolios that include options"; Jorion, *Value at Risk*, 3rd ed.
    (2007); Hull, *Options, Futures, and Other Derivatives*, VaR chapter.
    """
    opts = check_options(options, DEFAULTS, "delta_gamma")
    x = parametric_inputs(sample, confidences, horizons)
    blocks = gamma_blocks(x)
    n_p, n_h = x.exposures.shape[0], x.horizons.size
    kappa = np.empty((n_p, n_h, 4))
    for i, h in enumerate(x.horizons.astype(np.float64)):  # a handful of horizons
        slopes, constant = x.exposures, np.zeros(n_p)
        if opts["include_mean"]:
            mu = h * x.mean
            g_mu = np.zeros_like(x.exposures)
            for p, (idx, g) in enumerate(blocks):
                g_mu[p, idx] = g @ mu[idx]
            slopes = x.exposures + g_mu
            constant = constant + x.exposures @ mu + 0.5 * (g_mu @ mu)
        if opts["include_theta"]:
            constant = constant + x.thetas * horizon_calendar_days(h)
        kappa[:, i] = _support_cumulants(blocks, slopes, h * x.cov, constant)
    mean, variance = kappa[..., 0], np.maximum(kappa[..., 1], 0.0)
    sd = np.sqrt(variance)
    safe = sd > 0
    skew = np.divide(kappa[..., 2], np.where(safe, sd ** 3, 1.0), where=safe, out=np.zeros_like(sd))
    exkurt = np.divide(kappa[..., 3], np.where(safe, variance ** 2, 1.0), where=safe, out=np.zeros_like(sd))
    q = ndtri(1.0 - x.confidences)[None, :, None]  # (1, C, 1) left-tail quantile
    s3, k3 = skew[:, None, :], exkurt[:, None, :]
    var = -(mean[:, None, :] + sd[:, None, :] * cornish_fisher_quantile(q, s3, k3))
    es = -(mean[:, None, :] + sd[:, None, :] * cornish_fisher_tail_mean(q, s3, k3))
    monotone = cornish_fisher_monotone(skew, exkurt) | ~safe
    if not monotone.all():
        bad = sorted({sample.portfolios[p] for p in np.flatnonzero(~monotone.all(axis=1))})
        warnings.warn(f"delta_gamma: Cornish-Fisher expansion not monotone for portfolio(s) {bad} "
                      "(skewness/kurtosis outside its domain); figures flagged in diagnostics",
                      ModelWarning, stacklevel=2)
    diagnostics = {
        "method": "delta_gamma",
        "covariance": "window sample covariance of daily log returns, ddof=1, scaled by h",
        "sensitivities": x.source,
        "include_mean": opts["include_mean"],
        "include_theta": opts["include_theta"],
        "es": "closed-form tail mean of the Cornish-Fisher quantile",
        "mean": mean.tolist(),
        "sd": sd.tolist(),
        "skewness": skew.tolist(),
        "excess_kurtosis": exkurt.tolist(),
        "cf_monotone": monotone.tolist(),
    }
    return RiskEstimate(var=var, es=es, scaling=x.scaling, n_obs=x.n_obs, diagnostics=diagnostics)
