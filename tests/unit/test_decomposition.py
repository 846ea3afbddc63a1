import dataclasses

import numpy as np
import pytest

from tailtrace.decomposition import ANALYTIC_METHODS, COLUMNS, KERNEL_METHODS, risk_contributions
from tailtrace.estimators.registry import get_estimator
from tailtrace.estimators.samples import linear_sample

ALL_METHODS = sorted(set(ANALYTIC_METHODS) | set(KERNEL_METHODS))
OPTIONS = {"monte_carlo": {"paths": 4000}, "monte_carlo_t": {"paths": 4000}}


def exact_covariance_sample(cov, values, n=500, seed=1, dof=None):
    """Simple returns whose sample covariance (ddof 1) is exactly ``cov``."""
    rng = np.random.default_rng(seed)
    x = rng.standard_normal((n, len(cov)))
    if dof is not None:
        x *= np.sqrt((dof - 2) / rng.chisquare(dof, size=(n, 1)))
    x -= x.mean(axis=0)
    x = x @ np.linalg.inv(np.linalg.cholesky(np.cov(x, rowvar=False))).T @ np.linalg.cholesky(cov).T
    return linear_sample(np.log1p(x), np.atleast_2d(values))


@pytest.fixture
def hull_sample():
    # Hull, Risk Management and Financial Institutions, model-building chapter (REFERENCES.md):
    # 10m and 5m, daily vols 2 % and 1 %, correlation 0.3
    cov = np.array([[0.02**2, 0.3 * 0.02 * 0.01], [0.3 * 0.02 * 0.01, 0.01**2]])
    return exact_covariance_sample(cov, [10e6, 5e6])


@pytest.fixture
def fat_book():
    cov = np.array([[4.0, 1.2, 0.6, 0.0], [1.2, 1.0, 0.3, 0.0], [0.6, 0.3, 2.25, 0.0], [0.0, 0.0, 0.0, 1.0]]) * 1e-4
    values = [[1e7, 5e6, -3e6, 0.0], [2e6, 2e6, 2e6, 1e6]]
    return exact_covariance_sample(cov, values, n=600, seed=7, dof=4.0)


def test_hull_two_asset_example(hull_sample):
    # REFERENCES.md (textbook values, recalled from memory), z = 2.326348: 10-day 99 % VaR 1,620,114;
    # stand-alone 1,471,312 and 367,828; diversification benefit 219,026
    res = risk_contributions(hull_sample, "parametric_normal", [0.99], [10], options={})
    assert res.var[0, 0, 0] == pytest.approx(1_620_114, abs=1.0)
    assert res.standalone_var[0, 0, 0] == pytest.approx([1_471_312, 367_828], abs=1.0)
    assert res.diversification_benefit[0, 0, 0] == pytest.approx(219_026, abs=1.5)
    # incremental VaR: the book minus the other position alone
    assert res.incremental_var[0, 0, 0] == pytest.approx([1_620_114 - 367_828, 1_620_114 - 1_471_312], abs=2.0)
    # Euler components, hand-computed from the textbook inputs (not printed in the textbook):
    # Σv = (4300, 1100), σ = 220,227.16, z√10 = 7.356540; v_i(Σv)_i/σ · z√10 = 1,436,389 and 183,724
    assert res.component_var[0, 0, 0] == pytest.approx([1_436_389, 183_724], abs=2.0)
    # the rounded z = 2.33 variant: 1,622,657, stand-alone 1,473,621 and 368,405, benefit 219,369
    ratio = 2.33 / 2.326348
    assert res.var[0, 0, 0] * ratio == pytest.approx(1_622_657, abs=2.0)
    assert res.diversification_benefit[0, 0, 0] * ratio == pytest.approx(219_369, abs=2.0)


@pytest.mark.parametrize("method", sorted(ANALYTIC_METHODS))
@pytest.mark.parametrize("include_mean", [False, True])
def test_euler_components_sum_to_the_parametric_total(fat_book, method, include_mean):
    res = risk_contributions(fat_book, method, [0.95, 0.99], [1, 10], options={"include_mean": include_mean})
    assert res.component_var.sum(axis=-1) == pytest.approx(res.var, rel=1e-9)
    assert res.component_es.sum(axis=-1) == pytest.approx(res.es, rel=1e-9)
    assert np.abs(res.allocation_gap).max() < 1e-12
    assert res.allocation == "analytic"


@pytest.mark.parametrize("method", sorted(ANALYTIC_METHODS))
def test_marginal_var_is_the_derivative_of_the_estimator(fat_book, method):
    # central differences of the full estimator (ν, S, K refitted on each bumped book)
    conf, horizons = [0.975, 0.99], [1, 10]
    res = risk_contributions(fat_book, method, conf, horizons, options={})
    estimator = get_estimator(method)
    eps = 1e3
    for i in range(fat_book.values.shape[1]):
        bump = np.zeros_like(fat_book.values)
        bump[:, i] = eps
        up = estimator(linear_sample(fat_book.returns, fat_book.values + bump), conf, horizons, options={})
        down = estimator(linear_sample(fat_book.returns, fat_book.values - bump), conf, horizons, options={})
        numeric_var = (up.var - down.var) / (2 * eps)
        numeric_es = (up.es - down.es) / (2 * eps)
        # tolerance relative to the marginals' size: a refitted ν carries optimiser noise of ~1e-8
        assert np.abs(res.marginal_var[..., i] - numeric_var).max() < 1e-4 * np.abs(res.marginal_var).max()
        assert np.abs(res.marginal_es[..., i] - numeric_es).max() < 1e-4 * np.abs(res.marginal_es).max()


