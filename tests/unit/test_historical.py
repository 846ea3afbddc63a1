"""Historical simulation: the k-th worst rule and ES beyond it."""

import numpy as np
import pytest

from tailtrace.estimators.base import RiskSample, linear_revalue
from tailtrace.estimators.historical import estimate, estimate_overlapping, overlapping_log_returns
from tailtrace.estimators.tail import empirical_var_es, tail_count


def make_sample(returns: np.ndarray, values: np.ndarray) -> RiskSample:
    revalue = linear_revalue(values)
    dates = np.arange(np.datetime64("2023-01-02"), np.datetime64("2023-01-02") + len(returns))
    return RiskSample(as_of=dates[-1], portfolios=tuple(f"P{i}" for i in range(len(values))),
                      instruments=tuple(f"I{j}" for j in range(returns.shape[1])), dates=dates, returns=returns,
                      history=returns, values=values, pnl=revalue(returns, 1), revalue=revalue)


def test_tail_count_rule():
    # 500 observations at 99%: the 5th worst loss is the VaR (common practice, no source).
    assert tail_count(500, 0.99) == 5
    assert tail_count(250, 0.99) == 2
    assert tail_count(100, 0.90) == 10  # 100 * 0.1 is 9.999...98 in floating point
    assert tail_count(50, 0.999) == 1


def test_kth_worst_and_es_on_constructed_sample():
    rng = np.random.default_rng(3)
    losses = rng.permutation(np.arange(1.0, 501.0))  # losses 1..500 in random order
    var, es = empirical_var_es(losses[None, :], [0.99, 0.95])
    assert var[0, 0] == 496.0  # 5th worst of 500
    assert es[0, 0] == pytest.approx(np.mean([500, 499, 498, 497, 496]))
    assert var[0, 1] == 476.0  # 25th worst
    assert es[0, 1] == pytest.approx(np.mean(np.arange(476, 501)))


def test_historical_estimator_revalues_and_scales():
    rng = np.random.default_rng(5)
    r = rng.normal(0, 0.01, size=(500, 2))
    sample = make_sample(r, np.array([[1000.0, 500.0]]))
    res = estimate(sample, [0.99], [1, 10], options={})
    pnl = 1000 * np.expm1(r[:, 0]) + 500 * np.expm1(r[:, 1])
    worst = np.sort(-pnl)[::-1]
    assert res.var[0, 0, 0] == pytest.approx(worst[4])
    assert res.es[0, 0, 0] == pytest.approx(worst[:5].mean())
    assert res.var[0, 0, 1] == pytest.approx(worst[4] * np.sqrt(10))
    assert res.scaling == ("none", "sqrt_time")


def test_overlapping_uses_h_day_sums():
    rng = np.random.default_rng(8)
    r = rng.normal(0, 0.01, size=(300, 1))
    sums = overlapping_log_returns(r, 10)
    assert sums.shape == (291, 1)
    assert sums[0, 0] == pytest.approx(r[:10, 0].sum())
    sample = make_sample(r, np.array([[1e6]]))
    res = estimate_overlapping(sample, [0.99], [1, 10], options={})
    loss = -1e6 * np.expm1(sums[:, 0])
    assert res.var[0, 0, 1] == pytest.approx(np.sort(loss)[::-1][tail_count(291, 0.99) - 1])
    assert list(res.n_obs) == [300, 291]
    assert res.scaling == ("none", "overlapping")
