import numpy as np
import pytest

from tailtrace.garch_batch import fit_garch11_batch, garch11_backcast, garch11_variance

# (omega, alpha, beta) of unit-variance GARCH(1,1) series; the last two are high
# persistence and low alpha
PARAMS = [(0.05, 0.10, 0.85), (0.02, 0.08, 0.90), (0.01, 0.05, 0.94), (0.01, 0.09, 0.90), (0.10, 0.03, 0.87)]


def _simulate(seed, n_days, params, per_set=2):
    """(T, N) zero-mean GARCH(1,1) with normal innovations, ``per_set`` columns per parameter set."""
    rng = np.random.default_rng(seed)
    omega, alpha, beta = (np.repeat(np.array(v), per_set) for v in zip(*params))
    burn = 500
    e = rng.standard_normal((n_days + burn, omega.size))
    s2 = omega / (1 - alpha - beta)
    x = np.empty_like(e)
    for t in range(e.shape[0]):  # a test fixture: loop over days only
        x[t] = np.sqrt(s2) * e[t]
        s2 = omega + alpha * x[t] ** 2 + beta * s2
    return x[burn:] * 0.01  # daily-return units: the fitter must not depend on them


@pytest.fixture(scope="module")
def simulated():
    return _simulate(2024, 1500, PARAMS)


@pytest.fixture(scope="module")
def sp500():
    # open data shipped in the arch package (S&P 500 index, 1999-2018): arch.data.sp500
    import arch.data.sp500

    prices = arch.data.sp500.load()["Adj Close"].to_numpy()
    return np.diff(np.log(prices))[-2000:]


def _arch_fit(x):
    from arch import arch_model

    s = np.std(x)
    res = arch_model(x / s, mean="Zero", vol="GARCH", p=1, q=1, dist="normal", rescale=False).fit(disp="off")
    omega, alpha, beta = np.asarray(res.params)
    one_step = float(res.forecast(horizon=1, reindex=False).variance.to_numpy()[-1, 0]) * s**2
    return omega * s**2, alpha, beta, res.loglikelihood - x.size * np.log(s), one_step, res


def _check_against_arch(x):
    # reference: the arch package (K. Sheppard), a general GARCH library fitted series by series
    fit = fit_garch11_batch(x)
    assert fit.usable.all()
    for j in range(x.shape[1]):
        omega, alpha, beta, loglik, one_step, res = _arch_fit(x[:, j])
        s2 = np.std(x[:, j]) ** 2
        # the same objective: our maximum is at least as high as arch's (SLSQP's tolerance)
        assert fit.loglik[j] >= loglik - 1e-5
        assert fit.loglik[j] - loglik < 1e-3
        assert fit.omega[j] / s2 == pytest.approx(omega / s2, abs=1e-3)
        assert fit.alpha[j] == pytest.approx(alpha, abs=1e-3)
        assert fit.beta[j] == pytest.approx(beta, abs=2e-3)
        assert fit.variance_next[j] == pytest.approx(one_step, rel=1e-3)
        # arch's conditional variance path at arch's parameters equals ours at arch's parameters
        ours, _ = garch11_variance(x[:, j : j + 1], omega, alpha, beta)
        np.testing.assert_allclose(ours[:, 0], np.asarray(res.conditional_volatility) ** 2 * s2, rtol=1e-10)


def test_matches_arch_on_simulated_series(simulated):
    _check_against_arch(simulated)


def test_matches_arch_on_sp500(sp500):
    _check_against_arch(np.column_stack([sp500, sp500[-1000:].repeat(2)]))
    fit = fit_garch11_batch(sp500[:, None])
    # a daily equity index: persistent volatility (stylised fact, common practice, no source)
    assert 0.95 < fit.alpha[0] + fit.beta[0] < 1.0


def test_recovers_the_simulated_parameters(simulated):
    # loose: 1,500 days pin alpha + beta to a few hundredths (sampling error, common practice, no source)
    fit = fit_garch11_batch(simulated)
    true = np.repeat([a + b for _, a, b in PARAMS], 2)
    assert np.all(np.abs(fit.alpha + fit.beta - true) < 0.06)


