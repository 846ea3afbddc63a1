import warnings

import numpy as np
import pytest

from tailtrace.errors import ConvergenceWarning
from tailtrace.estimators import filtered_historical, garch
from tailtrace.estimators.samples import linear_sample
from tailtrace.estimators.tail import empirical_var_es


@pytest.fixture(scope="module")
def sp500_log_returns():
    # open data shipped in the arch package (S&P 500, 1999–2018): arch.data.sp500
    import arch.data.sp500

    prices = arch.data.sp500.load()["Adj Close"].to_numpy()
    return np.diff(np.log(prices))


@pytest.mark.parametrize("mean", ["zero", "constant"])
def test_garch_matches_a_direct_arch_fit(sp500_log_returns, mean):
    from arch import arch_model

    x = sp500_log_returns[-2500:]
    fit = garch.fit_volatility(x, mean=mean)
    spec = "Zero" if mean == "zero" else "Constant"
    direct = arch_model(100 * x, mean=spec, vol="GARCH", p=1, q=1, dist="normal").fit(disp="off")
    assert fit.model == "garch" and fit.reason is None
    p = direct.params
    assert fit.params["omega"] == pytest.approx(p["omega"], rel=1e-4)
    assert fit.params["alpha"] == pytest.approx(p["alpha[1]"], rel=1e-4)
    assert fit.params["beta"] == pytest.approx(p["beta[1]"], rel=1e-4)
    assert fit.sigma == pytest.approx(direct.conditional_volatility / 100, rel=1e-4)
    # our one-step forecast against arch's own forecast
    forecast = direct.forecast(horizon=1, reindex=False).variance.to_numpy()[-1, 0]
    assert fit.sigma_next == pytest.approx(np.sqrt(forecast) / 100, rel=1e-4)
    # a daily equity index: persistent volatility (stylised fact, common practice, no source)
    assert 0.9 < fit.params["persistence"] < 1.0


def test_short_sample_uses_ewma(sp500_log_returns):
    x = sp500_log_returns[:120]
    fit = garch.fit_volatility(x, min_obs=250, fallback_decay=0.94)
    assert fit.model == "ewma" and fit.reason == "short_sample"
    var = [np.mean(x**2)]
    for r in x:
        var.append(0.94 * var[-1] + 0.06 * r**2)
    assert fit.sigma == pytest.approx(np.sqrt(var[:-1]), rel=1e-12)
    assert fit.sigma_next == pytest.approx(np.sqrt(var[-1]), rel=1e-12)


def test_constant_series_is_left_alone():
    fit = garch.fit_volatility(np.zeros(300))
    assert fit.model == "constant" and fit.sigma_next == 0.0


def _sample(history, values, window=500):
    return linear_sample(history[-window:], values, history=history)


@pytest.fixture
def two_regime_sample():
    rng = np.random.default_rng(12)
    vol = np.r_[np.full(700, 0.008), np.full(100, 0.025)]  # calm, then a stressed recent period
    x = rng.standard_normal((800, 2)) * vol[:, None]
    x[:, 1] *= 0.5
    return _sample(x, np.array([[1e6, 1e6], [2e6, 0.0]]))


def test_filtered_returns_follow_hull_white(two_regime_sample):
    rescaled, fits = filtered_historical.filtered_returns(two_regime_sample, {})
    for i, fit in enumerate(fits):
        expected = two_regime_sample.returns[:, i] * fit.sigma_next / fit.sigma[-500:]
        assert rescaled[:, i] == pytest.approx(expected, rel=1e-12)
    # today's volatility is the stressed one: the filtered sample is wider than the raw window
    assert np.all(rescaled.std(axis=0) > two_regime_sample.returns.std(axis=0))


