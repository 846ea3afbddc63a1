"""Parametric normal VaR/ES against published values and scipy."""

import numpy as np
import pytest
from scipy import stats

from tailtrace.estimators.base import RiskSample, linear_revalue
from tailtrace.estimators.parametric import estimate, normal_var_es


def sample_with_covariance(values: np.ndarray, cov: np.ndarray, n: int = 250, seed: int = 1) -> RiskSample:
    """A RiskSample whose simple returns have exactly the covariance ``cov``."""
    rng = np.random.default_rng(seed)
    raw = rng.standard_normal((n, cov.shape[0]))
    raw -= raw.mean(axis=0)
    white = raw @ np.linalg.inv(np.linalg.cholesky(np.cov(raw, rowvar=False)).T)
    simple = white @ np.linalg.cholesky(cov).T
    log_r = np.log1p(simple)
    revalue = linear_revalue(values)
    dates = np.arange(np.datetime64("2024-01-01"), np.datetime64("2024-01-01") + n)
    return RiskSample(as_of=dates[-1], portfolios=tuple(f"P{i}" for i in range(len(values))),
                      instruments=tuple(f"I{j}" for j in range(cov.shape[0])), dates=dates, returns=log_r,
                      history=log_r, values=values, pnl=revalue(log_r, 1), revalue=revalue)


def test_z_scores_match_normal_tables():
    # Standard normal tables (also scipy.stats.norm.ppf): 1.644854 at 95%, 2.326348 at 99%.
    var, es = normal_var_es(np.zeros(1), np.ones(1), [0.95, 0.975, 0.99], [1])
    assert var[0, :, 0] == pytest.approx([1.644854, 1.959964, 2.326348], abs=1e-6)
    assert var[0, :, 0] == pytest.approx(stats.norm.ppf([0.95, 0.975, 0.99]), rel=1e-12)
    # Normal ES factor phi(z)/(1-c): closed form, 2.337803 at 97.5%, 2.665214 at 99% (REFERENCES.md, computed).
    assert es[0, 1:, 0] == pytest.approx([2.337803, 2.665214], abs=1e-6)


def test_es_matches_scipy_tail_expectation():
    # Independent check: ES = E[L | L >= VaR] by numerical integration with scipy.
    for c in (0.95, 0.975, 0.99):
        _, es = normal_var_es(np.zeros(1), np.ones(1), [c], [1])
        z = stats.norm.ppf(c)
        tail = stats.norm.expect(lambda x: x, lb=z) / (1 - c)
        assert es[0, 0, 0] == pytest.approx(tail, rel=1e-8)


def test_hull_two_asset_example():
    # Hull, Options, Futures, and Other Derivatives (VaR chapter) / Risk Management and
    # Financial Institutions (model-building chapter): positions 10m and 5m, daily vols 2% and
    # 1%, correlation 0.3. Values recalled from memory, recomputed in ../shared/REFERENCES.md:
    # daily sigma 220,227; 10-day 99% VaR with z = 2.326348: 1,620,114; stand-alone
    # 1,471,312 and 367,828; diversification benefit 219,026.
    cov = np.array([[0.02**2, 0.3 * 0.02 * 0.01], [0.3 * 0.02 * 0.01, 0.01**2]])
    values = np.array([[10e6, 5e6], [10e6, 0.0], [0.0, 5e6]])
    sample = sample_with_covariance(values, cov)
    result = estimate(sample, [0.99], [1, 10], options={})
    daily_sigma = np.array(result.diagnostics["daily_sigma"])
    assert daily_sigma[0] == pytest.approx(220_227, abs=1)
    ten_day = result.var[:, 0, 1]
    assert ten_day == pytest.approx([1_620_114, 1_471_312, 367_828], abs=2)
    assert ten_day[1] + ten_day[2] - ten_day[0] == pytest.approx(219_026, abs=3)
    assert result.scaling == ("none", "sqrt_time")


def test_include_mean_shifts_by_mean_pnl():
    cov = np.diag([0.01**2, 0.02**2])
    sample = sample_with_covariance(np.array([[1e6, 2e6]]), cov)
    shifted = RiskSample(**{**sample.__dict__, "returns": np.log1p(np.expm1(sample.returns) + 0.001)})
    base = estimate(shifted, [0.99], [1, 10], options={"include_mean": False})
    with_mean = estimate(shifted, [0.99], [1, 10], options={"include_mean": True})
    mean_pnl = 3e6 * 0.001
    assert base.var - with_mean.var == pytest.approx(np.array([[[mean_pnl, 10 * mean_pnl]]]), rel=1e-9)