def _plain_recursion(x, omega, alpha, beta):
    tau = min(75, x.size)
    w = 0.94 ** np.arange(tau)
    backcast = float(np.sum(w / w.sum() * x[:tau] ** 2))
    s2 = np.empty(x.size)
    prev_x2, prev_s2 = backcast, backcast
    loglik = 0.0
    for t in range(x.size):
        s2[t] = omega + alpha * prev_x2 + beta * prev_s2
        loglik += -0.5 * (np.log(2 * np.pi) + np.log(s2[t]) + x[t] ** 2 / s2[t])
        prev_x2, prev_s2 = x[t] ** 2, s2[t]
    return s2, loglik


def test_variance_and_loglik_equal_a_plain_recursion(simulated):
    x = simulated[:400, :3]
    omega, alpha, beta = np.array([2e-6, 1e-6, 5e-7]), np.array([0.1, 0.0, 0.05]), np.array([0.85, 0.95, 0.0])
    s2, loglik = garch11_variance(x, omega, alpha, beta)
    for j in range(3):
        path, ll = _plain_recursion(x[:, j], omega[j], alpha[j], beta[j])
        np.testing.assert_allclose(s2[:, j], path, rtol=1e-12)
        assert loglik[j] == pytest.approx(ll, rel=1e-12)
    assert garch11_backcast(x[:5])[0] == pytest.approx(_plain_recursion(x[:5, 0], 0, 1, 0)[0][0], rel=1e-12)


def test_fit_reports_the_path_of_its_parameters(simulated):
    fit = fit_garch11_batch(simulated)
    s2, loglik = garch11_variance(simulated, fit.omega, fit.alpha, fit.beta)
    np.testing.assert_allclose(fit.variance, s2, rtol=1e-12)
    np.testing.assert_allclose(fit.loglik, loglik, rtol=1e-12)
    expected = fit.omega + fit.alpha * simulated[-1] ** 2 + fit.beta * fit.variance[-1]
    np.testing.assert_allclose(fit.variance_next, expected, rtol=1e-12)
    assert np.all(fit.iterations > 0) and np.all(fit.iterations <= 2 * 30)  # two starts


def test_scale_equivariance(simulated):
    x = simulated[:, :4]
    a, b = fit_garch11_batch(x), fit_garch11_batch(x * 250.0)
    np.testing.assert_allclose(b.alpha, a.alpha, rtol=1e-8, atol=1e-10)
    np.testing.assert_allclose(b.omega, a.omega * 250.0**2, rtol=1e-6)
    np.testing.assert_allclose(b.loglik, a.loglik - x.shape[0] * np.log(250.0), rtol=1e-10)


def test_batch_equals_each_column_alone(simulated):
    # sums over days may round differently for one column than for many: optimiser tolerance, not bits
    batch = fit_garch11_batch(simulated)
    for j in range(simulated.shape[1]):
        one = fit_garch11_batch(simulated[:, j : j + 1])
        assert one.converged[0] == batch.converged[j]
        for name in ("omega", "alpha", "beta", "loglik", "variance_next"):
            np.testing.assert_allclose(getattr(one, name)[0], getattr(batch, name)[j], rtol=1e-6, atol=1e-9)


def test_same_input_same_output(simulated):
    a, b = fit_garch11_batch(simulated), fit_garch11_batch(simulated.copy())
    for name in ("omega", "alpha", "beta", "loglik", "variance", "variance_next", "converged", "iterations"):
        np.testing.assert_array_equal(getattr(a, name), getattr(b, name))


def test_degenerate_columns_are_flagged_not_fitted(simulated):
    spike = np.zeros(600)
    spike[300] = 0.05
    x = np.column_stack([np.zeros(600), np.full(600, 0.01), spike, simulated[:600, 0]])
    fit = fit_garch11_batch(x)
    assert not fit.usable[:2].any() and np.isnan(fit.omega[:2]).all()  # no variation: nothing to fit
    assert not fit.usable[2]  # one shock in silence: no interior maximum of arch's objective
    assert fit.usable[3]
    alone = fit_garch11_batch(x[:, 3:])
    assert alone.alpha[0] == pytest.approx(fit.alpha[3], rel=1e-6)


@pytest.mark.parametrize("n_days", [0, 1, 2, 5])
def test_very_short_samples_do_not_break(n_days, simulated):
    fit = fit_garch11_batch(simulated[:n_days, :2])
    assert fit.variance.shape == (n_days, 2) and fit.omega.shape == (2,)
    if n_days < 2:
        assert not fit.usable.any()


def test_rejects_a_vector():
    with pytest.raises(ValueError, match="needs a \\(T, N\\) array"):
        fit_garch11_batch(np.ones(10))
