"""Rolling forecasters: each against an independent computation, and no look-ahead."""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from scipy import integrate, optimize, stats

from tailtrace.backtest.cornish_fisher import cf_quantile, cf_tail_mean, cf_tail_monotone
from tailtrace.backtest.rolling import FORECASTERS, rolling_forecasts
from tailtrace.backtest.rolling_base import tail_count
from tailtrace.backtest.rolling_historical import age_weights, weighted_tail
from tailtrace.backtest.student_t import fit_t_dof, t_factors
from tailtrace.backtest.volatility import fit_garch11, fit_garch11_many, garch_variance_extend
from tailtrace.errors import ConfigError, ModelWarning

CONF = [0.99, 0.975]
Z99 = 2.326348  # standard normal tables (REFERENCES.md)
Z975 = 1.959964


@pytest.fixture(scope="module")
def pnl(garch_t):
    return garch_t(7, 3, 420, scale=1e4)


def _window(x, t, w):
    return x[:, t - w : t]


def test_parametric_normal_matches_window_std(pnl):
    r = FORECASTERS["parametric_normal"](pnl, CONF, window=250, days=120)
    t0 = pnl.shape[1] - 120
    for d in (0, 57, 119):
        win = _window(pnl, t0 + d, 250)
        sd = win.std(axis=1, ddof=1)
        np.testing.assert_allclose(r.var[:, 0, d], sd * Z99, rtol=1e-6)
        np.testing.assert_allclose(r.var[:, 1, d], sd * Z975, rtol=1e-6)
        # Normal ES factor phi(z)/(1 - c) = 2.665214 at 99% (REFERENCES.md, closed form).
        np.testing.assert_allclose(r.es[:, 0, d], sd * 2.665214, rtol=1e-6)
    with_mean = FORECASTERS["parametric_normal"](pnl, CONF, window=250, days=120, options={"include_mean": True})
    mu = _window(pnl, t0, 250).mean(axis=1)
    np.testing.assert_allclose(with_mean.var[:, 0, 0], r.var[:, 0, 0] - mu, rtol=1e-10)


def test_historical_kth_worst_rule(pnl):
    # Common practice, no source: 500 observations at 99%, the 5th worst loss is the VaR.
    assert tail_count(500, np.array([0.99, 0.975]))[0] == 5
    assert tail_count(250, np.array([0.975]))[0] == 6  # floor(6.25)
    assert tail_count(50, np.array([0.9]))[0] == 5  # 50 * (1 - 0.9) = 4.999999999999999
    assert tail_count(50, np.array([0.999]))[0] == 1  # at least one loss
    x = np.hstack([pnl, pnl[:, :200]])  # 620 days
    r = FORECASTERS["historical"](x, CONF, window=500, days=120)
    t0 = x.shape[1] - 120
    for d in (0, 60, 119):
        losses = np.sort(-_window(x, t0 + d, 500), axis=1)[:, ::-1]
        np.testing.assert_array_equal(r.var[:, 0, d], losses[:, 4])
        np.testing.assert_allclose(r.es[:, 0, d], losses[:, :5].mean(axis=1))
        np.testing.assert_array_equal(r.var[:, 1, d], losses[:, 11])  # k = floor(12.5) = 12
        np.testing.assert_allclose(r.es[:, 1, d], losses[:, :12].mean(axis=1))


def test_ewma_matches_a_plain_recursion(pnl):
    # sigma2_t = lambda sigma2_{t-1} + (1 - lambda) x_{t-1}^2, lambda = 0.94 (the 1996 industry default
    # 1996, REFERENCES.md), seeded with the mean square of the first window.
    w, days, lam = 100, 80, 0.94
    r = FORECASTERS["ewma_normal"](pnl, CONF, window=w, days=days)
    t0 = pnl.shape[1] - days
    for p in range(pnl.shape[0]):
        s2 = np.mean(pnl[p, t0 - w : t0] ** 2)
        path = []
        for t in range(t0 - w, t0 + days):
            if t >= t0:
                path.append(s2)
            s2 = lam * s2 + (1 - lam) * pnl[p, t] ** 2
        np.testing.assert_allclose(r.var[p, 0], np.sqrt(path) * Z99, rtol=1e-6)
        np.testing.assert_allclose(r.es[p, 1], np.sqrt(path) * 2.337803, rtol=1e-6)  # ES factor 97.5%


