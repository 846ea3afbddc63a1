"""Delta-normal estimator."""

from __future__ import annotations

import json
from dataclasses import replace

import numpy as np
import pytest
from option_book_fixtures import correlated_returns, sample_from_book

from tailtrace.errors import ConfigError
from tailtrace.estimators import delta_normal
from tailtrace.estimators.base import RiskSample, linear_revalue


def _linear_sample(values: np.ndarray, returns: np.ndarray) -> RiskSample:
    t = returns.shape[0]
    return RiskSample(
        as_of=np.datetime64("2024-12-31"), portfolios=tuple(f"p{i}" for i in range(values.shape[0])),
        instruments=tuple(f"i{j}" for j in range(values.shape[1])),
        dates=np.datetime64("2024-12-31") - np.arange(t)[::-1], returns=returns, history=returns,
        values=values, pnl=values @ np.expm1(returns).T, revalue=linear_revalue(values),
    )


HULL_COV = np.array([[0.02 ** 2, 0.3 * 0.02 * 0.01], [0.3 * 0.02 * 0.01, 0.01 ** 2]])


def test_hull_two_asset_example():
    # Hull, Risk Management and Financial Institutions, model-building chapter: positions
    # 10m and 5m, daily vols 2% and 1%, correlation 0.3; with z = 2.326348 the 10-day 99%
    # VaR is 1,620,114, stand-alone 1,471,312 and 367,828 (REFERENCES.md, recomputed values).
    values = np.array([[10e6, 5e6], [10e6, 0.0], [0.0, 5e6]])
    sample = _linear_sample(values, correlated_returns(HULL_COV, 250, seed=3))
    est = delta_normal.estimate(sample, [0.99], [1, 10], options={})
    assert est.diagnostics["daily_sigma"][0] == pytest.approx(220_227, abs=1)
    np.testing.assert_allclose(est.var[:, 0, 1], [1_620_114, 1_471_312, 367_828], atol=1.5)
    assert est.var[1, 0, 1] + est.var[2, 0, 1] - est.var[0, 0, 1] == pytest.approx(219_026, abs=3)
    assert est.scaling == ("none", "sqrt_time")
    np.testing.assert_array_equal(est.n_obs, [250, 250])
    # Normal ES factor phi(z)/(1-c) = 2.665214 at 99% (REFERENCES.md, closed form).
    np.testing.assert_allclose(est.es[:, 0, 0] / est.var[:, 0, 0], 2.665214 / 2.326348, rtol=1e-6)
    json.dumps(est.diagnostics)


def test_linear_book_without_exposures_equals_explicit_exposures():
    values = np.array([[3e5, -1e5, 2e5]])
    cov = np.diag([1e-4, 4e-4, 2.25e-4])
    returns = correlated_returns(cov, 120, seed=9)
    plain = delta_normal.estimate(_linear_sample(values, returns), [0.975, 0.99], [1, 5], options={})
    n = values.shape[1]
    gam = np.zeros((1, n, n))
    gam[:, np.arange(n), np.arange(n)] = values
    explicit = replace(_linear_sample(values, returns), exposures=values, gammas=gam)
    other = delta_normal.estimate(explicit, [0.975, 0.99], [1, 5], options={})
    np.testing.assert_array_equal(plain.var, other.var)
    assert plain.diagnostics["sensitivities"] == "linear" and other.diagnostics["sensitivities"] == "sample"


def test_mean_and_theta_terms(demo_book):
    returns = correlated_returns(np.diag([1e-4, 2e-4, 1.5e-4, 4e-5]), 200, seed=2) + 0.001
    sample = sample_from_book(demo_book, returns)
    base = delta_normal.estimate(sample, [0.99], [1, 10], options={})
    drift = delta_normal.estimate(sample, [0.99], [1, 10], options={"include_mean": True})
    decay = delta_normal.estimate(sample, [0.99], [1, 10], options={"include_theta": True})
    mu_e = demo_book.exposures @ returns.mean(axis=0)
    np.testing.assert_allclose(base.var - drift.var, mu_e[:, None, None] * np.array([1, 10]), rtol=1e-10)
    np.testing.assert_allclose(base.var - decay.var, demo_book.thetas[:, None, None] * np.array([1.4, 14.0]),
                               rtol=1e-10, atol=1e-9)


def test_bad_options_and_grid(demo_book):
    sample = sample_from_book(demo_book, correlated_returns(np.eye(4) * 1e-4, 50, seed=1))
    with pytest.raises(ConfigError, match=r"unknown option\(s\) \['mean'\]"):
        delta_normal.estimate(sample, [0.99], [1], options={"mean": True})
    with pytest.raises(ConfigError, match="must be true or false"):
        delta_normal.estimate(sample, [0.99], [1], options={"include_mean": "yes"})
    with pytest.raises(ValueError, match="confidences"):
        delta_normal.estimate(sample, [99], [1], options={})
    with pytest.raises(ValueError, match="horizons"):
        delta_normal.estimate(sample, [0.99], [0], options={})
