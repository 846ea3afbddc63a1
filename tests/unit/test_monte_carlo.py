"""Monte Carlo: convergence to the analytic normal figure, honest standard errors."""

import numpy as np
import pytest

from tailtrace.estimators import monte_carlo, parametric
from tailtrace.estimators.base import RiskSample, linear_revalue


def make_sample(vol: float, n: int = 400, seed: int = 11) -> RiskSample:
    rng = np.random.default_rng(seed)
    corr = np.array([[1.0, 0.5], [0.5, 1.0]])
    r = rng.standard_normal((n, 2)) @ np.linalg.cholesky(corr).T * vol
    values = np.array([[1e6, 2e6], [1e6, -1e6]])
    revalue = linear_revalue(values)
    dates = np.arange(np.datetime64("2022-01-03"), np.datetime64("2022-01-03") + n)
    return RiskSample(as_of=dates[-1], portfolios=("A", "B"), instruments=("X", "Y"), dates=dates, returns=r,
                      history=r, values=values, pnl=revalue(r, 1), revalue=revalue)


def test_converges_to_analytic_normal_within_standard_errors():
    # Small daily vol so that the lognormal revaluation is indistinguishable from the
    # normal approximation; MC must then agree with the closed form within 4 SE.
    sample = make_sample(0.001)
    opts = {"paths": 40_000}
    mc = monte_carlo.estimate(sample, [0.975, 0.99], [1, 5], options=opts, seed=123)
    ref = parametric.estimate(sample, [0.975, 0.99], [1, 5], options={})
    assert np.all(np.abs(mc.var - ref.var) < 4 * mc.var_se)
    assert np.all(np.abs(mc.es - ref.es) < 4 * mc.es_se)
    assert mc.scaling == ("none", "simulated")


def test_standard_error_matches_spread_across_seeds():
    sample = make_sample(0.01)
    runs = [monte_carlo.estimate(sample, [0.99], [1], options={"paths": 4000}, seed=s) for s in range(30)]
    spread = np.std([r.var[:, 0, 0] for r in runs], axis=0, ddof=1)
    reported = np.mean([r.var_se[:, 0, 0] for r in runs], axis=0)
    assert np.all(reported / spread > 0.6) and np.all(reported / spread < 1.6)


def test_same_seed_same_figures():
    sample = make_sample(0.01)
    a = monte_carlo.estimate(sample, [0.99], [1, 10], options={"paths": 2000}, seed=7)
    b = monte_carlo.estimate(sample, [0.99], [1, 10], options={"paths": 2000}, seed=np.random.default_rng(7))
    assert np.array_equal(a.var, b.var) and np.array_equal(a.es, b.es)


def test_covariance_factor_handles_more_instruments_than_days():
    rng = np.random.default_rng(0)
    r = rng.normal(size=(30, 80))
    f = monte_carlo.covariance_factor(r)
    assert f.shape[0] <= 29
    assert np.allclose(f.T @ f, np.cov(r, rowvar=False), atol=1e-12)


def test_daily_steps_scale_like_sqrt_time_for_iid_normal():
    sample = make_sample(0.002)
    mc = monte_carlo.estimate(sample, [0.99], [1, 10], options={"paths": 40_000}, seed=5)
    ratio = mc.var[:, 0, 1] / mc.var[:, 0, 0]
    assert ratio == pytest.approx(np.sqrt(10), rel=0.05)