def test_student_t_factors_match_published_values():
    # Unit-variance t (REFERENCES.md, computed): nu=5 97.5% VaR 1.991164 ES 2.727802;
    # nu=5 99% VaR 2.606464 ES 3.448837; nu=10 99% VaR 2.471991 ES 3.008184.
    var, es = t_factors(np.array([5.0, 5.0, 10.0]), np.array([0.975, 0.99, 0.99]))
    np.testing.assert_allclose(var, [1.991164, 2.606464, 2.471991], atol=2e-6)
    np.testing.assert_allclose(es, [2.727802, 3.448837, 3.008184], atol=2e-6)


def test_t_dof_fit_matches_scipy_optimiser():
    # Independent: scipy.optimize.minimize_scalar on scipy.stats.t.logpdf with the scale
    # tied to unit variance.
    rng = np.random.default_rng(1)
    x = rng.standard_t(5, (4, 1500))
    y = (x - x.mean(axis=1, keepdims=True)) / x.std(axis=1, ddof=1, keepdims=True)
    nu = fit_t_dof(y)
    for i in range(4):
        res = optimize.minimize_scalar(
            lambda v: -stats.t.logpdf(y[i], v, scale=np.sqrt((v - 2) / v)).sum(),
            bounds=(2.5, 200),
            method="bounded",
            options={"xatol": 1e-7},
        )
        assert nu[i] == pytest.approx(res.x, rel=1e-4)
    assert np.all((nu > 3.5) & (nu < 7.5))  # true dof 5


def test_parametric_t_forecasts_use_the_fitted_dof(pnl):
    r = FORECASTERS["parametric_t"](pnl, CONF, window=250, days=60, options={"refit_every": 25})
    dof = np.array(r.diagnostics["dof"])  # (P, refits)
    assert dof.shape == (3, 3)
    t0 = pnl.shape[1] - 60
    d = 30  # second refit block
    sd = _window(pnl, t0 + d, 250).std(axis=1, ddof=1)
    f_var, f_es = t_factors(dof[:, 1], 0.99)
    np.testing.assert_allclose(r.var[:, 0, d], sd * f_var, rtol=1e-4)
    np.testing.assert_allclose(r.es[:, 0, d], sd * f_es, rtol=1e-4)
    assert np.all(dof < 30)  # fat-tailed data


def test_cornish_fisher_against_hull_example():
    # Hull, Options, Futures, and Other Derivatives, VaR chapter (memory): mu = -0.2,
    # sigma = 2.2, skewness -0.4 -> adjusted 1% quantile -2.62, 1% point -5.96 against
    # -5.32 under normality. Hull keeps the first skewness term only; our expansion adds
    # -(2z^3 - 5z) S^2 / 36, which is added back here to compare.
    z = -Z99
    s = -0.4
    full = cf_quantile(z, s, 0.0)
    first_order = full + (2 * z**3 - 5 * z) * s * s / 36
    assert first_order == pytest.approx(-2.62, abs=0.005)
    assert -0.2 + 2.2 * first_order == pytest.approx(-5.96, abs=0.01)
    assert -0.2 + 2.2 * z == pytest.approx(-5.32, abs=0.01)