@pytest.mark.parametrize("method", ALL_METHODS)
def test_incremental_var_of_a_zero_position_is_zero(fat_book, method):
    res = risk_contributions(fat_book, method, [0.99], [1, 10], options=OPTIONS.get(method, {}), seed=3)
    # portfolio 0 holds nothing in the 4th instrument
    assert np.abs(res.incremental_var[0, ..., 3]).max() <= 1e-9 * res.var[0].max()
    assert np.abs(res.incremental_es[0, ..., 3]).max() <= 1e-9 * res.es[0].max()
    assert np.all(res.standalone_var[0, ..., 3] == 0.0)
    assert np.all(res.component_var[0, ..., 3] == 0.0)


@pytest.mark.parametrize("method", ALL_METHODS)
def test_portfolio_figures_equal_the_estimator(fat_book, method):
    opts = OPTIONS.get(method, {})
    res = risk_contributions(fat_book, method, [0.95, 0.99], [1, 10], options=opts, seed=11)
    est = get_estimator(method)(fat_book, [0.95, 0.99], [1, 10], options=opts, seed=11)
    assert res.var == pytest.approx(est.var, rel=1e-12)
    assert res.es == pytest.approx(est.es, rel=1e-12)
    assert res.diversification_benefit == pytest.approx(res.standalone_var.sum(axis=-1) - res.var)


@pytest.mark.parametrize("method", sorted(KERNEL_METHODS))
def test_kernel_components_sum_to_var_and_tail_components_to_es(fat_book, method):
    opts = OPTIONS.get(method, {})
    res = risk_contributions(fat_book, method, [0.95, 0.99], [1, 10], options=opts, seed=5)
    raw = risk_contributions(fat_book, method, [0.95, 0.99], [1, 10], options=opts, seed=5, rescale=False)
    assert res.allocation == "kernel"
    assert res.component_var.sum(axis=-1) == pytest.approx(res.var, rel=1e-12)
    assert raw.component_var.sum(axis=-1) == pytest.approx(raw.var * (1 + raw.allocation_gap), rel=1e-12)
    # raw gap ≈ −(b/σ_L)²: 8 % for 600 equal weights, 18 % for λ = 0.98 (n_eff ≈ 100); see the normal test
    assert np.abs(raw.allocation_gap).max() < 0.25
    # ES is the mean of the tail scenarios: its Euler split is exact
    assert res.component_es.sum(axis=-1) == pytest.approx(res.es, rel=1e-12)


def test_kernel_estimate_agrees_with_the_exact_normal_allocation():
    # normal market, Monte Carlo with the sample covariance: rescaled kernel components against the
    # analytic Euler components of the normal method; measured errors are 1-2.5 % of VaR with 50,000
    # paths (seeds 0-4), the test allows 3.5 %
    cov = np.array([[4.0, 1.2, 0.6], [1.2, 1.0, 0.3], [0.6, 0.3, 2.25]]) * 1e-4
    sample = exact_covariance_sample(cov, [[1e7, 5e6, -3e6], [2e6, 2e6, 2e6]], n=250, seed=2)
    kernel = risk_contributions(sample, "monte_carlo", [0.95, 0.99], [1], options={"paths": 50_000}, seed=0)
    exact = risk_contributions(sample, "parametric_normal", [0.95, 0.99], [1], options={})
    assert np.abs(kernel.component_var - exact.component_var).max(axis=-1) == pytest.approx(
        np.zeros_like(exact.var), abs=0.035 * exact.var.max()
    )
    # a Gaussian kernel of width b around VaR = q on normal losses averages to q(1 − (b/σ)²):
    # b/σ = 1.06 · 50,000^(−1/5) = 0.1215, so the raw gap should be −1.48 %
    assert kernel.allocation_gap == pytest.approx(np.full_like(kernel.var, -(1.06 * 50_000**-0.2) ** 2), abs=0.005)


def test_age_weighted_tail_components_use_the_partial_weight(fat_book):
    res = risk_contributions(fat_book, "age_weighted_historical", [0.99], [1], options={"decay": 0.97})
    assert res.component_es.sum(axis=-1) == pytest.approx(res.es, rel=1e-12)


def test_table_has_one_row_per_position(fat_book):
    import pyarrow as pa

    res = risk_contributions(fat_book, "historical", [0.95, 0.99], [1, 10], options={})
    table = res.to_table()
    assert tuple(table.column_names) == COLUMNS
    assert table.num_rows == 2 * 2 * (3 + 4)  # P1 does not hold I4: no row for it
    assert 0.0 not in table.column("position_value").to_pylist()
    assert len(COLUMNS) == 20
    assert table.schema.field("as_of").type == pa.date32()
    row = table.slice(4, 1).to_pylist()[0]
    assert row["portfolio"] == "P1" and row["instrument"] == "I2" and row["horizon_days"] == 10
    assert row["component_var"] == pytest.approx(res.component_var[0, 0, 1, 1])


def test_non_linear_book_is_rejected(fat_book):
    bent = dataclasses.replace(fat_book, pnl=fat_book.pnl + 0.01 * fat_book.pnl**2)
    with pytest.raises(ValueError, match="needs a linear book"):
        risk_contributions(bent, "historical", [0.99], [1], options={})


def test_unknown_method_is_rejected(fat_book):
    with pytest.raises(KeyError, match="no decomposition for method 'nonsense'"):
        risk_contributions(fat_book, "nonsense", [0.99], [1], options={})
