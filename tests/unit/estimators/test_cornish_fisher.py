import numpy as np
import pytest
from scipy.integrate import quad
from scipy.stats import norm

from tailtrace.errors import ModelWarning
from tailtrace.estimators import cornish_fisher as cf
from tailtrace.estimators import parametric
from tailtrace.estimators.samples import linear_sample

CONF = [0.95, 0.975, 0.99]


def test_zero_skew_and_kurtosis_is_exactly_normal():
    f_var, f_es = cf.cornish_fisher_factors(np.zeros(1), np.zeros(1), CONF)
    nvar, nes = parametric.normal_var_es(np.zeros(1), np.ones(1), CONF, [1])
    assert np.array_equal(f_var[0], nvar[0, :, 0])
    assert np.array_equal(f_es[0], nes[0, :, 0])


def test_hand_computed_expansion_with_skew_and_kurtosis():
    # Zangari (1996) formula by hand, c = 95 %, S = −0.5, K = 3, z = −1.644854:
    # z² = 2.705543, z³ = −4.450223
    # (z² − 1)S/6 = 1.705543·(−0.5)/6 = −0.142129
    # (z³ − 3z)K/24 = (−4.450223 + 4.934561)·3/24 = 0.060542
    # −(2z³ − 5z)S²/36 = −(−8.900446 + 8.224268)·0.25/36 = 0.004696
    # z_CF = −1.644854 − 0.142129 + 0.060542 + 0.004696 = −1.721744
    z = norm.ppf(0.05)
    assert cf.cornish_fisher_z(z, -0.5, 3.0) == pytest.approx(-1.721744, abs=2e-6)
    f_var, _ = cf.cornish_fisher_factors(np.array([-0.5]), np.array([3.0]), [0.95])
    assert f_var[0, 0] == pytest.approx(1.721744, abs=2e-6)


def test_textbook_skew_example():
    # Hull, Options, Futures, and Other Derivatives, VaR chapter (recalled from memory, see REFERENCES.md):
    # μ = −0.2, σ = 2.2, skew −0.4, 99 %: adjusted quantile −2.62, 1 % point ≈ −5.96 (normal −5.32).
    # The textbook keeps only the first skew term; the full expansion adds −(2z³ − 5z)S²/36 = +0.060214
    # (hand-computed: 2z³ − 5z = −25.179898 + 11.631739 = −13.548159; ·0.16/36).
    z = norm.ppf(0.01)
    full = cf.cornish_fisher_z(z, -0.4, 0.0)
    first_order = full - 0.060214
    assert first_order == pytest.approx(-2.62, abs=5e-3)
    assert -0.2 + 2.2 * first_order == pytest.approx(-5.96, abs=1e-2)
    assert -0.2 + 2.2 * z == pytest.approx(-5.32, abs=5e-3)
    assert full == pytest.approx(-2.560260, abs=2e-6)


@pytest.mark.parametrize(("skew", "kurt"), [(-0.6, 2.0), (0.3, 1.0), (-1.0, 5.0), (0.0, 0.5)])
def test_closed_form_es_equals_integrated_quantile_function(skew, kurt):
    # independent check: scipy.integrate.quad of the Cornish–Fisher quantile over the tail
    f_var, f_es = cf.cornish_fisher_factors(np.array([skew]), np.array([kurt]), CONF)
    for j, c in enumerate(CONF):
        a = norm.ppf(1 - c)
        tail = quad(lambda x: cf.cornish_fisher_z(x, skew, kurt) * norm.pdf(x), -np.inf, a)[0]
        assert f_es[0, j] == pytest.approx(-tail / (1 - c), rel=1e-9)
        assert f_es[0, j] > f_var[0, j]


def test_monotonicity_check_matches_a_fine_grid():
    rng = np.random.default_rng(7)
    skew = rng.uniform(-2.5, 2.5, 400)
    kurt = rng.uniform(-2.0, 12.0, 400)
    ours = cf.is_monotone(skew, kurt, CONF, tail_prob=1e-6)
    grid = np.linspace(norm.ppf(1e-6), norm.ppf(0.05), 4001)
    brute = np.all(np.diff(cf.cornish_fisher_z(grid[None, :], skew[:, None], kurt[:, None]), axis=1) > 0, axis=1)
    # a point within a grid step of a turning point may disagree
    assert np.mean(ours == brute) > 0.99
    assert ours.any() and (~ours).any()


