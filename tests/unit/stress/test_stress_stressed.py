"""Stressed calibration: the worst 250-day window and the sample rebuilt on it."""

from __future__ import annotations

import numpy as np
import pytest

from tailtrace.errors import ConfigError
from tailtrace.estimators import historical
from tailtrace.estimators.base import RiskSample, linear_revalue
from tailtrace.stress.run import stressed_samples
from tailtrace.stress.stressed import (
    find_stressed_window,
    rolling_expected_shortfall,
    stressed_sample,
    window_from_dates,
)


def _naive_es(pnl: np.ndarray, confidence: float) -> float:
    """Mean of the k = floor(n(1-c)) worst losses, by full sort (independent of np.partition)."""
    losses = np.sort(-pnl)[::-1]
    k = max(1, int(np.floor(len(pnl) * (1 - confidence) + 1e-9)))
    return float(losses[:k].mean())


def test_rolling_es_matches_a_plain_loop():
    rng = np.random.default_rng(7)
    pnl = rng.standard_t(3, size=(2, 400))
    got = rolling_expected_shortfall(pnl, 120, 0.975)
    want = np.array([[_naive_es(pnl[g, w : w + 120], 0.975) for w in range(400 - 120 + 1)] for g in range(2)])
    np.testing.assert_allclose(got, want, rtol=1e-13)


def _crisis_series(business_days):
    """Calm returns with one obvious crisis: 60 days of triple volatility and a fall."""
    rng = np.random.default_rng(11)
    H = 1500
    r = rng.normal(0.0, 0.006, size=(H, 2))
    crisis = slice(900, 960)
    r[crisis] = rng.normal(-0.004, 0.03, size=(60, 2))
    return r, business_days(H), crisis


def test_stressed_window_is_the_one_with_the_largest_es(business_days):
    r, dates, crisis = _crisis_series(business_days)
    values = np.array([[1000.0, 500.0], [200.0, 100.0]])
    scan = find_stressed_window(r, dates, linear_revalue(values), portfolios=("a", "b"))
    win = scan.window()
    # brute force: ES of the summed P&L of every 250-day window, naive ES
    pnl = (np.expm1(r) @ values.T).sum(axis=1)
    es = np.array([_naive_es(pnl[w : w + 250], 0.975) for w in range(len(pnl) - 250 + 1)])
    assert win.start_index == int(np.argmax(es))
    assert win.es == pytest.approx(es.max(), rel=1e-13)
    # and it overlaps the crisis
    assert win.start_index < crisis.stop and win.end_index >= crisis.start
    assert win.end_index - win.start_index + 1 == 250
    assert win.start_date == dates[win.start_index] and win.end_date == dates[win.end_index]
    assert scan.es.shape == (1, len(pnl) - 250 + 1) and scan.labels == ("aggregate",)


def test_a_crisis_as_long_as_the_tail_picks_the_first_window_holding_it_all(business_days):
    # 250 days at 97.5 % give a tail of k = 6 days; a crisis of 6 days of -8 % each makes every
    # window holding all six tie at the largest ES, and the earliest of them is reported
    rng = np.random.default_rng(5)
    r = rng.normal(0.0, 0.004, size=(1000, 1))
    r[600:606, 0] = -0.08
    scan = find_stressed_window(r, business_days(1000), linear_revalue(np.array([[1000.0]])), portfolios=("a",))
    win = scan.window()
    assert win.start_index == 606 - 250 and win.end_index == 605
    assert win.es == pytest.approx(-1000 * np.expm1(-0.08), rel=1e-12)


def test_per_portfolio_basis_finds_each_book_its_own_crisis(business_days):
    rng = np.random.default_rng(3)
    H = 1200
    r = rng.normal(0.0, 0.004, size=(H, 1))
    r[200:206, 0] = -0.07  # a crash: hurts the long book
    r[800:806, 0] = 0.09  # a squeeze: hurts the short book
    values = np.array([[1000.0], [-1000.0]])
    scan = find_stressed_window(r, business_days(H), linear_revalue(values), portfolios=("long", "short"),
                                basis="per_portfolio")
    long_w, short_w = scan.window("long"), scan.window("short")
    assert long_w.start_index <= 200 and long_w.end_index >= 205
    assert short_w.start_index <= 800 and short_w.end_index >= 805


def test_overlapping_horizon_inside_the_window(business_days):
    r, dates, _ = _crisis_series(business_days)
    values = np.array([[1000.0, 500.0]])
    scan = find_stressed_window(r, dates, linear_revalue(values), portfolios=("a",), horizon_days=10)
    w = scan.window()
    block = r[w.start_index : w.end_index + 1]
    sums = np.array([block[t : t + 10].sum(axis=0) for t in range(250 - 10 + 1)])
    assert w.es == pytest.approx(_naive_es(np.expm1(sums) @ values[0], 0.975), rel=1e-12)
    assert scan.es.shape[1] == r.shape[0] - 250 + 1


