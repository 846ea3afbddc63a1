import warnings

import numpy as np
import pytest
import scipy.optimize
import scipy.stats as st

from tailtrace.errors import ConvergenceWarning
from tailtrace.estimators import parametric_t
from tailtrace.estimators.parametric import normal_var_es
from tailtrace.estimators.parametric_t import estimate, fit_t_dof, t_factors, t_loglik
from tailtrace.estimators.samples import linear_sample


@pytest.mark.parametrize(
    ("nu", "c", "var", "es"),
    [(5.0, 0.975, 1.991164, 2.727802), (5.0, 0.99, 2.606464, 3.448837), (10.0, 0.99, 2.471991, 3.008184)],
)
def test_unit_variance_t_matches_reference_values(nu, c, var, es):
    # /work/shared/REFERENCES.md, Student-t unit-variance values (computed with scipy)
    f_var, f_es = t_factors(np.array([nu]), [c])
    assert f_var[0, 0] == pytest.approx(var, abs=5e-7)
    assert f_es[0, 0] == pytest.approx(es, abs=5e-7)


@pytest.mark.parametrize("nu", [2.5, 3.0, 4.0, 7.0, 30.0, 150.0])
def test_t_quantile_and_es_against_scipy(nu):
    # scipy.stats.t: quantile by ppf, ES by integrating x f(x) over the tail
    conf = [0.9, 0.95, 0.975, 0.99, 0.999]
    f_var, f_es = t_factors(np.array([nu]), conf)
    unit = np.sqrt((nu - 2) / nu)
    for j, c in enumerate(conf):
        q = st.t.ppf(c, nu)
        tail_mean = st.t.expect(lambda x: x, args=(nu,), lb=q) / (1 - c)
        assert f_var[0, j] == pytest.approx(q * unit, rel=1e-10)
        assert f_es[0, j] == pytest.approx(tail_mean * unit, rel=1e-7)


def test_normal_es_factor_against_scipy_and_reference():
    # φ(z)/(1 − c): 2.337803 at 97.5 %, 2.665214 at 99 % (REFERENCES.md); scipy.stats.norm as the reference library
    var, es = normal_var_es(np.zeros(1), np.ones(1), [0.975, 0.99], [1])
    assert es[0, :, 0] == pytest.approx([2.337803, 2.665214], abs=5e-7)
    for j, c in enumerate([0.975, 0.99]):
        z = st.norm.ppf(c)
        assert es[0, j, 0] == pytest.approx(st.norm.pdf(z) / (1 - c), rel=1e-12)
        assert var[0, j, 0] == pytest.approx(z, rel=1e-12)
    # large ν approaches the normal factors
    f_var, f_es = t_factors(np.array([1e7]), [0.975, 0.99])
    assert f_es[0] == pytest.approx(es[0, :, 0], rel=1e-6)


def _scipy_negloglik(nu, x):
    scale = np.sqrt((nu - 2) / nu)
    return -np.sum(st.t.logpdf(x / scale, nu) - np.log(scale))


@pytest.mark.parametrize("true_nu", [3.0, 5.0, 12.0])
def test_dof_fit_matches_direct_scipy_likelihood(true_nu):
    # independent log-likelihood (scipy.stats.t.logpdf) maximised by scipy's bounded scalar optimiser
    rng = np.random.default_rng(int(true_nu * 10))
    x = rng.standard_t(true_nu, 3000)
    z = (x - x.mean()) / x.std(ddof=1)
    nu, fitted = fit_t_dof(np.square(z)[None, :])
    ref = scipy.optimize.minimize_scalar(
        _scipy_negloglik, bounds=(2.1, 200), args=(z,), method="bounded", options={"xatol": 1e-9}
    )
    assert fitted[0]
    assert nu[0] == pytest.approx(ref.x, rel=1e-5)
    assert nu[0] == pytest.approx(true_nu, rel=0.35)


