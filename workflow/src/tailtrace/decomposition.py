"""Risk decomposition: marginal, component (Euler), incremental and stand-alone VaR.

Stand-alone and incremental figures are full recomputations with the
method's own estimator on a stack of derived books (each position alone,
the book without each position), so they exist for every registered method.
Marginal and component figures are analytic for the parametric methods and
kernel estimates of ``E[position loss | portfolio loss ≈ VaR]`` for the
historical and simulation methods.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any, Callable, Mapping, Sequence

import numpy as np

from .estimators.base import RiskEstimate, RiskSample, as_generator, linear_revalue
from .estimators.registry import get_estimator
from .estimators.tail import empirical_var_es, tail_count

if TYPE_CHECKING:
    import pyarrow as pa

__all__ = [
    "ANALYTIC_METHODS",
    "KERNEL_METHODS",
    "COLUMNS",
    "DEFAULT_BANDWIDTH",
    "RiskContributions",
    "risk_contributions",
    "stacked_books",
    "kernel_allocation",
]

DEFAULT_BANDWIDTH = 1.06  # Silverman's rule-of-thumb constant
Scenarios = list[tuple[np.ndarray, "np.ndarray | None", float]]  # (simple returns, weights, scale) per horizon
Options = Mapping[str, Any]
_CELLS_PER_CALL = 4_000_000  # books × scenarios evaluated per estimator call

COLUMNS = (
    "as_of",
    "portfolio",
    "method",
    "confidence",
    "horizon_days",
    "instrument",
    "position_value",
    "marginal_var",
    "component_var",
    "marginal_es",
    "component_es",
    "incremental_var",
    "incremental_es",
    "standalone_var",
    "standalone_es",
    "portfolio_var",
    "portfolio_es",
    "diversification_benefit",
    "allocation",
    "allocation_gap",
)


@dataclass(frozen=True)
class RiskContributions:
    """Decomposition of one method's VaR and ES for one as_of.

    Per-position arrays are indexed ``[portfolio, confidence, horizon,
    instrument]``; portfolio figures ``[portfolio, confidence, horizon]``.

    Attributes
    ----------
    marginal_var, marginal_es : ∂VaR/∂v_i and ∂ES/∂v_i (per unit of base
        currency held)
    component_var, component_es : Euler allocations ``v_i ∂VaR/∂v_i``
        (and the same for ES); they sum over instruments to the portfolio
        figure (see ``allocation_gap``).
    incremental_var, incremental_es : figure of the book minus that of the
        book without the position.
    standalone_var, standalone_es : figure of the position held alone.
    diversification_benefit : Σ stand-alone VaR − portfolio VaR.
    allocation : "analytic" or "kernel".
    allocation_gap : relative gap ``Σ component_var / VaR − 1`` of the raw
        allocation, before any rescaling (rounding level when analytic).
    """

    as_of: np.datetime64
    method: str
    portfolios: tuple[str, ...]
    instruments: tuple[str, ...]
    confidences: tuple[float, ...]
    horizons: tuple[int, ...]
    position_value: np.ndarray
    var: np.ndarray
    es: np.ndarray
    marginal_var: np.ndarray
    component_var: np.ndarray
    marginal_es: np.ndarray
    component_es: np.ndarray
    incremental_var: np.ndarray
    incremental_es: np.ndarray
    standalone_var: np.ndarray
    standalone_es: np.ndarray
    diversification_benefit: np.ndarray
    allocation: str
    allocation_gap: np.ndarray

    def to_table(self) -> "pa.Table":
        """One row per held position, confidence and horizon (columns :data:`COLUMNS`).

        Instruments a portfolio does not hold contribute nothing (every
        figure is zero) and get no row.
        """
        import pyarrow as pa

        P, C, H, N = self.component_var.shape
        grid = np.indices((P, C, H, N)).reshape(4, -1)
        keep = self.position_value[grid[0], grid[3]] != 0
        p, c, h, n = grid[:, keep]

        def per_position(arr: np.ndarray) -> np.ndarray:
            return arr.reshape(-1)[keep]

        def per_figure(arr: np.ndarray) -> np.ndarray:
            return np.broadcast_to(arr[..., None], (P, C, H, N)).reshape(-1)[keep]

        columns = {
            "as_of": pa.array(np.full(p.size, self.as_of, dtype="datetime64[D]"), type=pa.date32()),
            "portfolio": pa.array(np.asarray(self.portfolios, dtype=object)[p], type=pa.string()),
            "method": pa.array([self.method] * p.size, type=pa.string()),
            "confidence": pa.array(np.asarray(self.confidences, dtype=float)[c]),
            "horizon_days": pa.array(np.asarray(self.horizons, dtype=np.int32)[h]),
            "instrument": pa.array(np.asarray(self.instruments, dtype=object)[n], type=pa.string()),
            "position_value": pa.array(self.position_value[p, n]),
            "marginal_var": pa.array(per_position(self.marginal_var)),
            "component_var": pa.array(per_position(self.component_var)),
            "marginal_es": pa.array(per_position(self.marginal_es)),
            "component_es": pa.array(per_position(self.component_es)),
            "incremental_var": pa.array(per_position(self.incremental_var)),
            "incremental_es": pa.array(per_position(self.incremental_es)),
            "standalone_var": pa.array(per_position(self.standalone_var)),
            "standalone_es": pa.array(per_position(self.standalone_es)),
            "portfolio_var": pa.array(per_figure(self.var)),
            "portfolio_es": pa.array(per_figure(self.es)),
            "diversification_benefit": pa.array(per_figure(self.diversification_benefit)),
            "allocation": pa.array([self.allocation] * p.size, type=pa.string()),
            "allocation_gap": pa.array(per_figure(self.allocation_gap)),
        }
        return pa.table(columns)


def stacked_books(sample: RiskSample, values: np.ndarray, names: Sequence[str],
                  pnl: np.ndarray | None = None) -> RiskSample:
    """The same market data with other linear books (``values`` (B, N)).

    ``pnl`` (B, T), when given, is their P&L under the window returns
    (``values @ expm1(returns).T``), known by the caller more cheaply.
    """
    revalue = linear_revalue(values)
    return dataclasses.replace(
        sample, portfolios=tuple(names), values=values, pnl=revalue(sample.returns, 1) if pnl is None else pnl,
        revalue=revalue,
    )


def _derived_rows(P: int, K: int, rows: slice):
    """Split rows ``rows`` of the stacked books [P books, K positions alone, K books without one].

    Returns the number of rows and, per part, the output rows and the index
    into that part (book p, or held position k).
    """
    idx = np.arange(rows.start, min(rows.stop, P + 2 * K))
    own = np.flatnonzero(idx < P)
    alone = np.flatnonzero((idx >= P) & (idx < P + K))
    without = np.flatnonzero(idx >= P + K)
    return idx.size, (own, idx[own]), (alone, idx[alone] - P), (without, idx[without] - P - K)


def _derived_losses(losses: np.ndarray, simple_t: np.ndarray, pp: np.ndarray, nn: np.ndarray, held: np.ndarray,
                    rows: slice) -> np.ndarray:
    """Rows ``rows`` of the stacked books' losses [books, each position alone, each book without it].

    From the books' own losses (P, S) and the scenarios by instrument
    ``simple_t`` (N, S): position k alone loses ``−v_k x_{n_k}`` and its book
    without it ``L_{p_k} + v_k x_{n_k}``; O(K·S) instead of the O(K·N·S) of
    revaluing 2K dense books.
    """
    n, (own, p), (alone, ka), (without, kw) = _derived_rows(len(losses), len(pp), rows)
    out = np.empty((n, losses.shape[1]))
    out[own] = losses[p]
    out[alone] = -(held[ka, None] * simple_t[nn[ka]])
    out[without] = losses[pp[kw]] + held[kw, None] * simple_t[nn[kw]]
    return out


def risk_contributions(
    sample: RiskSample,
    method: str,
    confidences: Sequence[float],
    horizons: Sequence[int],
    *,
    options: Mapping[str, Any],
    seed: int | np.random.Generator | None = None,
    bandwidth: float = DEFAULT_BANDWIDTH,
    rescale: bool = True,
) -> RiskContributions:
    """Decompose a method's VaR and ES by position.

    Parameters
    ----------
    sample : RiskSample
        A linear book (``pnl = values @ expm1(returns).T``).
    method : str
        A name in :data:`tailtrace.estimators.registry.METHODS` that is also
        in :data:`ANALYTIC_METHODS` or :data:`KERNEL_METHODS`.
    confidences, horizons : sequences
    options : mapping
        The method's own options, as given to its estimator.
    seed : int or Generator
        For simulation methods; every derived book uses the same paths. An
        int gives the paths the estimator draws with that seed (so figures
        match ``risk_figures``); a Generator is first turned into one int.
    bandwidth : float
        Kernel bandwidth factor ``b = bandwidth · sd(L) · n_eff^(−1/5)``
        (kernel methods only; default 1.06).
    rescale : bool
        Scale kernel components so that they sum exactly to VaR (default
        True); the raw gap is kept in ``allocation_gap``.

    Returns
    -------
    RiskContributions

    Notes
    -----
    Euler allocation: VaR is homogeneous of degree one in the holdings v, so
    ``VaR = Σ v_i ∂VaR/∂v_i``. For normal, Student-t and EWMA
    figures ``VaR = σ√h q − μh`` with ``σ² = vᵀΣv``, hence
    ``∂VaR/∂v = (Σv/σ²)(VaR + μh) − m h`` exactly (m the mean vector when
    the mean is included); for the Student-t the fitted ν moves with the
    book, adding ``σ√h (∂q̃/∂ν)(∂ν/∂v)`` (:func:`parametric_t.dof_gradient`).
    Cornish–Fisher adds the gradients of skewness and kurtosis
    (:func:`cornish_fisher.skew_kurtosis_gradients`). For the
    historical and simulation methods see :func:`kernel_allocation`; their
    ES components are exact, ES being the (weighted) mean of the tail
    scenarios. Stand-alone and incremental figures are full recomputations.

    References
    ----------
    Tasche, "Risk contributions and performance measurement", working paper,
    TU München, 1999; Epperlein & Smillie, "Cracking VaR with kernels",
    Risk 19(8), 2006; Jorion, *Value at Risk*, 3rd ed., 2007, ch. 7.
    """
    if method not in ANALYTIC_METHODS and method not in KERNEL_METHODS:
        known = sorted(set(ANALYTIC_METHODS) | set(KERNEL_METHODS))
        raise KeyError(f"no decomposition for method {method!r}; known: {', '.join(known)}")
    simple = np.expm1(sample.returns)
    values = np.asarray(sample.values, dtype=float)
    _require_linear(sample, simple)
    int_seed = int(seed) if isinstance(seed, (int, np.integer)) else int(as_generator(seed).integers(2**63))
    estimator = get_estimator(method)
    P, N = values.shape
    C, H = len(confidences), len(horizons)

    # derived books only for positions actually held: a portfolio holding 200 of 2,000 instruments
    # needs 400 books, not 4,000 (the others' stand-alone and incremental figures are zero)
    pp, nn = np.nonzero(values)
    K = len(pp)
    if method in ANALYTIC_METHODS:
        names = list(sample.portfolios)
        names += [f"{sample.portfolios[p]}: {sample.instruments[n]} alone" for p, n in zip(pp, nn)]
        names += [f"{sample.portfolios[p]}: without {sample.instruments[n]}" for p, n in zip(pp, nn)]
        var_all, es_all = _estimate_in_chunks(estimator, sample, simple, pp, nn, names, confidences, horizons, options,
                                              int_seed)
    else:
        # the method's own scenarios, built once, serve every derived book (one GARCH fit, one simulation)
        scenarios = KERNEL_METHODS[method](sample, horizons, options, int_seed)
        var_all, es_all = _scenario_figures(values, pp, nn, scenarios, confidences)
    var, es = var_all[:P], es_all[:P]

    def per_position(block: np.ndarray) -> np.ndarray:  # (K, C, H) of held positions -> (P, C, H, N)
        out = np.zeros((P, C, H, N))
        out[pp, :, :, nn] = block
        return out

    standalone_var = per_position(var_all[P : P + K])
    standalone_es = per_position(es_all[P : P + K])
    incremental_var = per_position(var[pp] - var_all[P + K :])
    incremental_es = per_position(es[pp] - es_all[P + K :])

    if method in ANALYTIC_METHODS:
        marginal_var, marginal_es = _analytic_marginals(method, sample, simple, var, es, confidences, horizons, options)
        allocation = "analytic"
    else:
        marginal_var, marginal_es = kernel_allocation(values, scenarios, var, confidences, bandwidth=bandwidth)
        allocation = "kernel"
    component_var = values[:, None, None, :] * marginal_var
    component_es = values[:, None, None, :] * marginal_es
    total = component_var.sum(axis=-1)
    gap = np.divide(total, var, out=np.zeros_like(var), where=var != 0) - np.where(var != 0, 1.0, 0.0)
    if rescale and allocation == "kernel":
        factor = np.divide(var, total, out=np.ones_like(var), where=np.abs(total) > 1e-12 * np.abs(var))
        marginal_var = marginal_var * factor[..., None]
        component_var = component_var * factor[..., None]
    return RiskContributions(
        as_of=np.datetime64(sample.as_of, "D"),
        method=method,
        portfolios=tuple(sample.portfolios),
        instruments=tuple(sample.instruments),
        confidences=tuple(float(c) for c in confidences),
        horizons=tuple(int(h) for h in horizons),
        position_value=values.copy(),
        var=var,
        es=es,
        marginal_var=marginal_var,
        component_var=component_var,
        marginal_es=marginal_es,
        component_es=component_es,
        incremental_var=incremental_var,
        incremental_es=incremental_es,
        standalone_var=standalone_var,
        standalone_es=standalone_es,
        diversification_benefit=standalone_var.sum(axis=-1) - var,
        allocation=allocation,
        allocation_gap=gap,
    )


def kernel_allocation(
    values: np.ndarray,
    scenarios: Sequence[tuple[np.ndarray, np.ndarray | None, float]],
    var: np.ndarray,
    confidences: Sequence[float],
    *,
    bandwidth: float = DEFAULT_BANDWIDTH,
) -> tuple[np.ndarray, np.ndarray]:
    """Marginal VaR and ES of scenario-based figures (raw, not rescaled).

    Parameters
    ----------
    values : (P, N) holdings
    scenarios : one ``(simple, weights, scale)`` per horizon
        ``simple`` (S, N) scenario simple returns, ``weights`` (S,)
        scenario probabilities or None for equal ones, ``scale`` the factor
        turning 1-scenario figures into the horizon's (√h when scaled, 1 when
        the scenarios are h-day ones).
    var : (P, C, H) VaR of the method for these books
    confidences : sequence of float
    bandwidth : float

    Returns
    -------
    marginal_var, marginal_es : (P, C, H, N) arrays

    Notes
    -----
    With scenario losses ``L_s = −Σ v_i x_si``, ``∂VaR/∂v_i =
    E[−x_i | L = VaR]`` (Gourieroux, Laurent & Scaillet 2000), estimated by
    weighting scenarios with ``w_s · exp(−½((L_s − VaR)/b)²)``, where
    ``b = bandwidth · sd(L) · n_eff^(−1/5)`` and n_eff the effective number of
    scenarios. The raw components sum to a smoothed loss near VaR rather
    than to VaR itself; :func:`risk_contributions` rescales them to remove
    that gap, which is exact in expectation for elliptical returns, where ``E[x | L]`` is linear in L.
    ES is the probability-weighted mean of the tail scenarios, so
    ``∂ES/∂v_i`` is the mean of ``−x_i`` over them and sums exactly.

    References
    ----------
    Gourieroux, Laurent & Scaillet, "Sensitivity analysis of values at
    risk", Journal of Empirical Finance 7, 2000; Epperlein & Smillie,
    "Cracking VaR with kernels", Risk 19(8), 2006.
    """
    from .estimators.weighted_tail import effective_size, weighted_tail_weights

    P, N = values.shape
    C, H = len(confidences), len(scenarios)
    marginal_var = np.empty((P, C, H, N))
    marginal_es = np.empty((P, C, H, N))
    for j, (simple, weights, scale) in enumerate(scenarios):  # a handful of horizons
        n = simple.shape[0]
        base = np.full(n, 1.0 / n) if weights is None else np.asarray(weights, dtype=float)
        losses = -(values @ simple.T)  # (P, S)
        centre = var[:, :, j] / scale  # (P, C)
        spread = losses.std(axis=1)
        width = bandwidth * np.where(spread > 0, spread, 1.0) * float(effective_size(base)) ** -0.2
        kernel = base * np.exp(-0.5 * np.square((losses[:, None, :] - centre[..., None]) / width[:, None, None]))
        mass = kernel.sum(axis=-1, keepdims=True)
        marginal_var[:, :, j] = (kernel / mass) @ (-simple) * scale
        if weights is None:
            tail = _equal_tail_weights(losses, confidences)
        else:
            tail = weighted_tail_weights(losses, base, confidences)
        marginal_es[:, :, j] = tail @ (-simple) * scale
    return marginal_var, marginal_es


def _equal_tail_weights(losses: np.ndarray, confidences: Sequence[float]) -> np.ndarray:
    # the k worst scenarios, weight 1/k each, as in tail.empirical_var_es
    n = losses.shape[-1]
    rank = np.argsort(np.argsort(-losses, axis=-1, kind="stable"), axis=-1)  # 0 = worst
    ks = np.array([tail_count(n, c) for c in confidences])
    return (rank[:, None, :] < ks[None, :, None]) / ks[None, :, None]


def _require_linear(sample: RiskSample, simple: np.ndarray) -> None:
    linear = sample.values @ simple.T
    scale = max(float(np.abs(linear).max(initial=0.0)), 1e-300)
    if sample.pnl.shape != linear.shape or not np.allclose(sample.pnl, linear, rtol=1e-9, atol=1e-9 * scale):
        raise ValueError("risk_contributions needs a linear book: sample.pnl must equal values @ expm1(returns).T")


def _scenario_figures(
    values: np.ndarray, pp: np.ndarray, nn: np.ndarray, scenarios: Scenarios, confidences: Sequence[float]
) -> tuple[np.ndarray, np.ndarray]:
    # VaR and ES of the books and their derived books (see _derived_losses) read off fixed scenarios,
    # as the historical and simulation estimators do
    from .estimators.weighted_tail import weighted_var_es

    n_books = len(values) + 2 * len(pp)
    held = values[pp, nn]
    var = np.empty((n_books, len(confidences), len(scenarios)))
    es = np.empty_like(var)
    for j, (simple, weights, scale) in enumerate(scenarios):  # a handful of horizons
        rows = max(1, _CELLS_PER_CALL // simple.shape[0])
        base = -(values @ simple.T)
        simple_t = np.ascontiguousarray(simple.T)
        for start in range(0, n_books, rows):  # chunks bound memory; each is vectorised
            losses = _derived_losses(base, simple_t, pp, nn, held, slice(start, start + rows))
            if weights is None:
                v, e = empirical_var_es(losses, confidences)
            else:
                v, e = weighted_var_es(losses, weights, confidences)
            var[start : start + rows, :, j] = v * scale
            es[start : start + rows, :, j] = e * scale
    return var, es


def _derived_values(values: np.ndarray, pp: np.ndarray, nn: np.ndarray, rows: slice) -> np.ndarray:
    """Rows ``rows`` of the stacked holdings [books, each position alone, each book without it]."""
    n, (own, p), (alone, ka), (without, kw) = _derived_rows(len(values), len(pp), rows)
    out = np.zeros((n, values.shape[1]))
    out[own] = values[p]
    out[alone, nn[ka]] = values[pp[ka], nn[ka]]
    out[without] = values[pp[kw]]
    out[without, nn[kw]] = 0.0
    return out


def _estimate_in_chunks(
    estimator: Callable[..., RiskEstimate],
    sample: RiskSample,
    simple: np.ndarray,
    pp: np.ndarray,
    nn: np.ndarray,
    names: Sequence[str],
    confidences: Sequence[float],
    horizons: Sequence[int],
    options: Mapping[str, Any],
    seed: int,
) -> tuple[np.ndarray, np.ndarray]:
    # chunks bound memory (holdings and P&L of the derived books are built chunk by chunk); each call is vectorised
    values = np.asarray(sample.values, dtype=float)
    held, simple_t, losses = values[pp, nn], np.ascontiguousarray(simple.T), -sample.pnl
    rows = max(1, min(_CELLS_PER_CALL // max(sample.n_obs, 1), _CELLS_PER_CALL // max(values.shape[1], 1)))
    parts = []
    for start in range(0, len(names), rows):
        chunk = slice(start, start + rows)
        pnl = -_derived_losses(losses, simple_t, pp, nn, held, chunk)
        stack = stacked_books(sample, _derived_values(values, pp, nn, chunk), names[chunk], pnl)
        parts.append(estimator(stack, confidences, horizons, options=options, seed=seed))
    return np.concatenate([e.var for e in parts]), np.concatenate([e.es for e in parts])


def _analytic_marginals(
    method: str,
    sample: RiskSample,
    simple: np.ndarray,
    var: np.ndarray,
    es: np.ndarray,
    confidences: Sequence[float],
    horizons: Sequence[int],
    options: Mapping[str, Any],
) -> tuple[np.ndarray, np.ndarray]:
    values = sample.values
    include_mean = bool(options.get("include_mean", False))
    cov = ANALYTIC_METHODS[method](sample, options)
    mean = simple.mean(axis=0) if include_mean else np.zeros(simple.shape[1])
    h = np.asarray(horizons, dtype=float)
    cov_v = values @ cov  # (P, N)
    variance = np.einsum("pn,pn->p", cov_v, values)
    sigma = np.sqrt(np.clip(variance, 0.0, None))
    drift = (values @ mean)[:, None, None] * h  # μh, (P, 1, H)
    mean_h = mean[None, None, None, :] * h[None, None, :, None]
    if method == "cornish_fisher":
        return _cornish_fisher_marginals(sample, simple, sigma, cov_v, mean_h, confidences, h, options)
    unit = np.divide(cov_v, variance[:, None], out=np.zeros_like(cov_v), where=variance[:, None] > 0)
    marginal_var = unit[:, None, None, :] * (var + drift)[..., None] - mean_h
    marginal_es = unit[:, None, None, :] * (es + drift)[..., None] - mean_h
    if method == "parametric_t":
        dvar, des = _dof_terms(sample, simple, sigma, confidences, h, options)
        marginal_var += dvar
        marginal_es += des
    return marginal_var, marginal_es


def _dof_terms(
    sample: RiskSample,
    simple: np.ndarray,
    sigma: np.ndarray,
    confidences: Sequence[float],
    h: np.ndarray,
    options: Mapping[str, Any],
) -> tuple[np.ndarray, np.ndarray]:
    # ν moves with the book's direction: σ√h (∂q̃/∂ν)(∂ν/∂v); zero where ν is on a bound or not fitted
    from .estimators import parametric_t as pt

    bounds = tuple(float(b) for b in options.get("dof_bounds", pt.DOF_BOUNDS))
    nu, fitted, degenerate = pt.portfolio_dof(sample.pnl, bounds)
    interior = fitted & ~degenerate & (nu > bounds[0]) & (nu < bounds[1])
    dnu = np.where(interior[:, None], pt.dof_gradient(simple, sample.values, nu), 0.0)  # (P, N)
    slope_var, slope_es = pt.t_factor_slopes(nu, confidences)  # (P, C)
    scale = sigma[:, None, None, None] * np.sqrt(h)[None, None, :, None] * dnu[:, None, None, :]
    return slope_var[:, :, None, None] * scale, slope_es[:, :, None, None] * scale


def _cornish_fisher_marginals(
    sample: RiskSample,
    simple: np.ndarray,
    sigma: np.ndarray,
    cov_v: np.ndarray,
    mean_h: np.ndarray,
    confidences: Sequence[float],
    h: np.ndarray,
    options: Mapping[str, Any],
) -> tuple[np.ndarray, np.ndarray]:
    from .estimators import cornish_fisher as cf

    skew, kurt, dskew, dkurt = cf.skew_kurtosis_gradients(simple, sample.values)
    tail_prob = float(options.get("monotone_tail_prob", cf.DEFAULT_MONOTONE_TAIL))
    used = cf.is_monotone(skew, kurt, confidences, tail_prob)[:, None]
    skew, kurt = np.where(used[:, 0], skew, 0.0), np.where(used[:, 0], kurt, 0.0)
    dskew, dkurt = np.where(used, dskew, 0.0), np.where(used, dkurt, 0.0)
    f_var, f_es = cf.cornish_fisher_factors(skew, kurt, confidences)
    dvar_ds, dvar_dk, des_ds, des_dk = cf.factor_sensitivities(skew, kurt, confidences)
    dsigma = np.divide(cov_v, sigma[:, None], out=np.zeros_like(cov_v), where=sigma[:, None] > 0)  # (P, N)
    root_h = np.sqrt(h)[None, None, :, None]

    def gradient(f: np.ndarray, f_s: np.ndarray, f_k: np.ndarray) -> np.ndarray:
        per_day = (
            f[:, :, None] * dsigma[:, None, :]
            + sigma[:, None, None] * (f_s[:, :, None] * dskew[:, None, :] + f_k[:, :, None] * dkurt[:, None, :])
        )  # (P, C, N)
        return per_day[:, :, None, :] * root_h - mean_h

    return gradient(f_var, dvar_ds, dvar_dk), gradient(f_es, des_ds, des_dk)


def _covariance_sample(sample: RiskSample, options: Mapping[str, Any]) -> np.ndarray:
    from .estimators.parametric import portfolio_moments

    return portfolio_moments(sample, False)[2]


def _covariance_ewma(sample: RiskSample, options: Mapping[str, Any]) -> np.ndarray:
    from .estimators.ewma import DEFAULT_DECAY, ewma_covariance

    return ewma_covariance(np.expm1(sample.returns), float(options.get("decay", DEFAULT_DECAY)))


def _scenarios_historical(sample: RiskSample, horizons: Sequence[int], options: Options, seed: int) -> Scenarios:
    simple = np.expm1(sample.returns)
    return [(simple, None, float(np.sqrt(h))) for h in horizons]


def _scenarios_overlapping(sample: RiskSample, horizons: Sequence[int], options: Options, seed: int) -> Scenarios:
    from .estimators.historical import overlapping_log_returns

    return [(np.expm1(overlapping_log_returns(sample.returns, int(h))), None, 1.0) for h in horizons]


def _scenarios_age_weighted(sample: RiskSample, horizons: Sequence[int], options: Options, seed: int) -> Scenarios:
    from .estimators.age_weighted import DEFAULT_DECAY, age_weights

    weights = age_weights(sample.n_obs, float(options.get("decay", DEFAULT_DECAY)))
    simple = np.expm1(sample.returns)
    return [(simple, weights, float(np.sqrt(h))) for h in horizons]


def _scenarios_filtered(sample: RiskSample, horizons: Sequence[int], options: Options, seed: int) -> Scenarios:
    from .estimators.filtered_historical import filtered_returns

    simple = np.expm1(filtered_returns(sample, options)[0])
    return [(simple, None, float(np.sqrt(h))) for h in horizons]


def _scenarios_monte_carlo(
    sample: RiskSample, horizons: Sequence[int], options: Mapping[str, Any], seed: int, distribution: str | None = None
) -> Scenarios:
    from .estimators.monte_carlo import simulated_shocks

    opts = dict(options) if distribution is None else {**options, "distribution": distribution}
    shocks, _ = simulated_shocks(sample, horizons, opts, seed)
    return [(np.expm1(shocks[int(h)]), None, 1.0) for h in horizons]


def _scenarios_monte_carlo_t(sample: RiskSample, horizons: Sequence[int], options: Options, seed: int) -> Scenarios:
    return _scenarios_monte_carlo(sample, horizons, options, seed, distribution="t")


# method -> covariance the figure rests on (analytic Euler allocation)
ANALYTIC_METHODS: dict[str, Callable[[RiskSample, Mapping[str, Any]], np.ndarray]] = {
    "parametric_normal": _covariance_sample,
    "parametric_t": _covariance_sample,
    "cornish_fisher": _covariance_sample,
    "ewma_normal": _covariance_ewma,
}

# method -> the scenarios its figure is read from (kernel allocation)
KERNEL_METHODS: dict[str, Callable[[RiskSample, Sequence[int], Options, int], Scenarios]] = {
    "historical": _scenarios_historical,
    "historical_overlapping": _scenarios_overlapping,
    "age_weighted_historical": _scenarios_age_weighted,
    "filtered_historical": _scenarios_filtered,
    "monte_carlo": _scenarios_monte_carlo,
    "monte_carlo_t": _scenarios_monte_carlo_t,
}
