"""Delta-gamma estimator: moments, Cornish-Fisher, and comparison with full revaluation."""

from __future__ import annotations

import json
import warnings
from dataclasses import replace

import numpy as np
import pandas as pd
import pytest
from option_book_fixtures import correlated_returns, sample_from_book
from scipy import integrate, stats

from tailtrace.errors import ModelWarning
from tailtrace.estimators import delta_gamma, delta_normal
from tailtrace.estimators.delta_gamma import (
    cornish_fisher_monotone,
    cornish_fisher_quantile,
    cornish_fisher_tail_mean,
    delta_gamma_cumulants,
)
from tailtrace.options import build_book

Z99 = -2.326348  # left-tail 1% standard normal quantile (REFERENCES.md)


# --- moments ------------------------------------------------------------------------------

def test_scalar_cumulants_match_noncentral_chi_square():
    # e r + g r^2 / 2 with r ~ N(0, s^2) equals (g s^2/2) X - e^2/(2g), X ~ ncx2(1, (e/(g s))^2);
    # moments of X from scipy.stats.ncx2 (independent reference).
    e, g, s = 2.0, -3.0, 0.5
    kappa = delta_gamma_cumulants([[e]], [[[g]]], [[s * s]])[0]
    a, nc = g * s * s / 2, (e / (g * s)) ** 2
    mean, var, skew, exkurt = stats.ncx2.stats(1, nc, moments="mvsk")
    assert kappa[0] == pytest.approx(a * mean - e * e / (2 * g), rel=1e-12)
    assert kappa[1] == pytest.approx(a * a * var, rel=1e-12)
    assert kappa[2] / kappa[1] ** 1.5 == pytest.approx(np.sign(a) * skew, rel=1e-10)
    assert kappa[3] / kappa[1] ** 2 == pytest.approx(exkurt, rel=1e-10)


def test_matrix_cumulants_match_trace_formulas():
    # Mathai & Provost (1992): k1 = tr(G S)/2, k2 = e'Se + tr((GS)^2)/2,
    # k3 = 3 e'SGSe + tr((GS)^3), k4 = 12 e'SGSGSe + 3 tr((GS)^4); evaluated here by plain
    # matrix powers (our code goes through an eigen-decomposition).
    rng = np.random.default_rng(8)
    n, p = 5, 3
    a = rng.normal(size=(n, n))
    cov = a @ a.T / n * 1e-3
    e = rng.normal(size=(p, n)) * 1e4
    g = rng.normal(size=(p, n, n)) * 1e5
    g = g + np.swapaxes(g, 1, 2)
    ours = delta_gamma_cumulants(e, g, cov, constant=np.array([1.0, 2.0, 3.0]))
    for k in range(p):
        gs = g[k] @ cov
        power = np.linalg.matrix_power
        ref = [1.0 + k + 0.5 * np.trace(gs), e[k] @ cov @ e[k] + 0.5 * np.trace(power(gs, 2)),
               3 * e[k] @ cov @ g[k] @ cov @ e[k] + np.trace(power(gs, 3)),
               12 * e[k] @ cov @ g[k] @ cov @ g[k] @ cov @ e[k] + 3 * np.trace(power(gs, 4))]
        np.testing.assert_allclose(ours[k], ref, rtol=1e-9)


def test_singular_covariance_is_handled():
    cov = np.array([[1e-4, 1e-4], [1e-4, 1e-4]])  # perfectly correlated
    kappa = delta_gamma_cumulants([[1.0, 1.0]], [[[1.0, 0.0], [0.0, 1.0]]], cov)
    # same as one factor with e = 2, g = 2 (sum of the gamma entries), variance 1e-4
    np.testing.assert_allclose(kappa, delta_gamma_cumulants([[2.0]], [[[2.0]]], [[1e-4]]), rtol=1e-9)


# --- Cornish-Fisher -----------------------------------------------------------------------

def test_cornish_fisher_hull_example():
    # Hull, Options, Futures, and Other Derivatives, VaR chapter (memory): mu = -0.2,
    # sigma = 2.2, skew -0.4; with the first skewness term only, w = z + (z^2-1)S/6 = -2.62 and
    # the 1% point is -0.2 - 2.62*2.2 = -5.96 (normal: -5.32). Our expansion adds the
    # second-order term -(2z^3-5z)S^2/36 = +0.060 (Zangari 1996).
    s2_term = -(2 * Z99 ** 3 - 5 * Z99) * 0.16 / 36
    assert s2_term == pytest.approx(0.0602, abs=1e-4)
    w = cornish_fisher_quantile(Z99, -0.4, 0.0)
    assert w - s2_term == pytest.approx(-2.62, abs=0.005)
    assert -0.2 + (w - s2_term) * 2.2 == pytest.approx(-5.96, abs=0.01)
    assert -0.2 + Z99 * 2.2 == pytest.approx(-5.32, abs=0.01)