def test_loglik_agrees_with_scipy_up_to_a_constant():
    rng = np.random.default_rng(3)
    z = rng.standard_t(6, 400)
    z = (z - z.mean()) / z.std(ddof=1)
    nus = np.array([2.5, 4.0, 9.0, 60.0])
    ours = t_loglik(nus, np.square(z)[None, :].repeat(4, 0)) * z.size
    theirs = np.array([-_scipy_negloglik(n, z) for n in nus])
    diffs = ours - theirs
    assert np.ptp(diffs) < 1e-8 * np.abs(theirs).max()


def test_near_normal_data_sits_at_the_upper_bound():
    rng = np.random.default_rng(11)
    z = rng.standard_normal(4000)
    nu, fitted = fit_t_dof(np.square((z - z.mean()) / z.std(ddof=1))[None, :], bounds=(2.1, 80.0))
    assert fitted[0]
    assert nu[0] > 20


def test_failed_fit_warns_and_uses_kurtosis_estimate(monkeypatch):
    rng = np.random.default_rng(5)
    x = rng.standard_t(5, 3000)
    z = (x - x.mean()) / x.std(ddof=1)

    class Failed:
        def __init__(self, x):
            self.x = np.full_like(x, np.nan)
            self.success = np.zeros_like(x, dtype=bool)

    monkeypatch.setattr(scipy.optimize.elementwise, "find_minimum", lambda f, init, args: Failed(init[1]))
    with pytest.warns(ConvergenceWarning, match="kurtosis estimate"):
        nu, fitted = fit_t_dof(np.square(z)[None, :])
    kurt = np.mean(z**4) / np.mean(z**2) ** 2 - 3
    assert not fitted[0]
    assert nu[0] == pytest.approx(np.clip(4 + 6 / kurt, 2.1, 200))


def test_bad_bounds_are_rejected():
    with pytest.raises(ValueError, match="dof bounds"):
        fit_t_dof(np.ones((1, 10)), bounds=(1.5, 10))


def test_estimate_scales_sample_sigma_and_fits_fat_tails(fat_sample):
    est = estimate(fat_sample, [0.975, 0.99], [1, 10], options={})
    sigma = np.asarray(est.diagnostics["daily_sigma"])
    assert sigma == pytest.approx(fat_sample.pnl.std(axis=1, ddof=1), rel=1e-9)
    nu = np.asarray(est.diagnostics["dof"])
    assert np.all((nu > 2.5) & (nu < 8))  # the data are t with 4 dof
    f_var, f_es = t_factors(nu, [0.975, 0.99])
    assert est.var[:, :, 0] == pytest.approx(sigma[:, None] * f_var, rel=1e-12)
    assert est.es[:, :, 1] == pytest.approx(sigma[:, None] * f_es * np.sqrt(10), rel=1e-12)
    assert est.scaling == ("none", "sqrt_time")


def test_constant_pnl_gives_zero_without_warnings():
    returns = np.zeros((100, 2))
    returns[:, 0] = np.random.default_rng(1).normal(0, 0.01, 100)
    sample = linear_sample(returns, np.array([[0.0, 1e6], [1e6, 0.0]]))
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        est = estimate(sample, [0.99], [1], options={})
    assert est.var[0, 0, 0] == 0.0 and est.es[0, 0, 0] == 0.0
    assert est.diagnostics["dof"][0] is None
    assert est.var[1, 0, 0] > 0


def test_include_mean_subtracts_the_drift(normal_sample):
    plain = estimate(normal_sample, [0.99], [1, 10], options={})
    drifted = estimate(normal_sample, [0.99], [1, 10], options={"include_mean": True})
    mu = normal_sample.pnl.mean(axis=1)
    assert drifted.var[:, 0, 1] == pytest.approx(plain.var[:, 0, 1] - 10 * mu, rel=1e-9)


def test_module_exports_are_defined():
    for name in parametric_t.__all__:
        assert hasattr(parametric_t, name)