def test_short_history_and_bad_basis_are_refused(business_days):
    r = np.zeros((100, 1))
    with pytest.raises(ConfigError, match="fewer than the stressed window of 250"):
        find_stressed_window(r, business_days(100), linear_revalue(np.ones((1, 1))), portfolios=("a",))
    with pytest.raises(ConfigError, match="basis must be"):
        find_stressed_window(r, business_days(100), linear_revalue(np.ones((1, 1))), portfolios=("a",),
                             length_days=50, basis="firm")


def _sample(r, dates, values, window=500):
    revalue = linear_revalue(values)
    return RiskSample(
        as_of=dates[-1], portfolios=("a", "b"), instruments=("x", "y"), dates=dates[-window:],
        returns=r[-window:], history=r, values=values, pnl=revalue(r[-window:], 1), revalue=revalue,
    )


def test_stressed_sample_reruns_an_estimator_on_the_stressed_window(business_days):
    r, dates, _ = _crisis_series(business_days)
    values = np.array([[1000.0, 500.0], [-300.0, 700.0]])
    sample = _sample(r, dates, values)
    win = find_stressed_window(r, dates, sample.revalue, portfolios=sample.portfolios).window()
    stressed = stressed_sample(sample, dates, win)
    s, e = win.start_index, win.end_index + 1
    np.testing.assert_array_equal(stressed.returns, r[s:e])
    np.testing.assert_array_equal(stressed.dates, dates[s:e])
    assert stressed.history.shape[0] == e and stressed.as_of == sample.as_of
    assert stressed.values is sample.values
    est = historical.estimate(stressed, [0.975], [1], options={})
    current = historical.estimate(sample, [0.975], [1], options={})
    # the aggregate stressed ES equals the scan's figure; each book is stressed above its current ES here
    assert est.es[:, 0, 0].sum() >= current.es[:, 0, 0].sum()
    np.testing.assert_allclose(est.es[:, 0, 0], [_naive_es(stressed.pnl[p], 0.975) for p in range(2)], rtol=1e-13)


def test_stressed_sample_can_keep_one_portfolio(business_days):
    r, dates, _ = _crisis_series(business_days)
    values = np.array([[1000.0, 500.0], [-300.0, 700.0]])
    sample = _sample(r, dates, values)
    scan = find_stressed_window(r, dates, sample.revalue, portfolios=sample.portfolios, basis="per_portfolio")
    one = stressed_sample(sample, dates, scan.window("b"), portfolios=["b"])
    assert one.portfolios == ("b",) and one.values.shape == (1, 2)
    np.testing.assert_allclose(one.pnl, values[1:] @ np.expm1(one.returns).T, rtol=1e-13)
    assert one.revalue(np.zeros((3, 2)), 1).shape == (1, 3)


def test_stressed_sample_rejects_a_window_of_another_history(business_days):
    r, dates, _ = _crisis_series(business_days)
    sample = _sample(r, dates, np.ones((2, 2)))
    win = find_stressed_window(r, dates, sample.revalue, portfolios=sample.portfolios).window()
    with pytest.raises(ValueError, match="does not belong to this history"):
        stressed_sample(sample, dates + 1, win)


def test_portfolios_sharing_a_stressed_window_share_a_sample(business_days):
    rng = np.random.default_rng(9)
    H = 1000
    r = rng.normal(0.0, 0.004, size=(H, 1))
    r[300:306, 0] = -0.07  # hurts the long books
    r[700:706, 0] = 0.09  # hurts the short book
    values = np.array([[1000.0], [-500.0], [300.0]])
    revalue = linear_revalue(values)
    sample = RiskSample(
        as_of=business_days(H)[-1], portfolios=("a", "b", "c"), instruments=("x",), dates=business_days(H)[-500:],
        returns=r[-500:], history=r, values=values, pnl=revalue(r[-500:], 1), revalue=revalue,
    )
    scan = find_stressed_window(r, business_days(H), revalue, portfolios=sample.portfolios, basis="per_portfolio")
    samples = stressed_samples(sample, business_days(H), scan)
    assert [s.portfolios for s in samples] == [("a", "c"), ("b",)]
    assert samples[0].dates[0] == scan.window("a").start_date == scan.window("c").start_date


def test_window_rebuilt_from_its_dates_gives_the_same_sample(business_days):
    r, dates, _ = _crisis_series(business_days)
    sample = _sample(r, dates, np.ones((2, 2)))
    win = find_stressed_window(r, dates, sample.revalue, portfolios=sample.portfolios).window()
    again = window_from_dates(dates, str(win.start_date), str(win.end_date), es=win.es)
    assert (again.start_index, again.end_index, again.length_days) == (win.start_index, win.end_index, 250)
    np.testing.assert_array_equal(stressed_sample(sample, dates, again).returns, stressed_sample(sample, dates, win).returns)
    with pytest.raises(ValueError, match="not a span of trading days"):
        window_from_dates(dates, "2018-01-06", str(win.end_date))  # a Saturday
