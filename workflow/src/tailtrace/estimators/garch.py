"""Conditional volatility of return series: GARCH(1,1) with an EWMA fallback.

Zero-mean fits of many series go through one batched fit
(:mod:`tailtrace.garch_batch`); a series it cannot fit, and every
constant-mean fit, goes through ``arch`` one series at a time.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from ..garch_batch import fit_garch11_batch
from .ewma import ewma_variance_path

__all__ = [
    "VolatilityFit",
    "DEFAULT_MIN_OBS",
    "DEFAULT_FALLBACK_DECAY",
    "fit_volatility",
    "fit_volatility_many",
    "fit_garch",
    "arch_rescale",
]

DEFAULT_MIN_OBS = 250
DEFAULT_FALLBACK_DECAY = 0.94
_PERCENT = 100.0  # the optimiser behaves best on percent returns


@dataclass(frozen=True)
class VolatilityFit:
    """Conditional volatility of a series and how it was obtained.

    Attributes
    ----------
    sigma : (H,) array
        Volatility of each day given the days before it (return units).
    sigma_next : float
        Forecast for the day after the sample.
    mean : float
        Constant mean removed before scaling (0 with a zero mean).
    model : str
        ``garch``, ``ewma`` (fallback) or ``constant`` (no variation).
    reason : str or None
        Why the fallback was used: ``short_sample`` or ``fit_failed: ...``.
    params : dict
        GARCH parameters in percent units (``mu``, ``omega``, ``alpha``,
        ``beta``, ``persistence``, ``scale``) or the EWMA ``decay``.
    """

    sigma: np.ndarray
    sigma_next: float
    mean: float
    model: str
    reason: str | None = None
    params: dict[str, Any] = field(default_factory=dict)


def fit_garch(x: np.ndarray, mean: str = "zero") -> VolatilityFit:
    """Fit GARCH(1,1) with normal innovations to a return series using ``arch``.

    Parameters
    ----------
    x : (H,) array of daily returns
    mean : {"zero", "constant"}

    Returns
    -------
    VolatilityFit

    Raises
    ------
    RuntimeError
        When the optimiser does not converge or returns non-finite values.

    Notes
    -----
    ``σ²_t = ω + α ε²_{t−1} + β σ²_{t−1}``, ``ε_t = r_t − μ``, fitted on
    percent returns (``arch`` may rescale further by a power of ten; the
    parameters are reported in percent units). The forecast is
    ``σ²_{H+1} = ω + α ε²_H + β σ²_H``.

    References
    ----------
    Bollerslev, "Generalized autoregressive conditional heteroskedasticity",
    Journal of Econometrics 31, 1986; the ``arch`` package (K. Sheppard).
    """
    from arch import arch_model  # costs about a second: only methods that fit pay it
    from arch.utility.exceptions import ConvergenceWarning as ArchConvergenceWarning

    if mean not in ("zero", "constant"):
        raise ValueError(f"GARCH mean must be 'zero' or 'constant', got {mean!r}")
    y = _PERCENT * np.asarray(x, dtype=float)
    spec = "Zero" if mean == "zero" else "Constant"
    model = arch_model(y, mean=spec, vol="GARCH", p=1, q=1, dist="normal", rescale=True)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        res = model.fit(disp="off", show_warning=True)
    if res.convergence_flag != 0 or any(issubclass(w.category, ArchConvergenceWarning) for w in caught):
        raise RuntimeError(f"optimiser did not converge (flag {res.convergence_flag})")
    scale = float(res.scale)
    params = res.params
    mu = float(params["mu"]) if mean == "constant" else 0.0
    omega, alpha, beta = float(params["omega"]), float(params["alpha[1]"]), float(params["beta[1]"])
    sigma_scaled = np.asarray(res.conditional_volatility, dtype=float)
    if not (np.all(np.isfinite(sigma_scaled)) and np.isfinite([mu, omega, alpha, beta]).all()):
        raise RuntimeError("non-finite parameters or volatilities")
    last_resid = y[-1] * scale - mu
    next_var = omega + alpha * last_resid**2 + beta * sigma_scaled[-1] ** 2
    unit = _PERCENT * scale
    return VolatilityFit(
        sigma=sigma_scaled / unit,
        sigma_next=float(np.sqrt(next_var)) / unit,
        mean=mu / unit,
        model="garch",
        params={
            "mu": mu / scale,
            "omega": omega / scale**2,
            "alpha": alpha,
            "beta": beta,
            "persistence": alpha + beta,
            "scale": scale,
            "loglik": float(res.loglikelihood),
        },
    )


def arch_rescale(y: np.ndarray) -> np.ndarray:
    """The power of ten ``arch_model(..., rescale=True)`` multiplies each column of ``y`` by.

    Notes
    -----
    arch scales by 10 (or 1/10) until the variance lies in [0.1, 10⁴)
    (``ARCHModel._check_scale``, arch 8.0); kept so that the diagnostics of
    a batched fit report parameters and log-likelihood in the units an
    ``arch`` fit would.
    """
    var = np.var(np.asarray(y, dtype=float), axis=0)
    rescale = np.ones_like(var)
    # rare for percent returns (variance far from 1): arch's own loop, for identical factors
    for j in np.flatnonzero((var > 0) & ~((var >= 0.1) & (var < 1e4))):
        rescale[j] = _arch_rescale_loop(float(var[j]))
    return rescale


def _arch_rescale_loop(orig: float) -> float:
    scale, rescale = orig, 1.0
    while not 0.1 <= scale < 10000.0 and scale > 0:
        rescale = rescale * 10 if scale < 1.0 else rescale / 10
        scale = orig * rescale**2
    return rescale


def fit_volatility(
    x: np.ndarray,
    *,
    mean: str = "zero",
    min_obs: int = DEFAULT_MIN_OBS,
    fallback_decay: float = DEFAULT_FALLBACK_DECAY,
) -> VolatilityFit:
    """GARCH(1,1) volatility of ``x``, or EWMA when the sample is short or the fit fails.

    Parameters
    ----------
    x : (H,) array of daily returns
    mean : {"zero", "constant"}
    min_obs : int
        Fewer observations than this skip GARCH (default 250).
    fallback_decay : float
        λ of the EWMA fallback (default 0.94).

    Returns
    -------
    VolatilityFit
        ``model`` and ``reason`` tell which estimate was used.

    Notes
    -----
    The one-column case of :func:`fit_volatility_many`.
    """
    x = np.asarray(x, dtype=float)
    return fit_volatility_many(x[:, None], mean=mean, min_obs=min_obs, fallback_decay=fallback_decay)[0]


def fit_volatility_many(
    x: np.ndarray,
    *,
    mean: str = "zero",
    min_obs: int = DEFAULT_MIN_OBS,
    fallback_decay: float = DEFAULT_FALLBACK_DECAY,
) -> list[VolatilityFit]:
    """:func:`fit_volatility` of every column of ``x``, with one batched zero-mean fit.

    Parameters
    ----------
    x : (H, n) array of daily returns, all columns the same length
    mean, min_obs, fallback_decay
        As in :func:`fit_volatility`.

    Returns
    -------
    list of VolatilityFit, one per column

    Notes
    -----
    With a zero mean the columns with at least ``min_obs`` days and some
    variation are fitted together by :func:`~tailtrace.garch_batch.fit_garch11_batch`
    (the same likelihood, backcast and bounds as ``arch``); a column that
    fit does not make usable (not converged, non-finite) goes to
    :func:`fit_garch` and, if that fails too, to EWMA. A maximum on the
    persistence edge α + β = 1 − 1e-6 is kept (``arch`` ends on the same
    edge for such series, and :func:`fit_garch` accepts it). Parameters are
    reported as :func:`fit_garch` reports them: ω in percent², ``scale``
    the factor arch's ``rescale=True`` would pick (:func:`arch_rescale`) and
    the log-likelihood of the percent returns times that factor. The
    constant mean always goes through :func:`fit_garch`.

    The fallback runs ``σ²_{t+1} = λσ²_t + (1 − λ)ε²_t`` seeded with the
    sample variance of ε (:func:`ewma.ewma_variance_path`). A series with no
    variation gets ``model = 'constant'`` and zero volatility.
    """
    if mean not in ("zero", "constant"):
        raise ValueError(f"GARCH mean must be 'zero' or 'constant', got {mean!r}")
    x = np.asarray(x, dtype=float)
    if x.ndim != 2:
        raise ValueError(f"fit_volatility_many needs an (H, n) array, got shape {x.shape}")
    fits: list[VolatilityFit | None] = [None] * x.shape[1]
    if mean == "zero" and x.shape[0] >= min_obs:
        batch_cols = np.flatnonzero(np.any(np.abs(x) > 0, axis=0))
        for j, fit in zip(batch_cols, _batched_fits(x[:, batch_cols])):
            fits[j] = fit
    return [
        f if f is not None else _fit_one(x[:, j], mean, min_obs, fallback_decay) for j, f in enumerate(fits)
    ]


def _batched_fits(x: np.ndarray) -> list[VolatilityFit | None]:
    """Zero-mean GARCH of each column from one batched fit; None where it is not usable."""
    if x.shape[1] == 0:
        return []
    batch = fit_garch11_batch(x)
    # arch reaches the same edge there (α + β = 1 to 1e-9; forecasts equal to ~1e-5 on the midsize
    # universe): keeping the edge fit spares importing arch (about 2 s) for a handful of series
    usable = batch.usable | batch.edge_maximum
    scale = arch_rescale(_PERCENT * x)
    unit = _PERCENT * scale  # data units -> the units an arch fit would report
    loglik = batch.loglik - x.shape[0] * np.log(unit)
    sigma = np.sqrt(batch.variance)
    sigma_next = np.sqrt(batch.variance_next)
    return [
        VolatilityFit(
            sigma=sigma[:, j],
            sigma_next=float(sigma_next[j]),
            mean=0.0,
            model="garch",
            params={
                "mu": 0.0,
                "omega": float(batch.omega[j]) * _PERCENT**2,
                "alpha": float(batch.alpha[j]),
                "beta": float(batch.beta[j]),
                "persistence": float(batch.alpha[j] + batch.beta[j]),
                "scale": float(scale[j]),
                "loglik": float(loglik[j]),
            },
        )
        if usable[j]
        else None
        for j in range(x.shape[1])
    ]


def _fit_one(x: np.ndarray, mean: str, min_obs: int, fallback_decay: float) -> VolatilityFit:
    """One series through arch, then EWMA: the path of every series the batch leaves out."""
    centre = float(x.mean()) if mean == "constant" else 0.0
    resid = x - centre
    if not np.any(np.abs(resid) > 0):
        return VolatilityFit(np.zeros_like(x), 0.0, centre, "constant")
    reason = "short_sample"
    if x.size >= min_obs:
        try:
            return fit_garch(x, mean)
        except (RuntimeError, ValueError, ArithmeticError, np.linalg.LinAlgError) as err:
            reason = f"fit_failed: {err}"
    path = ewma_variance_path(resid[:, None], fallback_decay, np.array([np.mean(resid**2)]))[:, 0]
    return VolatilityFit(
        sigma=np.sqrt(path[:-1]),
        sigma_next=float(np.sqrt(path[-1])),
        mean=centre,
        model="ewma",
        reason=reason,
        params={"decay": fallback_decay},
    )