def test_estimate_is_historical_on_filtered_returns(two_regime_sample):
    est = filtered_historical.estimate(two_regime_sample, [0.95, 0.99], [1, 10], options={})
    rescaled, _ = filtered_historical.filtered_returns(two_regime_sample, {})
    var, es = empirical_var_es(-two_regime_sample.revalue(rescaled, 1), [0.95, 0.99])
    assert est.var[:, :, 0] == pytest.approx(var, rel=1e-12)
    assert est.es[:, :, 1] == pytest.approx(es * np.sqrt(10), rel=1e-12)
    assert np.all(est.var_lo <= est.var) and np.all(est.var <= est.var_hi)
    assert {v["model"] for v in est.instrument_notes.values()} == {"garch"}


def _batch_never_converges(monkeypatch):
    from tailtrace.garch_batch import fit_garch11_batch

    monkeypatch.setattr(garch, "fit_garch11_batch", lambda x: fit_garch11_batch(x, max_iter=0))


def test_series_the_batch_cannot_fit_go_to_arch(two_regime_sample, monkeypatch):
    _batch_never_converges(monkeypatch)
    rescaled, fits = filtered_historical.filtered_returns(two_regime_sample, {})
    for i, fit in enumerate(fits):
        direct = garch.fit_garch(two_regime_sample.history[:, i])
        assert fit.model == "garch" and fit.reason is None
        assert fit.params == direct.params and fit.sigma_next == direct.sigma_next


def test_failed_fit_falls_back_with_a_warning(two_regime_sample, monkeypatch):
    def broken(x, mean="zero"):
        raise RuntimeError("optimiser did not converge (flag 9)")

    _batch_never_converges(monkeypatch)
    monkeypatch.setattr(garch, "fit_garch", broken)
    with pytest.warns(ConvergenceWarning, match="EWMA volatility used"):
        est = filtered_historical.estimate(two_regime_sample, [0.99], [1], options={})
    notes = est.instrument_notes["I1"]
    assert notes["model"] == "ewma" and notes["reason"].startswith("fit_failed") and notes["decay"] == 0.94


def test_short_history_needs_no_warning(two_regime_sample):
    sample = _sample(two_regime_sample.history[-200:], two_regime_sample.values, window=200)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        est = filtered_historical.estimate(sample, [0.99], [1], options={"min_obs": 250})
    assert est.instrument_notes["I2"]["reason"] == "short_sample"


def test_history_must_end_with_the_window(two_regime_sample):
    import dataclasses

    broken = dataclasses.replace(two_regime_sample, history=two_regime_sample.history[:-1])
    with pytest.raises(ValueError, match="history to end with the window"):
        filtered_historical.estimate(broken, [0.99], [1], options={})


def test_late_listed_instrument_is_fitted_on_its_own_history(two_regime_sample):
    history = two_regime_sample.history.copy()
    history[:200, 1] = np.nan  # listed 200 days after the first instrument
    sample = _sample(history, two_regime_sample.values)
    est = filtered_historical.estimate(sample, [0.99], [1], options={})
    fit = garch.fit_volatility(history[200:, 1])
    assert est.instrument_notes["I2"]["sigma_next"] == pytest.approx(fit.sigma_next, rel=1e-12)
    history[-3, 0] = np.nan
    with pytest.raises(ValueError, match="instrument I1: history has missing returns inside the estimation window"):
        filtered_historical.filtered_returns(_sample(history, two_regime_sample.values), {})


def test_bad_mean_option_is_rejected(two_regime_sample):
    with pytest.raises(ValueError, match="GARCH mean must be"):
        filtered_historical.estimate(two_regime_sample, [0.99], [1], options={"garch_mean": "ar1"})


def test_many_columns_at_once_equal_one_at_a_time(sp500_log_returns):
    x = sp500_log_returns[-600:]
    spike = np.zeros(600)
    spike[300] = 0.05
    cols = np.column_stack([x, np.zeros(600), spike, x[::-1] * 3.0])
    many = garch.fit_volatility_many(cols)
    assert [f.model for f in many] == ["garch", "constant", many[2].model, "garch"]
    for j, fit in enumerate(many):
        one = garch.fit_volatility(cols[:, j])
        assert (fit.model, fit.reason) == (one.model, one.reason)
        assert fit.sigma_next == pytest.approx(one.sigma_next, rel=1e-6)
    # the batch gives up on the single shock: that column is exactly the per-series (arch / EWMA) result
    spike_alone = garch._fit_one(spike, "zero", 250, 0.94)
    assert many[2].sigma_next == spike_alone.sigma_next and many[2].params == spike_alone.params
    short = garch.fit_volatility_many(cols[:100], min_obs=250)
    assert [f.reason for f in short] == ["short_sample", None, None, "short_sample"]  # the shock is later


