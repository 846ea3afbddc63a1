import numpy as np
import pytest
import scipy.stats as st

from tailtrace.estimators import historical
from tailtrace.estimators.bands import (
    binomial_cdf,
    order_statistic_band,
    order_statistic_ranks,
    sqrt_time_band,
)


@pytest.mark.parametrize("n", [60, 250, 500, 1000])
@pytest.mark.parametrize("c", [0.9, 0.95, 0.975, 0.99])
@pytest.mark.parametrize("level", [0.8, 0.9, 0.95])
def test_band_equals_scipy_quantile_test_interval(n, c, level):
    # scipy.stats.quantile_test(...).confidence_interval: the distribution-free binomial interval
    x = np.random.default_rng(n).standard_t(4, n)
    lo, hi = order_statistic_band(x[None, :], [c], level)
    ref = st.quantile_test(x, p=c).confidence_interval(level)
    assert lo[0, 0] == pytest.approx(ref.low, nan_ok=True)
    assert hi[0, 0] == pytest.approx(ref.high, nan_ok=True)


@pytest.mark.parametrize("n", [100, 250, 500, 2500])
def test_exact_coverage_is_at_least_the_level(n):
    # coverage P(r ≤ K ≤ s − 1) with K ~ Bin(n, 1 − c) from scipy.stats.binom
    for c in (0.95, 0.975, 0.99):
        upper, lower = order_statistic_ranks(n, [c], 0.9)
        if upper[0] == 0:
            continue
        k = st.binom(n, 1 - c)
        assert k.cdf(lower[0] - 1) - k.cdf(upper[0] - 1) >= 0.9


def test_binomial_cdf_matches_scipy_for_integer_n():
    ks = np.arange(0, 40)
    assert binomial_cdf(ks, 250, 0.03) == pytest.approx(st.binom.cdf(ks, 250, 0.03), rel=1e-10)


def test_simulated_coverage():
    rng = np.random.default_rng(42)
    losses = rng.standard_normal((4000, 250))
    lo, hi = order_statistic_band(losses, [0.95], 0.9)
    true = st.norm.ppf(0.95)
    covered = np.mean((lo[:, 0] <= true) & (true <= hi[:, 0]))
    assert covered >= 0.9 - 3 * np.sqrt(0.09 / 4000)


def test_too_small_sample_has_no_upper_bound():
    # 250 observations at 99 %: P(no exceedance) = 0.99^250 = 8.1 % > 5 %, so no order statistic bounds VaR above
    lo, hi = order_statistic_band(np.random.default_rng(1).standard_normal((2, 250)), [0.99], 0.9)
    assert np.all(np.isnan(hi)) and np.all(np.isfinite(lo))


def test_band_brackets_the_historical_var(normal_sample):
    est = historical.estimate(normal_sample, [0.95, 0.99], [1, 10], options={})
    lo, hi = sqrt_time_band(-normal_sample.pnl, [0.95, 0.99], [1, 10])
    assert np.all(lo <= est.var) and np.all(est.var <= hi)
    assert hi[:, :, 1] == pytest.approx(hi[:, :, 0] * np.sqrt(10))


def test_invalid_level_is_rejected():
    with pytest.raises(ValueError, match="band level"):
        order_statistic_ranks(100, [0.99], 1.0)