@pytest.mark.parametrize(("s", "k"), [(0.0, 0.0), (-0.5, 3.0), (0.3, 1.5), (-1.0, 6.0)])
def test_cornish_fisher_tail_mean_matches_numerical_integral(s, k):
    # Independent: scipy.integrate.quad of the expansion over the tail u in (0, alpha).
    for alpha in (0.01, 0.025):
        q = stats.norm.ppf(alpha)
        val, _ = integrate.quad(lambda u: cf_quantile(stats.norm.ppf(u), s, k), 0, alpha, limit=200)
        assert cf_tail_mean(q, alpha, s, k) == pytest.approx(val / alpha, rel=1e-6)
    if s == 0 and k == 0:
        # Normal ES factor at 99% is 2.665214 (REFERENCES.md).
        assert -cf_tail_mean(stats.norm.ppf(0.01), 0.01, 0, 0) == pytest.approx(2.665214, abs=1e-6)


def test_cornish_fisher_monotone_check_against_a_grid():
    # Brute force: the derivative of the expansion on a fine grid of the left tail.
    rng = np.random.default_rng(4)
    s = rng.uniform(-2, 2, 300)
    k = rng.uniform(-2, 12, 300)
    q = stats.norm.ppf(0.01)
    grid = -np.geomspace(1e4, -q, 30001)  # ascending, far into the tail (a < 0 turns late)
    values = cf_quantile(grid[:, None], s, k)
    brute = np.all(np.diff(values, axis=0) > 0, axis=0)
    assert np.array_equal(cf_tail_monotone(q, s, k), brute)


def test_cornish_fisher_falls_back_to_normal_and_flags_it():
    # Uniform P&L: excess kurtosis -1.2 makes the expansion turn back in the far tail.
    rng = np.random.default_rng(0)
    x = rng.uniform(-1, 1, (2, 400))
    with pytest.warns(ModelWarning, match="not monotone"):
        r = FORECASTERS["cornish_fisher"](x, CONF, window=200, days=100)
    normal = FORECASTERS["parametric_normal"](x, CONF, window=200, days=100)
    assert r.fallback.all()
    np.testing.assert_allclose(r.var, normal.var, rtol=1e-12)
    np.testing.assert_allclose(r.es, normal.es, rtol=1e-12)


def test_cornish_fisher_fat_tails_raise_var(pnl):
    r = FORECASTERS["cornish_fisher"](pnl, CONF, window=250, days=60)
    normal = FORECASTERS["parametric_normal"](pnl, CONF, window=250, days=60)
    ok = ~r.fallback[:, 0]
    assert ok.mean() > 0.5
    assert np.all(r.es[:, 0][ok] > normal.es[:, 0][ok])


def test_age_weights_are_the_brw_weights():
    # Boudoukh, Richardson & Whitelaw (1998): w_i = lambda^(i-1)(1-lambda)/(1-lambda^n),
    # i = 1 the most recent (REFERENCES.md).
    w = age_weights(5, 0.9)
    expected = [0.9 ** (i - 1) * 0.1 / (1 - 0.9**5) for i in (5, 4, 3, 2, 1)]
    np.testing.assert_allclose(w, expected)
    assert w.sum() == pytest.approx(1.0)


def test_weighted_tail_against_a_loop():
    rng = np.random.default_rng(9)
    losses = rng.standard_normal((6, 120))
    w = age_weights(120, 0.97)
    alpha = np.array([0.01, 0.025, 0.1])
    var, es = weighted_tail(losses, w, alpha)
    for i in range(6):
        order = np.argsort(-losses[i])
        for j, a in enumerate(alpha):
            cum, tail = 0.0, 0.0
            for idx in order:  # accumulate from the worst loss until alpha is reached
                take = min(w[idx], a - cum)
                tail += take * losses[i, idx]
                cum += w[idx]
                if cum >= a - 1e-12:
                    break
            assert var[i, j] == losses[i, idx]
            assert es[i, j] == pytest.approx(tail / a, rel=1e-10)


