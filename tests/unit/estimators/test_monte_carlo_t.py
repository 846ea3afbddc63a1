import numpy as np
import pytest

from tailtrace.estimators import monte_carlo
from tailtrace.estimators.parametric_t import t_factors
from tailtrace.estimators.samples import linear_sample


@pytest.fixture
def t_sample(make_returns):
    # a genuine multivariate t (normal variance mixture, one χ² per day) with ν = 5
    rng = np.random.default_rng(77)
    returns = make_returns(rng, 3000, np.array([0.01, 0.015, 0.02]), 0.5, dof=5.0)
    return linear_sample(returns, np.array([[1e6, 1e6, 1e6], [1e6, -1e6, 0.0]]))


def test_normal_is_the_default_and_unchanged(normal_sample):
    base = monte_carlo.estimate(normal_sample, [0.99], [1, 10], options={"paths": 2000}, seed=4)
    options = {"paths": 2000, "distribution": "normal"}
    explicit = monte_carlo.estimate(normal_sample, [0.99], [1, 10], options=options, seed=4)
    assert np.array_equal(base.var, explicit.var) and np.array_equal(base.es_se, explicit.es_se)
    assert base.diagnostics["distribution"] == "normal" and "dof" not in base.diagnostics


def test_normal_paths_are_plain_gaussian_steps(normal_sample):
    factor = monte_carlo.covariance_factor(normal_sample.returns)
    drift = np.zeros(factor.shape[1])
    paths = monte_carlo.simulate_log_paths(drift, factor, [1, 3], 50, np.random.default_rng(1))
    rng = np.random.default_rng(1)
    steps = [rng.standard_normal((50, factor.shape[0])) @ factor for _ in range(3)]
    assert paths[1] == pytest.approx(steps[0]) and paths[3] == pytest.approx(sum(steps))


def test_dof_fitted_on_multivariate_t(t_sample):
    est = monte_carlo.estimate(t_sample, [0.99], [1], options={"paths": 1000, "distribution": "t"}, seed=1)
    assert est.diagnostics["dof_fit"] == "ml"
    assert est.diagnostics["dof"] == pytest.approx(5.0, abs=1.0)


def test_simulated_t_steps_keep_the_covariance_and_have_fat_tails(t_sample):
    shocks, info = monte_carlo.simulated_shocks(t_sample, [1], {"paths": 200_000, "distribution": "t", "dof": 6.0}, 3)
    x = shocks[1]
    cov = np.cov(t_sample.returns, rowvar=False)
    assert np.cov(x, rowvar=False) == pytest.approx(cov, rel=0.05)
    z = (x - x.mean(axis=0)) / x.std(axis=0)
    # excess kurtosis of a t with ν = 6 is 6/(ν − 4) = 3 (McNeil, Frey & Embrechts 2005, section 3.2)
    assert np.mean(z**4, axis=0) - 3 == pytest.approx(np.full(3, 3.0), abs=0.8)
    assert info["dof_fit"] == "fixed"


def test_one_day_t_var_agrees_with_the_closed_form(t_sample):
    # single-instrument book, 1 day: the simulated VaR and ES should match σ·q̃_ν within sampling error
    sample = linear_sample(t_sample.returns, np.array([[1e6, 0.0, 0.0]]))
    options = {"paths": 100_000, "distribution": "t", "dof": 5.0}
    est = monte_carlo.estimate(sample, [0.975, 0.99], [1], options=options, seed=9)
    sigma = 1e6 * np.exp(t_sample.returns[:, 0]).std(ddof=1)  # about the simple-return st. dev.
    f_var, f_es = t_factors(np.array([5.0]), [0.975, 0.99])
    assert est.var[0, :, 0] == pytest.approx(sigma * f_var[0], rel=0.03)
    assert est.es[0, :, 0] == pytest.approx(sigma * f_es[0], rel=0.04)
    assert np.all(np.abs(est.var[0, :, 0] - sigma * f_var[0]) < 4 * est.var_se[0, :, 0] + 0.01 * sigma)


def test_same_seed_same_figures_and_registry_variant(t_sample):
    from tailtrace.estimators.registry import get_estimator

    options = {"paths": 3000, "distribution": "t"}
    a = monte_carlo.estimate(t_sample, [0.99], [1, 5], options=options, seed=np.random.default_rng(5))
    b = get_estimator("monte_carlo_t")(t_sample, [0.99], [1, 5], options={"paths": 3000}, seed=np.random.default_rng(5))
    assert np.array_equal(a.var, b.var) and np.array_equal(a.es, b.es)
    assert a.scaling == ("none", "simulated") and a.var_se is not None


def test_bad_options_are_rejected(t_sample):
    with pytest.raises(ValueError, match="distribution must be one of"):
        monte_carlo.estimate(t_sample, [0.99], [1], options={"distribution": "cauchy"}, seed=1)
    with pytest.raises(ValueError, match="dof must exceed 2"):
        monte_carlo.estimate(t_sample, [0.99], [1], options={"distribution": "t", "dof": 2.0}, seed=1)


def test_factor_sign_does_not_depend_on_a_zero_column(normal_sample):
    base = monte_carlo.covariance_factor(normal_sample.returns)
    padded = np.insert(normal_sample.returns, 1, 0.0, axis=1)
    assert np.delete(monte_carlo.covariance_factor(padded), 1, axis=1) == pytest.approx(base, rel=1e-9, abs=1e-15)
