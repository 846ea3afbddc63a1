import numpy as np
import pytest
from scipy.stats import norm

from tailtrace.estimators import ewma
from tailtrace.estimators.samples import linear_sample


def _recursion(x, decay):
    # the RiskMetrics recursion written out day by day (RiskMetrics Technical Document, 1996;
    # Hull, Risk Management and Financial Institutions, volatility chapter), seeded as documented
    cov = x.T @ x / len(x)
    for row in x:
        cov = decay * cov + (1 - decay) * np.outer(row, row)
    return cov


@pytest.mark.parametrize("decay", [0.94, 0.97, 0.5])
def test_weighted_sum_equals_recursion(decay):
    rng = np.random.default_rng(1)
    x = rng.standard_normal((300, 4)) * 0.01
    assert ewma.ewma_covariance(x, decay) == pytest.approx(_recursion(x, decay), rel=1e-12, abs=1e-18)


def test_variance_path_equals_recursion_and_covariance():
    rng = np.random.default_rng(2)
    x = rng.standard_normal((250, 3)) * 0.02
    seed = np.mean(x**2, axis=0)
    path = ewma.ewma_variance_path(x, 0.94, seed)
    expected = [seed]
    for row in x:
        expected.append(0.94 * expected[-1] + 0.06 * row**2)
    assert path == pytest.approx(np.array(expected), rel=1e-12)
    assert path[-1] == pytest.approx(np.diag(ewma.ewma_covariance(x, 0.94)), rel=1e-12)


def test_weights_sum_to_one_and_newest_weighs_most():
    w = ewma.ewma_weights(500, 0.94)
    assert w.sum() == pytest.approx(1.0, abs=1e-14)
    assert np.all(np.diff(w) > 0)
    assert w[-1] == pytest.approx(0.06 + 0.94**500 / 500)


def test_decay_towards_one_approaches_equal_weights():
    rng = np.random.default_rng(3)
    x = rng.standard_normal((400, 3)) * 0.01
    equal = x.T @ x / len(x)
    assert ewma.ewma_covariance(x, 1.0) == pytest.approx(equal, rel=1e-12)
    gaps = [np.abs(ewma.ewma_covariance(x, lam) - equal).max() for lam in (0.99, 0.999, 0.9999, 0.99999)]
    assert np.all(np.diff(gaps) < 0)
    assert gaps[-1] < 1e-3 * np.abs(equal).max()


def test_invalid_decay_is_rejected():
    with pytest.raises(ValueError, match="decay must lie"):
        ewma.ewma_weights(10, 1.5)


def test_estimate_is_normal_on_the_ewma_variance():
    rng = np.random.default_rng(4)
    returns = rng.standard_normal((500, 2)) * np.array([0.01, 0.02])
    returns[-20:] *= 3  # a recent volatility burst
    sample = linear_sample(returns, np.array([[1e6, 0.0], [0.0, 2e6]]))
    est = ewma.estimate(sample, [0.99], [1, 10], options={})
    cov = ewma.ewma_covariance(np.expm1(returns), 0.94)
    sigma = np.sqrt([cov[0, 0] * 1e12, cov[1, 1] * 4e12])
    z = norm.ppf(0.99)
    assert est.var[:, 0, 0] == pytest.approx(sigma * z, rel=1e-12)
    assert est.es[:, 0, 1] == pytest.approx(sigma * norm.pdf(z) / 0.01 * np.sqrt(10), rel=1e-12)
    # reacts to the burst: above the equally weighted figure
    assert np.all(est.var[:, 0, 0] > np.expm1(returns).std(axis=0, ddof=1) * [1e6, 2e6] * z)
    assert est.diagnostics["decay"] == 0.94 and est.scaling == ("none", "sqrt_time")