@pytest.mark.parametrize("prob", [0.01, 0.025, 0.99])
def test_cornish_fisher_close_to_exact_gamma_quantile(prob):
    # A gamma(k) variable has skew 2/sqrt(k), excess kurtosis 6/k; for large k the expansion
    # is accurate to O(k^-1.5) (scipy.stats.gamma.ppf as reference).
    k = 200.0
    exact = (stats.gamma.ppf(prob, k) - k) / np.sqrt(k)
    approx = cornish_fisher_quantile(stats.norm.ppf(prob), 2 / np.sqrt(k), 6 / k)
    assert approx == pytest.approx(exact, abs=2e-4)
    assert abs(stats.norm.ppf(prob) - exact) > 0.02  # the adjustment matters


@pytest.mark.parametrize("skew, exkurt", [(0.0, 0.0), (-0.6, 1.5), (0.8, 3.0), (2.83, 12.0)])
def test_cornish_fisher_tail_mean_is_the_integral_of_the_quantile(skew, exkurt):
    # Numerical integration (scipy.integrate.quad) of the CF quantile over the tail.
    for alpha in (0.01, 0.025):
        q = stats.norm.ppf(alpha)
        ref = integrate.quad(lambda u: cornish_fisher_quantile(stats.norm.ppf(u), skew, exkurt), 0, alpha,
                             limit=200, points=[alpha * 1e-6, alpha * 1e-3])[0] / alpha
        assert cornish_fisher_tail_mean(q, skew, exkurt) == pytest.approx(ref, rel=1e-6, abs=1e-9)
    # normal: phi(z)/(1-c) = 2.665214 at 99% (REFERENCES.md)
    assert cornish_fisher_tail_mean(Z99, 0.0, 0.0) == pytest.approx(-2.665214, abs=1e-5)


def test_cornish_fisher_monotone_domain():
    flags = cornish_fisher_monotone(np.array([0.0, 0.3, -0.5, 2.83, 0.0]), np.array([0.0, 0.12, 1.0, 12.0, 20.0]))
    np.testing.assert_array_equal(flags, [True, True, True, False, False])


# --- the estimator ------------------------------------------------------------------------------

def _one_underlying_book(option_rows, positions, spot=100.0):
    inst = pd.DataFrame([{"instrument": "EQ", "asset_class": "equity", "currency": "USD"}] + [
        {"instrument": name, "asset_class": "option", "currency": "USD", "underlying": "EQ", "option_type": kind,
         "strike": strike, "expiry": "2025-06-30", "implied_vol": 0.25, "rate": 0.03, "dividend_yield": 0.0}
        for name, kind, strike in option_rows])
    pos = pd.DataFrame(positions, columns=["portfolio", "instrument", "quantity"])
    return build_book(pos, inst, {"EQ": spot}, as_of="2024-12-31", columns=["EQ"], base_currency="USD")


def _window(daily_vol: float, n: int = 500) -> np.ndarray:
    return correlated_returns(np.array([[daily_vol ** 2]]), n, seed=12)


def test_linear_book_equals_delta_normal_without_gamma(demo_book):
    cov = np.diag([1e-4, 2e-4, 1.5e-4, 4e-5])
    sample = sample_from_book(demo_book, correlated_returns(cov, 300, seed=4))
    no_gamma = replace(sample, gammas=np.zeros_like(sample.gammas), thetas=None)
    dg = delta_gamma.estimate(no_gamma, [0.975, 0.99], [1, 10], options={})
    dn = delta_normal.estimate(no_gamma, [0.975, 0.99], [1, 10], options={})
    np.testing.assert_allclose(dg.var, dn.var, rtol=1e-10)
    np.testing.assert_allclose(dg.es, dn.es, rtol=1e-10)
    assert dg.scaling == ("none", "sqrt_time")
    json.dumps(dg.diagnostics)


def test_delta_gamma_approaches_full_revaluation_as_shocks_shrink():
    # Long stock plus long call: P&L increases with the price, so the full-revaluation
    # VaR is exactly the loss at the shock quantile sigma * z (no simulation noise).
    book = _one_underlying_book([("C", "call", 100.0)], [("p", "EQ", 1.0), ("p", "C", 2.0)])
    errors = []
    for vol in (0.04, 0.02, 0.01, 0.005):
        est = delta_gamma.estimate(sample_from_book(book, _window(vol)), [0.99], [1], options={})
        full = -book.revalue(np.array([[vol * Z99]]), 1)[0, 0]
        errors.append(abs(est.var[0, 0, 0] / full - 1))
    assert errors[0] > 3e-3  # the approximation does err for large shocks
    assert errors[0] > 4 * errors[1]
    assert max(errors[2:]) < 1e-3