@pytest.mark.parametrize("unit", [1e-4, 1.0, 0.05, 30.0])
def test_reported_scale_and_loglik_are_those_of_an_arch_fit(sp500_log_returns, unit):
    # reference: arch's own rescaling (arch_model(..., rescale=True)) and log-likelihood
    x = sp500_log_returns[-1500:] * unit
    fit = garch.fit_volatility(x)
    direct = garch.fit_garch(x)
    assert fit.params["scale"] == direct.params["scale"]
    assert fit.params["loglik"] == pytest.approx(direct.params["loglik"], abs=1e-4)
    assert fit.params["omega"] == pytest.approx(direct.params["omega"], rel=1e-3)


def _integrated_garch_series(seed: int, n: int = 1000) -> np.ndarray:
    # simulated with alpha + beta = 1 exactly: the likelihood often peaks on the persistence edge
    rng = np.random.default_rng(seed)
    x, s2 = np.empty(n), 1e-4
    for t in range(n):
        x[t] = np.sqrt(s2) * rng.standard_normal()
        s2 = 1e-7 + 0.1 * x[t] ** 2 + 0.9 * s2
    return x


def test_a_maximum_on_the_persistence_edge_is_kept_and_agrees_with_arch(monkeypatch):
    from tailtrace.garch_batch import fit_garch11_batch

    x = np.column_stack([_integrated_garch_series(s) for s in (0, 1, 9)])
    batch = fit_garch11_batch(x)
    assert batch.on_edge.all() and batch.edge_maximum.all() and not batch.converged.any()
    direct = [garch.fit_garch(x[:, j]) for j in range(3)]  # reference: arch, one series at a time
    monkeypatch.setattr(garch, "fit_garch", lambda *a, **k: pytest.fail("arch should not be needed"))
    fits = garch.fit_volatility_many(x)
    for fit, ref in zip(fits, direct):
        # arch ends on the same edge (alpha + beta = 1 to ~1e-9); its forecast agrees to ~2e-5 here
        assert ref.params["persistence"] == pytest.approx(1.0, abs=1e-6)
        assert fit.model == "garch" and fit.params["persistence"] == pytest.approx(1.0 - 1e-6, abs=1e-12)
        assert fit.sigma_next == pytest.approx(ref.sigma_next, rel=1e-4)


def test_per_instrument_fits_are_notes_not_part_of_every_figure_row(two_regime_sample):
    import json

    from tailtrace.figures import estimate_table, instrument_notes_table

    est = filtered_historical.estimate(two_regime_sample, [0.99], [1], options={})
    n = len(two_regime_sample.instruments)
    assert est.diagnostics["volatility_models"] == {"garch": n} and est.diagnostics["volatility_fallbacks"] == {}
    day = np.datetime64("2024-06-28")
    notes = instrument_notes_table(est, as_of=day, method="filtered_historical")
    assert notes.num_rows == n and notes.column("instrument").to_pylist() == list(two_regime_sample.instruments)
    assert notes.column("model").to_pylist() == ["garch"] * n and notes.column("reason").null_count == n
    first = json.loads(notes.column("notes")[0].as_py())
    assert first == pytest.approx(est.instrument_notes[two_regime_sample.instruments[0]])
    rows = estimate_table(est, as_of=day, portfolios=two_regime_sample.portfolios, method="filtered_historical",
                          confidences=[0.99], horizons=[1], currency="EUR")
    assert "alpha" not in rows.column("diagnostics")[0].as_py()
