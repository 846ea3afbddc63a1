"""Zero-mean GARCH(1,1) fitted to many series at once (normal quasi-maximum likelihood).

Pure numpy: the only loops run over days (the variance recursion is
sequential in time) and over optimiser iterations, never over series.
The conventions follow the ``arch`` package so that a fit here and an
``arch_model(mean="Zero", vol="GARCH", p=1, q=1)`` fit of the same series
agree up to optimiser tolerance.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["Garch11Batch", "BACKCAST_DECAY", "BACKCAST_SPAN", "garch11_backcast", "garch11_variance", "fit_garch11_batch"]

BACKCAST_DECAY = 0.94  # arch's backcast weights 0.94**i over ...
BACKCAST_SPAN = 75  # ... the first min(75, T) squared residuals
_LOG_2PI = float(np.log(2.0 * np.pi))
_ALPHAS = (0.01, 0.05, 0.1, 0.2)  # arch's starting grid for GARCH(1,1)
_PERSISTENCES = (0.5, 0.7, 0.9, 0.98)
_MAX_PERSISTENCE = 1.0 - 1e-6  # a fit on this edge is not stationary: the caller falls back
_ARMIJO = 1e-4
_MAX_HALVINGS = 40
_CHUNK = 512  # columns per pass (twice that with the second start): keeps the (3, T, n) derivative paths in a few tens of MB


@dataclass(frozen=True)
class Garch11Batch:
    """Zero-mean GARCH(1,1) fits of N series, in the units of the data.

    Attributes
    ----------
    omega, alpha, beta : (N,) arrays
        NaN where a series could not be fitted at all (constant or non-finite).
    loglik : (N,) array
        Normal log-likelihood of the data at the fitted parameters.
    variance : (T, N) array
        Conditional variance of each day given the days before it.
    variance_next : (N,) array
        Forecast for the day after the sample, ``ω + αx²_T + βσ²_T``.
    converged : (N,) bool array
        The optimiser met its tolerance inside the α + β < 1 − 1e-6 edge and
        arch's variance bounds do not bind along the path (so the fit
        maximises arch's objective too).
    iterations : (N,) int array
        Newton/BHHH iterations used, both starts together.
    on_edge : (N,) bool array
        The optimiser met its tolerance with α + β held at the edge
        1 − 1e-6 (the likelihood still rises towards integrated GARCH);
        ``converged`` is False there.
    """

    omega: np.ndarray
    alpha: np.ndarray
    beta: np.ndarray
    loglik: np.ndarray
    variance: np.ndarray
    variance_next: np.ndarray
    converged: np.ndarray
    iterations: np.ndarray
    on_edge: np.ndarray

    @property
    def finite(self) -> np.ndarray:
        finite = np.isfinite(self.omega) & np.isfinite(self.loglik) & np.isfinite(self.variance_next)
        return finite & np.all(np.isfinite(self.variance), axis=0)

    @property
    def usable(self) -> np.ndarray:
        """Converged, finite and stationary (α + β < 1): the fits a caller may keep."""
        return self.converged & self.finite & (self.alpha + self.beta < 1.0)

    @property
    def edge_maximum(self) -> np.ndarray:
        """Finite fits with their maximum on the α + β = 1 − 1e-6 edge and α > 1e-6.

        α = 0 on the edge is a variance decaying from its start with no
        response to news (a lone shock in a quiet series): not counted.
        """
        return self.on_edge & self.finite & (self.alpha > 1e-6)


def garch11_backcast(x: np.ndarray) -> np.ndarray:
    """arch's starting value for the variance recursion, per column of ``x``.

    Notes
    -----
    ``σ²_{−1} = Σ_{i<τ} w_i x_i²`` with ``w_i ∝ 0.94^i`` normalised to sum
    to 1 and ``τ = min(75, T)`` (``arch.univariate.volatility.GARCH.backcast``).
    """
    x = np.asarray(x, dtype=float)
    tau = min(BACKCAST_SPAN, x.shape[0])
    w = BACKCAST_DECAY ** np.arange(tau)
    return (w / w.sum()) @ (x[:tau] ** 2)


def garch11_variance(
    x: np.ndarray, omega: np.ndarray, alpha: np.ndarray, beta: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """Conditional variance path and normal log-likelihood at given parameters.

    Parameters
    ----------
    x : (T, N) array
        Zero-mean residuals, oldest first.
    omega, alpha, beta : (N,) arrays or scalars

    Returns
    -------
    variance : (T, N) array
    loglik : (N,) array

    Notes
    -----
    ``σ²_0 = ω + (α + β) b`` with b the backcast of :func:`garch11_backcast`,
    ``σ²_t = ω + α x²_{t−1} + β σ²_{t−1}``, and
    ``ℓ = −½ Σ_t (ln 2π + ln σ²_t + x²_t/σ²_t)``, as in arch's
    ``garch_recursion`` (arch's loose variance bounds are not applied here).
    """
    x = np.asarray(x, dtype=float)
    e2 = x**2
    n = x.shape[1]
    omega, alpha, beta = (np.broadcast_to(np.asarray(v, dtype=float), (n,)) for v in (omega, alpha, beta))
    s2 = _variance(e2, garch11_backcast(x), omega, alpha, beta)
    return s2, _loglik(e2, s2)


def fit_garch11_batch(x: np.ndarray, *, max_iter: int = 30, tol: float = 1e-10) -> Garch11Batch:
    """Fit a zero-mean GARCH(1,1) to every column of ``x`` by normal QML.

    Parameters
    ----------
    x : (T, N) array
        Residuals (returns or P&L, any unit), oldest first, all finite.
    max_iter : int
        Newton/BHHH iterations per series before it counts as not converged.
    tol : float
        Stop when the Newton decrement ``gᵀA⁻¹g`` per observation falls below
        this (A the negative Hessian on the free parameters).

    Returns
    -------
    Garch11Batch

    Notes
    -----
    Each column is scaled to unit standard deviation (GARCH is scale
    equivariant: ω scales with s², α and β do not); results are scaled back.
    Variance path and likelihood as in :func:`garch11_variance`. The
    parameters are optimised as ``ω = e^u``, ``α = p w``, ``β = p(1 − w)``
    inside the box ``1e-8 v ≤ ω ≤ 10 v`` (v the mean of x², arch's bounds),
    ``0 ≤ p ≤ 1 − 1e-6``, ``0 ≤ w ≤ 1``: that is ω > 0, α, β ≥ 0 and
    α + β < 1. Start: the best of arch's 16-point grid (α ∈ {.01, .05, .1, .2},
    α + β ∈ {.5, .7, .9, .98}, ω = v(1 − α − β)). Steps: projected Newton
    (Bertsekas 1982) with the analytic Hessian, or BHHH where the Hessian is
    not negative definite, and step halving until the Armijo condition holds.
    Scores and Hessian come from the recursions
    ``∂σ²_t/∂θ = (1, x²_{t−1}, σ²_{t−1}) + β ∂σ²_{t−1}/∂θ`` and
    ``∂²σ²_t/∂θ∂β = ∂σ²_{t−1}/∂θ + ∂σ²_{t−1}/∂θ e_β + β ∂²σ²_{t−1}/∂θ∂β``,
    run over days with all series side by side. A maximum on the edge
    α + β = 1 − 1e-6 is returned with ``on_edge`` set, not ``converged``.

    References
    ----------
    Bollerslev, "Generalized autoregressive conditional heteroskedasticity",
    Journal of Econometrics 31, 1986; Berndt, Hall, Hall & Hausman,
    "Estimation and inference in nonlinear structural models", Annals of
    Economic and Social Measurement 3, 1974; Bertsekas, "Projected Newton
    methods for optimization problems with simple constraints", SIAM
    Journal on Control and Optimization 20, 1982; the ``arch`` package
    (K. Sheppard), whose backcast, bounds and starting grid are used.
    """
    x = np.asarray(x, dtype=float)
    if x.ndim != 2:
        raise ValueError(f"fit_garch11_batch needs a (T, N) array, got shape {x.shape}")
    T, N = x.shape
    out = {
        "omega": np.full(N, np.nan),
        "alpha": np.full(N, np.nan),
        "beta": np.full(N, np.nan),
        "loglik": np.full(N, np.nan),
        "variance": np.full((T, N), np.nan),
        "variance_next": np.full(N, np.nan),
        "converged": np.zeros(N, bool),
        "iterations": np.zeros(N, int),
        "on_edge": np.zeros(N, bool),
    }
    scale = np.std(x, axis=0) if T else np.zeros(N)
    rms = np.sqrt(np.mean(x**2, axis=0)) if T else np.zeros(N)
    # a constant column has a std of rounding noise, not exactly 0
    varies = np.isfinite(scale) & (scale > 1e-12 * rms) & (T >= 2)
    fittable = np.flatnonzero(varies & np.all(np.isfinite(x), axis=0))
    for start in range(0, fittable.size, _CHUNK):
        cols = fittable[start : start + _CHUNK]
        s = scale[cols]
        y = x[:, cols] / s
        omega, alpha, beta, converged, on_edge, iterations = _fit_unit(y, max_iter, tol)
        s2 = _variance(y**2, garch11_backcast(y), omega, alpha, beta)
        bounded = _within_arch_bounds(y, s2)
        converged &= bounded
        on_edge &= bounded
        ll = _loglik(y**2, s2) - T * np.log(s)
        out["omega"][cols] = omega * s**2
        out["alpha"][cols] = alpha
        out["beta"][cols] = beta
        out["loglik"][cols] = ll
        out["variance"][:, cols] = s2 * s**2
        out["variance_next"][cols] = (omega + alpha * y[-1] ** 2 + beta * s2[-1]) * s**2
        out["converged"][cols] = converged
        out["on_edge"][cols] = on_edge
        out["iterations"][cols] = iterations
    return Garch11Batch(**out)


def _recurse(drive: np.ndarray, beta: np.ndarray) -> np.ndarray:
    """``out_t = drive_t + β out_{t−1}``, ``out_{−1} = 0``, along axis 0; β over the last axis."""
    out = np.empty_like(drive)  # keeps drive's memory layout
    if drive.shape[0] == 0:
        return out
    out[0] = drive[0]
    tmp = np.empty_like(drive[0])
    for t in range(1, drive.shape[0]):  # sequential in time by nature; each step spans all series
        np.multiply(out[t - 1], beta, out=tmp)
        np.add(drive[t], tmp, out=out[t])
    return out


def _lagged(a: np.ndarray, first: np.ndarray) -> np.ndarray:
    """``a`` shifted one day later along axis 0, ``first`` in row 0."""
    return np.concatenate([np.broadcast_to(first, a[:1].shape), a[:-1]], axis=0)


def _variance(e2: np.ndarray, backcast: np.ndarray, omega, alpha, beta) -> np.ndarray:
    drive = omega + alpha * _lagged(e2, backcast)
    drive[0] += beta * backcast
    return _recurse(drive, beta)


def _loglik(e2: np.ndarray, s2: np.ndarray) -> np.ndarray:
    return -0.5 * (e2.shape[0] * _LOG_2PI + np.sum(np.log(s2) + e2 / s2, axis=0))


def _within_arch_bounds(y: np.ndarray, s2: np.ndarray) -> np.ndarray:
    """True where arch's loose variance bounds (``variance_bounds``) would not clip the path."""
    e2 = y**2
    bc = garch11_backcast(y)
    ewma = _recurse(_ewma_drive(e2, bc), np.full(y.shape[1], BACKCAST_DECAY))
    big = 1.0 + e2.max(axis=0)
    lower = np.maximum(ewma / 1e6, np.var(y, axis=0) / 1e8)
    upper = np.minimum(np.maximum(ewma * 1e6, big), 1e7 * big)
    return np.all((s2 >= lower) & (s2 <= upper), axis=0)


def _ewma_drive(e2: np.ndarray, bc: np.ndarray) -> np.ndarray:
    drive = (1.0 - BACKCAST_DECAY) * _lagged(e2, bc)
    drive[0] += BACKCAST_DECAY * bc
    return drive


class _Problem:
    """The unit-variance series of one chunk, with what every evaluation reuses."""

    def __init__(self, y: np.ndarray):
        self.e2 = y**2
        self.bc = garch11_backcast(y)
        self.e2_prev = _lagged(self.e2, self.bc)
        self.v = self.e2.mean(axis=0)
        self.T = y.shape[0]

    def take(self, idx: np.ndarray) -> "_Problem":
        sub = object.__new__(_Problem)
        sub.e2, sub.e2_prev = self.e2[:, idx], self.e2_prev[:, idx]
        sub.bc, sub.v, sub.T = self.bc[idx], self.v[idx], self.T
        return sub

    def variance(self, omega, alpha, beta) -> np.ndarray:
        drive = omega + alpha * self.e2_prev
        drive[0] += beta * self.bc
        return _recurse(drive, beta)

    def loglik(self, theta: np.ndarray) -> np.ndarray:
        s2 = self.variance(*theta)
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            ll = _loglik(self.e2, s2)
        return np.where(np.isfinite(ll), ll, -np.inf)

    def derivatives(self, theta: np.ndarray):
        """Log-likelihood, score (3, n), Hessian (n, 3, 3) and BHHH matrix (n, 3, 3) in (ω, α, β)."""
        omega, alpha, beta = theta
        s2 = self.variance(omega, alpha, beta)
        ll = _loglik(self.e2, s2)
        n = s2.shape[1]
        # (3, T, n): each derivative path is contiguous for the sums below
        drive = np.empty((3, self.T, n))
        drive[0] = 1.0
        drive[1] = self.e2_prev
        drive[2, 0], drive[2, 1:] = self.bc, s2[:-1]
        g = _recurse(drive.transpose(1, 0, 2), beta).transpose(1, 0, 2)  # ∂σ²_t/∂(ω, α, β)
        drive[:, 0] = 0.0
        drive[:, 1:] = g[:, :-1]
        drive[2] *= 2.0
        h = _recurse(drive.transpose(1, 0, 2), beta).transpose(1, 0, 2)  # ∂²σ²_t/∂(ω, α, β)∂β
        inv = 1.0 / s2
        c1 = 0.5 * (self.e2 * inv - 1.0) * inv  # ∂ℓ_t/∂σ²_t
        c2 = (0.5 - self.e2 * inv) * inv * inv  # ∂²ℓ_t/∂(σ²_t)²
        score = np.einsum("tn,itn->in", c1, g)
        cg = np.multiply(c2, g, out=drive)  # the drive buffer is free again
        c1g = c1 * c1 * g
        hess = np.empty((n, 3, 3))
        bhhh = np.empty_like(hess)
        for i in range(3):  # six distinct entries of each symmetric matrix
            for j in range(i, 3):
                hess[:, i, j] = hess[:, j, i] = np.einsum("tn,tn->n", cg[i], g[j])
                bhhh[:, i, j] = bhhh[:, j, i] = np.einsum("tn,tn->n", c1g[i], g[j])
        ch = np.einsum("tn,itn->ni", c1, h)  # only the β row and column of ∂²σ² are non-zero
        hess[:, :, 2] += ch
        hess[:, 2, :2] += ch[:, :2]
        return ll, score, hess, bhhh


def _theta(z: np.ndarray) -> np.ndarray:
    u, p, w = z
    return np.stack([np.exp(u), p * w, p * (1.0 - w)])


def _to_z(score, hess, bhhh, z):
    """Score, Hessian and BHHH matrix with respect to z = (ln ω, α + β, α/(α + β))."""
    u, p, w = z
    omega = np.exp(u)
    n = z.shape[1]
    jac = np.zeros((n, 3, 3))  # ∂θ_i/∂z_j
    jac[:, 0, 0] = omega
    jac[:, 1, 1], jac[:, 1, 2] = w, p
    jac[:, 2, 1], jac[:, 2, 2] = 1.0 - w, -p
    grad = np.einsum("in,nij->jn", score, jac)
    hz = np.einsum("nki,nkl,nlj->nij", jac, hess, jac)
    hz[:, 0, 0] += score[0] * omega
    cross = score[1] - score[2]  # from ∂²α/∂p∂w = 1, ∂²β/∂p∂w = −1
    hz[:, 1, 2] += cross
    hz[:, 2, 1] += cross
    bz = np.einsum("nki,nkl,nlj->nij", jac, bhhh, jac)
    return grad, hz, bz


def _box(prob: _Problem) -> tuple[np.ndarray, np.ndarray]:
    n = prob.v.size
    lo = np.stack([np.log(1e-8 * prob.v), np.zeros(n), np.zeros(n)])
    hi = np.stack([np.log(10.0 * prob.v), np.full(n, _MAX_PERSISTENCE), np.ones(n)])
    return lo, hi


def _starts(prob: _Problem) -> tuple[np.ndarray, np.ndarray]:
    """Best point of arch's starting grid, and best with α + β = 0.5, for each series, as z.

    GARCH likelihoods can have a second maximum at low β (ARCH-like); a
    second start from the low-persistence row of the grid finds it.
    """
    n = prob.v.size
    best_ll, low_ll = np.full(n, -np.inf), np.full(n, -np.inf)
    best, low = np.zeros((3, n)), np.zeros((3, n))
    for a in _ALPHAS:
        for p in _PERSISTENCES:
            z = np.stack([np.log(prob.v * (1.0 - p)), np.full(n, p), np.full(n, a / p)])
            ll = prob.loglik(_theta(z))
            for keep, keep_ll, take in ((best, best_ll, True), (low, low_ll, p == _PERSISTENCES[0])):
                better = (ll > keep_ll) & take
                keep_ll[better] = ll[better]
                keep[:, better] = z[:, better]
    return best, low


def _direction(grad, hz, bz, z, lo, hi):
    """Projected Newton (or BHHH) step on the free coordinates, and its decrement."""
    span = hi - lo
    at_lo = (z <= lo + 1e-12 * np.maximum(1.0, np.abs(lo))) & (grad < 0)
    at_hi = (z >= hi - 1e-12 * np.maximum(1.0, np.abs(hi))) & (grad > 0)
    fixed = (at_lo | at_hi | (span <= 0)).T  # (n, 3)
    free = ~fixed
    mask = free[:, :, None] & free[:, None, :]
    pin = fixed[:, :, None] & np.eye(3, dtype=bool)  # unit diagonal: a zero step on pinned coordinates
    a = np.where(mask, -hz, 0.0) + pin
    b = np.where(mask, bz, 0.0) + pin
    g = np.where(free, grad.T, 0.0)
    eig = np.linalg.eigvalsh(a)
    newton = eig[:, 0] > 1e-10 * np.maximum(eig[:, -1], 1e-300)
    ridge = 1e-10 * np.maximum(np.trace(b, axis1=1, axis2=2), 1e-300)  # p = 0 leaves w unidentified
    b = b + ridge[:, None, None] * np.eye(3)
    a = np.where(newton[:, None, None], a, b)
    d = np.linalg.solve(a, g[:, :, None])[:, :, 0]
    d[fixed] = 0.0
    return d.T, np.sum(g * d, axis=1)


def _line_search(prob, z, ll, d, grad, lo, hi, pending) -> np.ndarray:
    """Largest step 2^−k (k < 40) meeting the Armijo condition; updates z and ll in place.

    Step 1 is tried alone (Newton steps usually pass it); the rest try ten
    step sizes per recursion, side by side, to keep the number of passes over
    the days small.
    """
    moved = np.zeros(z.shape[1], bool)
    steps = [np.ones(1)] + [0.5 ** np.arange(k, k + 10) for k in range(1, _MAX_HALVINGS, 10)]
    for step in steps:
        if pending.size == 0:
            break
        k = step.size
        base, dz = np.repeat(z[:, pending], k, axis=1), np.repeat(d[:, pending], k, axis=1)
        cols = np.repeat(pending, k)
        trial = np.clip(base + np.tile(step, pending.size) * dz, lo[:, cols], hi[:, cols])
        new_ll = prob.take(cols).loglik(_theta(trial))
        gain = np.sum(grad[:, cols] * (trial - base), axis=0)
        ok = (new_ll >= ll[cols] + _ARMIJO * gain).reshape(pending.size, k)
        first = np.argmax(ok, axis=1)  # the largest passing step
        hit = ok.any(axis=1)
        pick = np.flatnonzero(hit) * k + first[hit]
        z[:, pending[hit]] = trial[:, pick]
        ll[pending[hit]] = new_ll[pick]
        moved[pending[hit]] = True
        pending = pending[~hit]
    return moved


def _fit_unit(y: np.ndarray, max_iter: int, tol: float):
    """Optimise the unit-variance columns of ``y`` from two starts, keep the higher maximum.

    Returns ω, α, β, converged, on_edge, iterations (of both starts together).
    """
    n = y.shape[1]
    best, low = _starts(_Problem(y))
    second = np.flatnonzero(np.any(low != best, axis=0))
    cols = np.r_[np.arange(n), second]
    z0 = np.concatenate([best, low[:, second]], axis=1)
    theta, ll, converged, on_edge, iterations = _optimise(_Problem(y[:, cols]), z0, max_iter, tol)
    k = np.arange(n, cols.size)
    use = ll[k] > ll[second]  # the higher point, converged or not: a lower maximum is no answer
    pick = np.arange(n)
    pick[second[use]] = k[use]
    iterations[second] += iterations[k]
    return (*theta[:, pick], converged[pick], on_edge[pick], iterations[:n])


def _optimise(prob: _Problem, z0: np.ndarray, max_iter: int, tol: float):
    """Projected Newton/BHHH from ``z0``; returns θ, ℓ, converged, on the α + β edge, iterations."""
    n = z0.shape[1]
    lo, hi = _box(prob)
    z = np.clip(z0, lo, hi)
    ll = prob.loglik(_theta(z))
    converged = np.zeros(n, bool)
    iterations = np.zeros(n, int)
    active = np.flatnonzero(np.isfinite(ll))
    for _ in range(max_iter):
        if active.size == 0:
            break
        sub = prob.take(active)
        za, lla = z[:, active], ll[active]
        lo_a, hi_a = lo[:, active], hi[:, active]
        _, score, hess, bhhh = sub.derivatives(_theta(za))
        grad, hz, bz = _to_z(score, hess, bhhh, za)
        d, decrement = _direction(grad, hz, bz, za, lo_a, hi_a)
        done = ~(decrement > tol * prob.T)  # NaN counts as done, and not converged below
        converged[active[done]] = np.isfinite(decrement[done])
        moved = _line_search(sub, za, lla, d, grad, lo_a, hi_a, np.flatnonzero(~done))
        z[:, active], ll[active] = za, lla
        iterations[active[~done]] += 1
        # a series whose line search cannot improve stops, not converged
        active = active[~done & moved]
    inside = z[1] < hi[1]
    return _theta(z), ll, converged & inside, converged & ~inside, iterations