def test_straddle_delta_normal_blind_full_revaluation_not():
    # Delta-neutral strike K = S exp((r + sigma^2/2) T): call and put deltas cancel exactly.
    strike = 100.0 * np.exp((0.03 + 0.25 ** 2 / 2) * 181 / 365)
    rows = [("C", "call", strike), ("P", "put", strike)]
    long_ = _one_underlying_book(rows, [("long", "C", 1.0), ("long", "P", 1.0), ("short", "C", -1.0),
                                        ("short", "P", -1.0)])
    assert np.abs(long_.exposures).max() < 1e-9
    vol = 0.015
    sample = sample_from_book(long_, _window(vol))
    value = abs(long_.market_values[0])
    rng = np.random.default_rng(2024)
    for h in (1, 10):
        dn = delta_normal.estimate(sample, [0.99], [h], options={})
        with pytest.warns(ModelWarning, match="Cornish-Fisher expansion not monotone"):
            dg = delta_gamma.estimate(sample, [0.99], [h], options={})
        pnl = long_.revalue(rng.normal(0.0, vol * np.sqrt(h), (200_000, 1)), h)
        full = -np.quantile(pnl, 0.01, axis=1)
        # first-order method sees no risk at all
        assert np.abs(dn.var[:, 0, 0]).max() < 1e-9 * value
        # long straddle: the loss is the time decay, not zero
        assert full[0] > 0.5 * -long_.thetas[0] * 1.4 * h
        assert abs(dg.var[0, 0, 0]) > 1e3 * abs(dn.var[0, 0, 0])
        # short straddle: large loss, which delta-gamma captures within 10 %
        assert full[1] > 0.01 * value * np.sqrt(h)
        assert dg.var[1, 0, 0] == pytest.approx(full[1], rel=0.10)
        assert dg.diagnostics["cf_monotone"] == [[False], [False]]


def test_multi_currency_book_close_to_full_revaluation_for_small_shocks(demo_book):
    # Small daily vols (0.2-0.4 %): delta-gamma VaR within 1.5 % of a seeded Monte Carlo with
    # full revaluation (sampling error of the 1 % quantile with 400k draws is about 0.3 %).
    cov = np.diag([0.004, 0.003, 0.0035, 0.002]) ** 2
    cov[0, 3] = cov[3, 0] = 0.3 * 0.004 * 0.002
    sample = sample_from_book(demo_book, correlated_returns(cov, 400, seed=6))
    h = 10
    with warnings.catch_warnings():
        warnings.simplefilter("error", ModelWarning)  # mild skew: expansion valid
        dg = delta_gamma.estimate(sample, [0.99], [h], options={})
    shocks = np.random.default_rng(77).multivariate_normal(np.zeros(4), cov * h, 400_000)
    full = -np.quantile(demo_book.revalue(shocks, h), 0.01, axis=1)
    np.testing.assert_allclose(dg.var[:, 0, 0], full, rtol=0.015)
    # while the first-order method is off by about 5 % on the two option portfolios
    dn = delta_normal.estimate(sample, [0.99], [h], options={})
    assert np.all(np.abs(dn.var[:2, 0, 0] / full[:2] - 1) > 0.03)


def test_theta_switch(demo_book):
    sample = sample_from_book(demo_book, correlated_returns(np.eye(4) * 1e-4, 100, seed=3))
    on = delta_gamma.estimate(sample, [0.99], [1, 10], options={})
    off = delta_gamma.estimate(sample, [0.99], [1, 10], options={"include_theta": False})
    np.testing.assert_allclose(off.var - on.var, demo_book.thetas[:, None, None] * np.array([1.4, 14.0]),
                               rtol=1e-9, atol=1e-8)
    assert on.diagnostics["include_theta"] is True and off.diagnostics["include_theta"] is False


def test_mean_shift_equals_expansion_around_the_drift(demo_book):
    # With include_mean, r = h mu + x: the moments are those of the Taylor polynomial
    # re-expanded around h mu (checked against a direct evaluation of the polynomial's mean).
    returns = correlated_returns(np.eye(4) * 1e-4, 100, seed=5) + np.array([0.002, -0.001, 0.0, 0.0005])
    sample = sample_from_book(demo_book, returns)
    est = delta_gamma.estimate(sample, [0.99], [5], options={"include_mean": True, "include_theta": False})
    mu, cov = 5 * returns.mean(axis=0), 5 * np.cov(returns, rowvar=False)
    e, g = demo_book.exposures, demo_book.gammas
    mean = e @ mu + 0.5 * np.einsum("i,pij,j->p", mu, g, mu) + 0.5 * np.einsum("pij,ji->p", g, cov)
    np.testing.assert_allclose(np.array(est.diagnostics["mean"])[:, 0], mean, rtol=1e-10)
