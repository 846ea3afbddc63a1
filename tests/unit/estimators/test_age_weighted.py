import numpy as np
import pytest

from tailtrace.estimators import age_weighted, historical
from tailtrace.estimators.bands import order_statistic_band, weighted_order_statistic_band
from tailtrace.estimators.samples import linear_sample
from tailtrace.estimators.weighted_tail import effective_size, weighted_tail_weights, weighted_var_es


def test_weights_match_the_paper_and_sum_to_one():
    # Boudoukh, Richardson & Whitelaw (1998): w_i = λ^(i−1)(1−λ)/(1−λ^K), i = 1 the most recent
    for lam, n in [(0.97, 250), (0.99, 500), (0.98, 1000)]:
        w = age_weighted.age_weights(n, lam)
        paper = [lam ** (i - 1) * (1 - lam) / (1 - lam**n) for i in range(1, n + 1)]
        assert w[::-1] == pytest.approx(paper, rel=1e-12)
        assert w.sum() == pytest.approx(1.0, abs=1e-13)


def test_hand_computed_small_example():
    # λ = 0.5, n = 5: weights newest first 16, 8, 4, 2, 1 (/31)
    w = age_weighted.age_weights(5, 0.5)
    assert w * 31 == pytest.approx([1, 2, 4, 8, 16])
    losses = np.array([[5.0, 1.0, 4.0, 2.0, 3.0]])  # oldest first: the worst (5) is the oldest
    # worst first: 5 (w 1/31), 4 (4/31), 3 (16/31): tail mass 0.3 is reached at loss 3 (cum 21/31)
    var, es = weighted_var_es(losses, w, [0.7])
    assert var[0, 0] == 3.0
    # ES over mass 0.3: 5·1/31 + 4·4/31 + 3·(0.3 − 5/31)
    assert es[0, 0] == pytest.approx((5 / 31 + 16 / 31 + 3 * (0.3 - 5 / 31)) / 0.3)
    tail = weighted_tail_weights(losses, w, [0.7])
    assert tail.sum() == pytest.approx(1.0)
    assert (tail[0, 0] * losses[0]).sum() == pytest.approx(es[0, 0])


def test_decay_one_reduces_to_plain_historical(normal_sample):
    # n = 500 and 400 with c in {0.95, 0.99, 0.998}: n(1 − c) is an integer, where both rules agree
    conf = [0.95, 0.99, 0.998]
    short = linear_sample(normal_sample.returns[-400:], normal_sample.values)
    for sample in (normal_sample, short):
        aged = age_weighted.estimate(sample, conf, [1, 10], options={"decay": 1.0})
        plain = historical.estimate(sample, conf, [1, 10], options={})
        assert aged.var == pytest.approx(plain.var, rel=1e-12)
        assert aged.es == pytest.approx(plain.es, rel=1e-12)


def test_decay_towards_one_converges_in_es_while_var_may_step_one_rank(normal_sample):
    # without interpolation VaR jumps when the weights shift the boundary: near λ = 1 it is the k-th or
    # (k+1)-th worst loss; ES, with its partial weight, is continuous in λ
    conf = [0.95, 0.99]
    plain = historical.estimate(normal_sample, conf, [1], options={})
    worst = -np.sort(normal_sample.pnl, axis=1)  # losses, worst first
    gaps = []
    for lam in (1 - 1e-5, 1 - 1e-7, 1 - 1e-9):
        aged = age_weighted.estimate(normal_sample, conf, [1], options={"decay": lam})
        gaps.append(np.abs(aged.es / plain.es - 1).max())
        for j, k in enumerate([25, 5]):
            assert np.all((aged.var[:, j, 0][:, None] == worst[:, [k - 1, k]]).any(axis=1))
    assert gaps[-1] < 1e-6 and gaps[0] > gaps[-1]


def test_non_integer_tail_uses_partial_weight():
    # n = 250 at 99 %: n(1 − c) = 2.5; VaR is the 3rd worst loss, ES (L1 + L2 + 0.5 L3)/2.5,
    # whereas the spine's historical rule takes the 2nd worst and the mean of the 2 worst
    rng = np.random.default_rng(9)
    losses = rng.standard_normal((1, 250))
    worst = np.sort(losses[0])[::-1]
    var, es = weighted_var_es(losses, np.full(250, 1 / 250), [0.99])
    assert var[0, 0] == worst[2]
    assert es[0, 0] == pytest.approx((worst[0] + worst[1] + 0.5 * worst[2]) / 2.5)


def test_recent_losses_count_more(normal_sample):
    returns = normal_sample.returns.copy()
    returns[-5:] *= 4  # a recent stress
    sample = linear_sample(returns, normal_sample.values)
    aged = age_weighted.estimate(sample, [0.99], [1], options={"decay": 0.98})
    plain = historical.estimate(sample, [0.99], [1], options={})
    assert np.all(aged.var > plain.var)


def test_band_equals_order_statistic_band_for_equal_weights(normal_sample):
    losses = -normal_sample.pnl
    n = losses.shape[1]
    ours = weighted_order_statistic_band(losses, np.full(n, 1 / n), [0.95, 0.99], 0.9)
    plain = order_statistic_band(losses, [0.95, 0.99], 0.9)
    assert np.array_equal(ours[0], plain[0]) and np.array_equal(ours[1], plain[1], equal_nan=True)
    assert effective_size(np.full(n, 1 / n)) == n


def test_estimate_reports_band_and_effective_size(normal_sample):
    est = age_weighted.estimate(normal_sample, [0.95, 0.99], [1, 10], options={"decay": 0.99})
    n_eff = (1 + 0.99) / (1 - 0.99) * (1 - 0.99**500) / (1 + 0.99**500)  # 1/Σw² summed in closed form
    assert est.diagnostics["effective_obs"] == pytest.approx(n_eff)
    assert np.all(est.var_lo[:, 0] <= est.var[:, 0])
    assert np.all(est.var[:, 0] <= est.var_hi[:, 0])
    assert est.var_lo[:, :, 1] == pytest.approx(est.var_lo[:, :, 0] * np.sqrt(10), nan_ok=True)
