"""Expected-shortfall backtest: the Acerbi-Szekely (2014) Z2 statistic.

Z2 compares the realised losses beyond VaR with the forecast ES. Its
distribution under a correct model depends a little on the tail, so the
published thresholds are used for the case they were published for
(T = 250, alpha = 2.5%) and thresholds simulated under normality for any
other case (seeded, cached, documented in docs/methodology.md).
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache

import numpy as np
from scipy.special import ndtri

from .zones import GREEN, RED, YELLOW

__all__ = [
    "Z2Thresholds",
    "PUBLISHED_Z2",
    "acerbi_szekely_z2",
    "z2_null_sample",
    "z2_thresholds",
    "z2_p_value",
    "z2_zone",
]

# Acerbi & Szekely (2014): yellow at the 5% level, red at 0.01%, T = 250, alpha = 2.5%.
PUBLISHED_Z2 = {"n_obs": 250, "alpha": 0.025, "yellow": -0.70, "red": -1.8}
YELLOW_LEVEL = 0.05
RED_LEVEL = 0.0001
DEFAULT_SIMS = 2_000_000  # standard error of the 0.01% quantile about 0.02
_BATCH = 250_000
DEFAULT_SEED = 20141201  # fixed: the thresholds are reference constants, not run output


@dataclass(frozen=True)
class Z2Thresholds:
    """Zone thresholds of Z2: yellow when Z2 <= yellow, red when Z2 <= red.

    Attributes
    ----------
    n_obs : int
    alpha : float
        Tail probability ``1 - confidence``.
    yellow, red : float
    source : str
        "published" (Acerbi & Szekely 2014) or "simulated_normal".
    """

    n_obs: int
    alpha: float
    yellow: float
    red: float
    source: str


def acerbi_szekely_z2(pnl: np.ndarray, var: np.ndarray, es: np.ndarray, coverage: np.ndarray) -> np.ndarray:
    """Z2 statistic of an ES forecast series.

    Parameters
    ----------
    pnl : array_like, shape (..., T)
        Realised P&L X_t (profit positive).
    var, es : array_like
        Broadcast together with ``pnl``.
        VaR and ES forecasts as positive loss amounts.
    coverage : array_like
        Confidence level, broadcastable to ``pnl.shape[:-1]``.

    Returns
    -------
    numpy.ndarray, shape (...)
        ``Z2 = sum_t X_t I_t / (T alpha ES_t) + 1``, ``I_t = 1{X_t < -VaR_t}``,
        ``alpha = 1 - coverage``. E[Z2] = 0 under a correct model; negative
        values mean the ES is too small. An exception on a day with ES <= 0
        gives -inf (the forecast claimed no tail at all).

    References
    ----------
    Acerbi, C. and Szekely, B. (2014). Backtesting expected shortfall.
    Risk, December 2014.
    """
    x, var_b, es_b = np.broadcast_arrays(*(np.asarray(a, dtype=float) for a in (pnl, var, es)))
    hit = x < -var_b
    ratio = np.divide(x, es_b, out=np.zeros(x.shape), where=hit & (es_b > 0))
    ratio[hit & (es_b <= 0)] = -np.inf
    alpha = 1.0 - np.asarray(coverage, dtype=float)
    return ratio.sum(axis=-1) / (x.shape[-1] * alpha) + 1.0


def _normal_es(alpha: float) -> tuple[float, float]:
    z = float(ndtri(alpha))  # left-tail quantile, negative
    return z, float(np.exp(-0.5 * z * z) / np.sqrt(2 * np.pi) / alpha)


@lru_cache(maxsize=32)
def _null_sample_cached(n_obs: int, alpha: float, sims: int, seed: int) -> np.ndarray:
    rng = np.random.default_rng(seed)
    _, es = _normal_es(alpha)
    parts = []
    for start in range(0, sims, _BATCH):  # batches bound memory only
        m = min(_BATCH, sims - start)
        counts = rng.binomial(n_obs, alpha, size=m)
        # Losses beyond VaR of a standard normal: X = Phi^-1(alpha * U), U in (0, 1].
        tail = ndtri(alpha * (1.0 - rng.random(int(counts.sum()))))
        parts.append(np.bincount(np.repeat(np.arange(m), counts), weights=tail, minlength=m))
    sample = np.sort(np.concatenate(parts) / (n_obs * alpha * es) + 1.0)
    sample.setflags(write=False)
    return sample


def z2_null_sample(n_obs: int, alpha: float, *, sims: int = DEFAULT_SIMS, seed: int = DEFAULT_SEED) -> np.ndarray:
    """Sorted draws of Z2 under a correct normal model.

    Parameters
    ----------
    n_obs : int
        Backtest length T.
    alpha : float
        Tail probability ``1 - confidence``.
    sims : int
        Number of simulated backtests.
    seed : int
        Seed of the simulation (fixed by default so thresholds are stable).

    Returns
    -------
    numpy.ndarray, shape (sims,), read-only, sorted ascending

    Notes
    -----
    Exact and cheap: the exception count is ``Binomial(T, alpha)`` and, given
    the count, the losses beyond VaR are iid from the normal tail, drawn by
    inversion ``X = Phi^-1(alpha U)``. Only about ``T alpha`` draws per
    backtest are needed instead of T.
    """
    n, a = int(n_obs), float(np.round(alpha, 12))
    if n < 1 or not 0 < a < 1 or sims < 1:
        raise ValueError(f"need n_obs >= 1, 0 < alpha < 1, sims >= 1; got {n_obs}, {alpha}, {sims}")
    return _null_sample_cached(n, a, int(sims), int(seed))


def z2_thresholds(
    n_obs: int,
    alpha: float,
    *,
    source: str = "auto",
    sims: int = DEFAULT_SIMS,
    seed: int = DEFAULT_SEED,
) -> Z2Thresholds:
    """Yellow and red thresholds of Z2.

    Parameters
    ----------
    n_obs : int
        Backtest length T.
    alpha : float
        Tail probability ``1 - confidence``.
    source : {"auto", "published", "simulated_normal"}
        "auto" uses the published values for T = 250 and alpha = 2.5% and a
        simulation under normality otherwise.
    sims, seed : int
        Simulation size and seed (see :func:`z2_null_sample`).

    Returns
    -------
    Z2Thresholds

    Notes
    -----
    Thresholds are the 5% and 0.01% quantiles of Z2 under the null, the
    levels of the published values and of the VaR traffic light. The
    simulation gives -0.70 and about -1.79 at T = 250, alpha = 2.5% (the
    red threshold rests on the far tail: its simulation error at the
    default size is about 0.02).

    References
    ----------
    Acerbi, C. and Szekely, B. (2014). Backtesting expected shortfall.
    Risk, December 2014.
    """
    a = float(np.round(alpha, 12))
    is_published = int(n_obs) == PUBLISHED_Z2["n_obs"] and abs(a - PUBLISHED_Z2["alpha"]) < 1e-12
    if source not in ("auto", "published", "simulated_normal"):
        raise ValueError(f"unknown Z2 threshold source {source!r}")
    if source == "published" and not is_published:
        raise ValueError(
            f"published Z2 thresholds exist only for T = 250 and alpha = 2.5%, not T = {n_obs}, alpha = {alpha}"
        )
    if source == "published" or (source == "auto" and is_published):
        return Z2Thresholds(int(n_obs), a, PUBLISHED_Z2["yellow"], PUBLISHED_Z2["red"], "published")
    sample = z2_null_sample(n_obs, a, sims=sims, seed=seed)
    yellow, red = np.quantile(sample, [YELLOW_LEVEL, RED_LEVEL])
    return Z2Thresholds(int(n_obs), a, float(yellow), float(red), "simulated_normal")


def z2_p_value(
    z2: np.ndarray, n_obs: int, alpha: float, *, sims: int = DEFAULT_SIMS, seed: int = DEFAULT_SEED
) -> np.ndarray:
    """One-sided simulated p-value ``P(Z2_null <= z2)`` under normality.

    Parameters
    ----------
    z2 : array_like
    n_obs : int
    alpha : float
    sims, seed : int
        See :func:`z2_null_sample`.

    Returns
    -------
    numpy.ndarray
        Fraction of null draws at or below ``z2`` (resolution ``1/sims``).
    """
    sample = z2_null_sample(n_obs, alpha, sims=sims, seed=seed)
    return np.searchsorted(sample, np.asarray(z2, dtype=float), side="right") / sample.size


def z2_zone(z2: np.ndarray, thresholds: Z2Thresholds) -> np.ndarray:
    """Zone of Z2 values: red if ``Z2 <= red``, yellow if ``<= yellow``, else green."""
    z = np.asarray(z2, dtype=float)
    out = np.full(z.shape, GREEN, dtype=object)
    out[z <= thresholds.yellow] = YELLOW
    out[z <= thresholds.red] = RED
    return out