def test_equal_weights_reduce_to_historical(pnl):
    # Equal weights 1/n with n alpha an integer: the weighted rule is the k-th worst loss
    # and the mean of the k worst, the historical rule (n = 200, alpha = 2.5%: k = 5).
    x = pnl[:, -300:]
    hs = FORECASTERS["historical"](x, [0.975], window=200, days=100)
    for d in (0, 50, 99):
        losses = -x[:, d : d + 200]  # the window of backtest day d (T0 = 200)
        var, es = weighted_tail(losses, np.full(200, 1 / 200), np.array([0.025]))
        np.testing.assert_array_equal(var[:, 0], hs.var[:, 0, d])
        np.testing.assert_allclose(es[:, 0], hs.es[:, 0, d], rtol=1e-12)
    aw = FORECASTERS["age_weighted_historical"](x, [0.975], window=200, days=100)
    assert not np.allclose(aw.var, hs.var)  # lambda = 0.98 does reweight


def test_garch_path_matches_arch_forecast(garch_t):
    # Independent: arch's own one-step variance forecast and a plain recursion.
    from arch import arch_model

    x = garch_t(3, 1, 900)[0] * 250.0
    fit = fit_garch11(x[:800])
    assert fit.ok
    res = arch_model(x[:800] / x[:800].std(), mean="Zero", vol="GARCH", p=1, q=1, rescale=False).fit(disp="off")
    one_step = float(res.forecast(horizon=1, reindex=False).variance.values[0, 0]) * x[:800].std() ** 2
    path = garch_variance_extend(fit, x[799], x[800:850])
    assert path[0] == pytest.approx(one_step, rel=1e-6)
    s2 = path[0]
    for j, v in enumerate(x[800:850]):
        s2 = fit.omega + fit.alpha * v * v + fit.beta * s2
        assert path[j + 1] == pytest.approx(s2, rel=1e-10)


@pytest.mark.filterwarnings("ignore::tailtrace.errors.ModelWarning")  # a fallback may occur
def test_filtered_historical_rescales_by_volatility(garch_t):
    x = garch_t(5, 2, 700, scale=100.0)
    opts = {"refit_every": 20, "fit_window": 500, "min_fit_obs": 250}
    r = FORECASTERS["filtered_historical"](x, CONF, window=250, days=60, options=opts)
    assert r.diagnostics["garch_fits"] + sum(r.diagnostics["fallback_reasons"].values()) == 2 * 3
    # Reconstruct day 25 (second block) by hand from the recorded fit.
    t0 = x.shape[1] - 60
    d, b = 25, 1
    for p in range(2):
        if r.fallback[p, 0, d]:
            continue
        sample = x[p, t0 + 20 - 500 : t0 + 20]
        # the batched fit of one sample, as the forecaster uses it, then arch's fit of it
        for fit, rel in ((fit_garch11_many(sample[:, None])[0], 1e-9), (fit_garch11(sample), 1e-4)):
            s2 = np.r_[fit.variance, garch_variance_extend(fit, x[p, t0 + 19], x[p, t0 + 20 : t0 + d])]
            sigma = np.sqrt(s2)  # columns t0 + 20 - 500 .. t0 + d
            z = x[p, t0 + d - 250 : t0 + d] / sigma[-251:-1]
            losses = np.sort(-z)[::-1] * sigma[-1]
            assert r.var[p, 0, d] == pytest.approx(losses[1], rel=rel)  # k = floor(2.5) = 2
            assert r.es[p, 1, d] == pytest.approx(losses[:6].mean(), rel=rel)
        assert r.diagnostics["garch_params"][b][p] is not None


