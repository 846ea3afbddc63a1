"""Pricing models and Greeks against textbook values and independent formulas."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.stats import norm

from tailtrace.options import (
    MODEL_BLACK76,
    MODEL_BSM,
    MODEL_GK,
    black76_price,
    bsm_price,
    carry_yield,
    garman_kohlhagen_price,
    horizon_calendar_days,
    option_greeks,
    option_price,
    year_fraction,
)


def _grid(seed: int = 7, n: int = 200):
    rng = np.random.default_rng(seed)
    return dict(
        spot=rng.uniform(50, 150, n), strike=rng.uniform(60, 140, n), tau=rng.uniform(0.02, 3.0, n),
        vol=rng.uniform(0.05, 0.8, n), rate=rng.uniform(-0.01, 0.08, n), carry=rng.uniform(-0.02, 0.06, n),
        is_call=rng.random(n) < 0.5,
    )


# --- published worked examples ------------------------------------------------

def test_bsm_hull_worked_example():
    # Hull, Options, Futures, and Other Derivatives, Black-Scholes-Merton chapter,
    # S=42, K=40, r=10%, sigma=20%, T=0.5: call 4.76, put 0.81 (recalled from memory).
    call = bsm_price(42.0, 40.0, 0.5, 0.2, 0.10, 0.0, True)
    put = bsm_price(42.0, 40.0, 0.5, 0.2, 0.10, 0.0, False)
    assert call == pytest.approx(4.76, abs=0.005)
    assert put == pytest.approx(0.81, abs=0.005)


def test_greeks_hull_worked_example():
    # Hull, Options, Futures, and Other Derivatives, chapter on the Greek letters:
    # S=49, K=50, r=5%, sigma=20%, T=20 weeks=0.3846, no dividends: price 2.40,
    # delta 0.522, gamma 0.066, vega 12.1 per unit of vol, theta -4.31 per year
    # (-0.0118 per calendar day) (recalled from memory).
    g = option_greeks(49.0, 50.0, 0.3846, 0.2, 0.05, 0.0, True)
    assert g.price == pytest.approx(2.40, abs=0.005)
    assert g.delta == pytest.approx(0.522, abs=0.0005)
    assert g.gamma == pytest.approx(0.066, abs=0.0005)
    assert g.vega == pytest.approx(12.1, abs=0.05)
    assert g.theta == pytest.approx(-4.31, abs=0.005)
    assert g.theta / 365 == pytest.approx(-0.0118, abs=0.00005)


def test_black76_hull_futures_option_example():
    # Hull, Options, Futures, and Other Derivatives, futures options chapter: European
    # put on crude-oil futures, F=K=20, r=9%, sigma=25%, T=4 months: 1.12 (memory).
    assert black76_price(20.0, 20.0, 4 / 12, 0.25, 0.09, False) == pytest.approx(1.12, abs=0.005)


def test_haug_worked_examples():
    # Haug, The Complete Guide to Option Pricing Formulas (2007), chapter 1 examples
    # (recalled from memory, four decimals):
    # generalised BSM put S=75, K=70, T=0.5, r=10%, q=5%, sigma=35%: 4.0870;
    assert bsm_price(75.0, 70.0, 0.5, 0.35, 0.10, 0.05, False) == pytest.approx(4.0870, abs=5e-5)
    # Black-76 call F=K=19, T=0.75, r=10%, sigma=28%: 1.7011;
    assert black76_price(19.0, 19.0, 0.75, 0.28, 0.10, True) == pytest.approx(1.7011, abs=5e-5)
    # Garman-Kohlhagen call S=1.56, K=1.60, T=0.5, r_d=6%, r_f=8%, sigma=12%: 0.0291.
    assert garman_kohlhagen_price(1.56, 1.60, 0.5, 0.12, 0.06, 0.08, True) == pytest.approx(0.0291, abs=5e-5)


# --- identities ------------------------------------------------------------------

def test_put_call_parity_all_models():
    # Put-call parity (Hull, Options, Futures, and Other Derivatives): C - P = S e^{-qT} - K e^{-rT};
    # Black-76: C - P = e^{-rT}(F - K); Garman-Kohlhagen: C - P = S e^{-r_f T} - K e^{-r_d T}.
    g = _grid()
    s, k, t, v, r, q = (g[x] for x in ("spot", "strike", "tau", "vol", "rate", "carry"))
    diff = bsm_price(s, k, t, v, r, q, True) - bsm_price(s, k, t, v, r, q, False)
    np.testing.assert_allclose(diff, s * np.exp(-q * t) - k * np.exp(-r * t), rtol=0, atol=1e-10)
    diff = black76_price(s, k, t, v, r, True) - black76_price(s, k, t, v, r, False)
    np.testing.assert_allclose(diff, np.exp(-r * t) * (s - k), rtol=0, atol=1e-10)
    diff = garman_kohlhagen_price(s, k, t, v, r, q, True) - garman_kohlhagen_price(s, k, t, v, r, q, False)
    np.testing.assert_allclose(diff, s * np.exp(-q * t) - k * np.exp(-r * t), rtol=0, atol=1e-10)


def test_black76_and_gk_reduce_to_bsm():
    # Textbook identities (Hull, futures options and currency options sections):
    # Black-76 with F = S e^{(r-q)T} equals BSM; GK equals BSM with q = foreign rate.
    g = _grid(seed=11)
    s, k, t, v, r, q, c = (g[x] for x in ("spot", "strike", "tau", "vol", "rate", "carry", "is_call"))
    bsm = bsm_price(s, k, t, v, r, q, c)
    np.testing.assert_allclose(black76_price(s * np.exp((r - q) * t), k, t, v, r, c), bsm, rtol=1e-12, atol=1e-11)
    np.testing.assert_allclose(garman_kohlhagen_price(s, k, t, v, r, q, c), bsm, rtol=1e-12, atol=1e-12)


def test_carry_yield_per_model():
    rate, div = np.array([0.03, 0.03, 0.03]), np.array([0.01, 0.01, 0.01])
    np.testing.assert_array_equal(carry_yield([MODEL_BSM, MODEL_BLACK76, MODEL_GK], rate, div), [0.01, 0.03, 0.01])
    with pytest.raises(ValueError, match="unknown option model"):
        carry_yield(["binomial"], rate[:1], div[:1])


# --- Greeks -------------------------------------------------------------------------

def test_greeks_match_central_finite_differences():
    g = _grid(seed=3)
    greeks = option_greeks(**g)
    s, v, t = g["spot"], g["vol"], g["tau"]

    def price(**change):
        return option_price(**{**g, **change})

    hd, hg, hv, ht = 1e-6 * s, 1e-4 * s, 1e-5, 1e-6
    np.testing.assert_allclose(greeks.delta, (price(spot=s + hd) - price(spot=s - hd)) / (2 * hd),
                               rtol=1e-6, atol=1e-8)
    np.testing.assert_allclose(greeks.gamma, (price(spot=s + hg) - 2 * price() + price(spot=s - hg)) / hg ** 2,
                               rtol=1e-4, atol=1e-6)
    np.testing.assert_allclose(greeks.vega, (price(vol=v + hv) - price(vol=v - hv)) / (2 * hv),
                               rtol=1e-6, atol=1e-6)
    # theta = dV/dt = -dV/dtau
    np.testing.assert_allclose(greeks.theta, -(price(tau=t + ht) - price(tau=t - ht)) / (2 * ht),
                               rtol=1e-5, atol=1e-5)


def _independent_greeks(model, s, k, t, v, r, q, call):
    """Textbook closed forms written out per model with scipy.stats.norm (Hull; Haug 2007, ch. 1-2)."""
    sq = np.sqrt(t)
    if model == MODEL_BLACK76:  # s is the futures price; discounting of everything at r
        d1 = (np.log(s / k) + 0.5 * v * v * t) / (v * sq)
        d2 = d1 - v * sq
        df = np.exp(-r * t)
        price = np.where(call, df * (s * norm.cdf(d1) - k * norm.cdf(d2)), df * (k * norm.cdf(-d2) - s * norm.cdf(-d1)))
        delta = np.where(call, df * norm.cdf(d1), -df * norm.cdf(-d1))
        gamma = df * norm.pdf(d1) / (s * v * sq)
        vega = s * df * norm.pdf(d1) * sq
        theta = np.where(
            call,
            -s * df * norm.pdf(d1) * v / (2 * sq) + r * s * df * norm.cdf(d1) - r * k * df * norm.cdf(d2),
            -s * df * norm.pdf(d1) * v / (2 * sq) - r * s * df * norm.cdf(-d1) + r * k * df * norm.cdf(-d2),
        )
        return price, delta, gamma, vega, theta
    # BSM with dividend yield q; GK with q = foreign rate (same algebra)
    d1 = (np.log(s / k) + (r - q + 0.5 * v * v) * t) / (v * sq)
    d2 = d1 - v * sq
    dq, dr = np.exp(-q * t), np.exp(-r * t)
    price = np.where(call, s * dq * norm.cdf(d1) - k * dr * norm.cdf(d2), k * dr * norm.cdf(-d2) - s * dq * norm.cdf(-d1))
    delta = np.where(call, dq * norm.cdf(d1), dq * (norm.cdf(d1) - 1))
    gamma = dq * norm.pdf(d1) / (s * v * sq)
    vega = s * dq * norm.pdf(d1) * sq
    theta = np.where(
        call,
        -s * norm.pdf(d1) * v * dq / (2 * sq) + q * s * norm.cdf(d1) * dq - r * k * dr * norm.cdf(d2),
        -s * norm.pdf(d1) * v * dq / (2 * sq) - q * s * norm.cdf(-d1) * dq + r * k * dr * norm.cdf(-d2),
    )
    return price, delta, gamma, vega, theta


@pytest.mark.parametrize("model", [MODEL_BSM, MODEL_BLACK76, MODEL_GK])
def test_greeks_match_independent_scipy_formulas(model):
    g = _grid(seed=5)
    s, k, t, v, r, q, c = (g[x] for x in ("spot", "strike", "tau", "vol", "rate", "carry", "is_call"))
    carry = carry_yield(np.full(s.size, model), r, q)
    ours = option_greeks(s, k, t, v, r, carry, c)
    ref = _independent_greeks(model, s, k, t, v, r, q, c)
    for name, mine, theirs in zip(("price", "delta", "gamma", "vega", "theta"),
                                  (ours.price, ours.delta, ours.gamma, ours.vega, ours.theta), ref):
        np.testing.assert_allclose(mine, theirs, rtol=1e-10, atol=1e-12, err_msg=name)


# --- expiry, dates, vectorisation ------------------------------------------------------

def test_at_and_after_expiry_value_is_intrinsic():
    spot = np.array([90.0, 110.0, 100.0, 90.0, 110.0])
    is_call = np.array([True, True, True, False, False])
    for tau in (0.0, -0.1):
        g = option_greeks(spot, 100.0, tau, 0.2, 0.05, 0.0, is_call)
        np.testing.assert_array_equal(g.price, [0.0, 10.0, 0.0, 10.0, 0.0])
        np.testing.assert_array_equal(g.delta, [0.0, 1.0, 0.0, -1.0, 0.0])
        for arr in (g.gamma, g.vega, g.theta):
            np.testing.assert_array_equal(arr, 0.0)


def test_year_fraction_act365_and_horizon_ageing():
    # ACT/365: 2024-12-31 to 2025-06-30 is 181 days.
    assert year_fraction("2024-12-31", "2025-06-30") == pytest.approx(181 / 365, abs=0, rel=1e-15)
    np.testing.assert_allclose(year_fraction(["2024-12-31", "2024-02-28"], ["2025-12-31", "2024-03-01"]),
                               [365 / 365, 2 / 365])
    np.testing.assert_allclose(horizon_calendar_days([1, 5, 10]), [1.4, 7.0, 14.0])


def test_vectorised_grid_of_options_by_scenarios():
    # 1,000 options x 10,000 scenarios in one broadcast call (timing: see the benchmark).
    rng = np.random.default_rng(0)
    m, s = 1000, 10000
    spot = 100.0 * np.exp(rng.normal(0, 0.02, (1, s)))
    strike = rng.uniform(70, 130, (m, 1))
    tau = rng.uniform(0.0, 2.0, (m, 1))
    tau[:10] = 0.0  # some expire inside the horizon
    out = option_price(spot, strike, tau, rng.uniform(0.1, 0.5, (m, 1)), 0.03, 0.01, rng.random((m, 1)) < 0.5)
    assert out.shape == (m, s)
    assert np.isfinite(out).all() and (out >= 0).all()