def test_skew_only_expansion_is_accepted_over_the_tail():
    # with K = 0 and S ≠ 0 the map turns only far beyond the tail (near z = −9 for S = −0.4)
    assert cf.is_monotone(np.array([-0.4]), np.array([0.0]), CONF)[0]


def test_skew_kurtosis_match_scipy():
    from scipy.stats import kurtosis, skew

    rng = np.random.default_rng(2)
    x = rng.standard_t(6, (3, 500))
    s, k = cf.skew_kurtosis(x)
    assert s == pytest.approx(skew(x, axis=1, bias=True), rel=1e-10)
    assert k == pytest.approx(kurtosis(x, axis=1, fisher=True, bias=True), rel=1e-10)


def test_non_monotone_case_warns_and_falls_back_to_normal():
    # ±1 % returns: excess kurtosis −2, so z_CF bends back in the tail
    rng = np.random.default_rng(3)
    returns = np.log1p(0.01 * rng.choice([-1.0, 1.0], size=(400, 1)))
    sample = linear_sample(returns, np.array([[1e6]]))
    with pytest.warns(ModelWarning, match="not monotone"):
        est = cf.estimate(sample, CONF, [1, 10], options={})
    normal = parametric.estimate(sample, CONF, [1, 10], options={})
    assert est.diagnostics["model"] == ["normal_fallback"]
    assert est.var == pytest.approx(normal.var, rel=1e-12)
    assert est.es == pytest.approx(normal.es, rel=1e-12)


def test_estimate_uses_pnl_moments(fat_sample):
    est = cf.estimate(fat_sample, CONF, [1, 10], options={})
    s, k = cf.skew_kurtosis(fat_sample.pnl)
    f_var, f_es = cf.cornish_fisher_factors(s, k, CONF)
    sigma = fat_sample.pnl.std(axis=1, ddof=1)
    assert est.diagnostics["model"] == ["cornish_fisher", "cornish_fisher"]
    assert est.var[:, :, 0] == pytest.approx(sigma[:, None] * f_var, rel=1e-9)
    assert est.es[:, :, 1] == pytest.approx(np.sqrt(10) * sigma[:, None] * f_es, rel=1e-9)
    # this sample's P&L is skewed to gains (S ≈ +1.2, K ≈ 5.5): the short books have the fat loss tail
    assert np.all(s > 0.5) and np.all(k > 3)
    short = linear_sample(fat_sample.returns, -fat_sample.values)
    modified = cf.estimate(short, CONF, [1], options={})
    normal = parametric.estimate(short, CONF, [1], options={})
    assert np.all(modified.var[:, 2, 0] > normal.var[:, 2, 0])
    assert np.all(modified.es[:, 2, 0] > normal.es[:, 2, 0])


def test_gradients_of_skew_and_kurtosis_match_finite_differences(fat_sample):
    simple = np.expm1(fat_sample.returns)
    v = fat_sample.values[:1]
    s, k, ds, dk = cf.skew_kurtosis_gradients(simple, v)
    eps = 1e-3 * np.abs(v).max()
    for i in range(v.shape[1]):
        up, down = v.copy(), v.copy()
        up[0, i] += eps
        down[0, i] -= eps
        s_up, k_up = cf.skew_kurtosis(up @ simple.T)
        s_dn, k_dn = cf.skew_kurtosis(down @ simple.T)
        assert ds[0, i] == pytest.approx((s_up - s_dn)[0] / (2 * eps), rel=1e-5, abs=1e-14)
        assert dk[0, i] == pytest.approx((k_up - k_dn)[0] / (2 * eps), rel=1e-5, abs=1e-14)
    # degree-0 homogeneity (Euler): Σ v ∂S/∂v = 0
    assert abs(v[0] @ ds[0]) < 1e-10 * np.abs(v[0] * ds[0]).sum()
    assert abs(v[0] @ dk[0]) < 1e-10 * np.abs(v[0] * dk[0]).sum()