def test_filtered_historical_falls_back_to_ewma_and_records_it(pnl):
    with pytest.warns(ModelWarning, match="EWMA volatility used"):
        r = FORECASTERS["filtered_historical"](pnl, CONF, window=100, days=40, options={"min_fit_obs": 5000})
    assert r.fallback.all()
    assert r.diagnostics["fallback_reasons"] == {"too_short": 3 * 2}
    ewma = FORECASTERS["ewma_normal"](pnl, CONF, window=100, days=40)
    sigma = ewma.var[:, 0, :] / Z99  # the same EWMA path, seeded the same way
    # Rebuild day 0 for portfolio 0: z over the window by EWMA sigma, HS, rescaled.
    t0 = pnl.shape[1] - 40
    lam = 0.94
    s2 = np.mean(pnl[0, t0 - 100 : t0] ** 2)
    path = []
    for t in range(t0 - 100, t0):
        path.append(s2)
        s2 = lam * s2 + (1 - lam) * pnl[0, t] ** 2
    z = pnl[0, t0 - 100 : t0] / np.sqrt(path)
    expected = np.sort(-z)[::-1][0] * sigma[0, 0]  # k = 1 at 99% with n = 100
    assert r.var[0, 0, 0] == pytest.approx(expected, rel=1e-6)


def test_monte_carlo_matches_parametric_normal_within_sampling_error(pnl):
    # For normal P&L the 1-day simulation converges to the closed form; the relative
    # standard error of a sample quantile is sqrt(a(1-a)/S) / (phi(z) z).
    opts = {"paths": 20_000}
    mc = FORECASTERS["monte_carlo"](pnl, CONF, window=250, days=50, options=opts, seed=42)
    normal = FORECASTERS["parametric_normal"](pnl, CONF, window=250, days=50)
    rel = mc.var / normal.var - 1
    se = np.array(mc.diagnostics["var_se_rel"])[None, :, None]
    assert np.all(np.abs(rel) < 5 * se)
    assert abs(rel.mean()) < 2 * se.max() / np.sqrt(50) + 0.002
    rel_es = mc.es / normal.es - 1
    assert np.all(np.abs(rel_es) < 0.05)
    again = FORECASTERS["monte_carlo"](pnl, CONF, window=250, days=50, options=opts, seed=42)
    other = FORECASTERS["monte_carlo"](pnl, CONF, window=250, days=50, options=opts, seed=43)
    np.testing.assert_array_equal(mc.var, again.var)
    assert not np.array_equal(mc.var, other.var)


@pytest.mark.parametrize("method", sorted(FORECASTERS))
def test_no_look_ahead(method, garch_t):
    # Perturbing the P&L of day t and later must leave every forecast for days <= t
    # unchanged, bit for bit; later forecasts must move (the data is used). The fixture
    # is a transposed (F-ordered) array and the perturbed copy C-ordered: layout must not
    # matter either.
    x = garch_t(11, 2, 330, scale=50.0)
    days, window = 60, 120
    opts = {
        "parametric_t": {"refit_every": 15},
        "filtered_historical": {"refit_every": 15, "fit_window": 200, "min_fit_obs": 150},
        "monte_carlo": {"paths": 2000},
    }.get(method)
    f = FORECASTERS[method]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ModelWarning)
        base = f(x, CONF, window=window, days=days, options=opts, seed=1)
        t0 = x.shape[1] - days
        for d in (0, 15, 23, days - 1):  # first day, a refit day, mid-block, last day
            y = x.copy()
            y[:, t0 + d :] = y[:, t0 + d :] * 3.0 + 7.0
            moved = f(y, CONF, window=window, days=days, options=opts, seed=1)
            np.testing.assert_array_equal(moved.var[..., : d + 1], base.var[..., : d + 1])
            np.testing.assert_array_equal(moved.es[..., : d + 1], base.es[..., : d + 1])
            if d + 1 < days:
                assert not np.array_equal(moved.var[..., d + 1 :], base.var[..., d + 1 :])
    if method == "filtered_historical":
        assert base.diagnostics["garch_fits"] > 0  # the GARCH branch was exercised


@pytest.mark.parametrize("method", sorted(FORECASTERS))
def test_common_signature_and_shapes(method, pnl):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ModelWarning)
        r = FORECASTERS[method](pnl, CONF, window=150, days=30, options=None, seed=0)
    assert r.method == method
    assert r.var.shape == r.es.shape == r.fallback.shape == (3, 2, 30)
    assert np.isfinite(r.var).all() and np.isfinite(r.es).all()
    assert np.all(r.var > 0) and np.all(r.es >= r.var * (1 - 1e-12))  # ES >= VaR
    assert np.all(r.var[:, 0] >= r.var[:, 1])  # 99% above 97.5%


@pytest.mark.parametrize("method", sorted(FORECASTERS))
def test_zero_pnl_portfolio_gives_zero_without_warnings(method):
    # A portfolio with no positions: P&L identically zero. numpy warnings are errors here.
    x = np.zeros((1, 200))
    with warnings.catch_warnings():
        warnings.simplefilter("error", RuntimeWarning)
        warnings.simplefilter("ignore", ModelWarning)
        r = FORECASTERS[method](x, CONF, window=100, days=20, options=None, seed=0)
    assert np.all(r.var == 0) and np.all(r.es == 0)


def test_bad_inputs_are_named():
    x = np.ones((2, 100))
    with pytest.raises(ConfigError, match="needs 350 days of P&L, only 100"):
        FORECASTERS["historical"](x, CONF, window=250, days=100)
    with pytest.raises(ConfigError, match="unknown option"):
        FORECASTERS["ewma_normal"](x, CONF, window=50, days=20, options={"lamda": 0.9})
    with pytest.raises(ConfigError, match="option 'include_mean' must be bool"):
        FORECASTERS["parametric_normal"](x, CONF, window=50, days=20, options={"include_mean": "no"})
    with pytest.raises(ConfigError, match="option 'refit_every' must be int"):
        FORECASTERS["parametric_t"](x, CONF, window=50, days=20, options={"refit_every": 2.5})
    with pytest.raises(ConfigError, match="paths must be at least 2"):
        FORECASTERS["monte_carlo"](x, CONF, window=50, days=20, options={"paths": 1})
    with pytest.raises(ConfigError, match="confidences"):
        FORECASTERS["historical"](x, [99.0], window=50, days=20)
    y = x.copy()
    y[1, 40] = np.nan
    with pytest.raises(ValueError, match="portfolio row 1, day column 40"):
        FORECASTERS["historical"](y, CONF, window=50, days=20)
    with pytest.raises(ConfigError, match="unknown backtest method"):
        rolling_forecasts(x, ["historic"], CONF, window=50, days=20)


def test_method_seeds_do_not_depend_on_order(pnl):
    a = rolling_forecasts(pnl, ["monte_carlo", "historical"], CONF, window=100, days=20, seed=5,
                          options={"monte_carlo": {"paths": 1000}})
    b = rolling_forecasts(pnl, ["historical", "monte_carlo"], CONF, window=100, days=20, seed=5,
                          options={"monte_carlo": {"paths": 1000}})
    np.testing.assert_array_equal(a["monte_carlo"].var, b["monte_carlo"].var)


def test_many_garch_fits_agree_with_arch_one_by_one(garch_t):
    # reference: arch (K. Sheppard) through fit_garch11, one sample at a time
    x = garch_t(17, 4, 600, scale=30.0).T.copy()
    x[:, 2] = 5.0  # constant
    many = fit_garch11_many(x)
    assert [f.reason for f in many] == ["ok", "ok", "constant", "ok"]
    for j in (0, 1, 3):
        direct = fit_garch11(x[:, j])
        assert many[j].alpha == pytest.approx(direct.alpha, abs=1e-3)
        assert many[j].beta == pytest.approx(direct.beta, abs=2e-3)
        np.testing.assert_allclose(many[j].variance, direct.variance, rtol=1e-3)
    assert [f.reason for f in fit_garch11_many(x[:100])] == ["too_short"] * 4
