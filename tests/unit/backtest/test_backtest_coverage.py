"""Kupiec and Christoffersen tests against published values and scipy.stats."""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from scipy import stats

from tailtrace.backtest.coverage import (
    coverage_tests,
    exceptions,
    independence_lr,
    kupiec_pof,
    transition_counts,
)

CHI2_1_5PCT = 3.841459  # chi-squared 1 dof, 95% point (REFERENCES.md; scipy.stats.chi2.ppf)


def test_exception_is_a_loss_strictly_beyond_var():
    pnl = np.array([-10.0, -10.0001, 5.0, -9.0])
    assert exceptions(pnl, 10.0).tolist() == [False, True, False, False]


@pytest.mark.parametrize(("n", "expected"), [(5, 1.9568), (10, 12.9555), (0, 5.0252)])
def test_kupiec_point_values(n, expected):
    # Point values T = 250, p = 1% (REFERENCES.md, computed from Kupiec 1995's formula).
    lr, _ = kupiec_pof(n, 250, 0.99)
    assert lr == pytest.approx(expected, abs=5e-5)


def test_kupiec_matches_independent_binomial_likelihood_and_chi2():
    # Independent computation: LR = 2 [log binom.pmf(N; T, N/T) - log binom.pmf(N; T, p)]
    # (the binomial coefficients cancel), p-value from scipy.stats.chi2.
    t, p = 250, 0.01
    n = np.arange(0, t + 1)
    lr, pval = kupiec_pof(n, t, 1 - p)
    ref = 2 * (stats.binom.logpmf(n, t, n / t) - stats.binom.logpmf(n, t, p))
    np.testing.assert_allclose(lr, ref, rtol=1e-10, atol=1e-10)
    np.testing.assert_allclose(pval, stats.chi2.sf(ref, 1), rtol=1e-9, atol=1e-300)
    assert np.isfinite(lr).all() and lr[-1] > 0  # N = T stays finite


# Non-rejection regions at 5% tabulated in Jorion, *Value at Risk* (backtesting chapter;
# recalled from memory, the regions recomputed in REFERENCES.md).
JORION_REGIONS = {
    (0.01, 255): (0, 6),  # tabulated as "N < 7"
    (0.01, 510): (2, 10),
    (0.01, 1000): (5, 16),
    (0.025, 255): (3, 11),
    (0.025, 510): (7, 20),
    (0.025, 1000): (16, 35),
    (0.05, 255): (7, 20),
    (0.05, 510): (17, 35),
    (0.05, 1000): (38, 64),
}


@pytest.mark.parametrize(("p", "t"), sorted(JORION_REGIONS))
def test_kupiec_non_rejection_regions_of_jorion_table(p, t):
    lo, hi = JORION_REGIONS[(p, t)]
    n = np.arange(t + 1)
    lr, _ = kupiec_pof(n, t, 1 - p)
    accepted = n[lr < CHI2_1_5PCT]
    if (p, t) == (0.01, 255):
        # The table's "N < 7" counts N = 0 as accepted, but LR(0) = 5.126 > 3.841: the
        # statistic rejects a model with no exceptions at all. The LR region is 1..6.
        assert lr[0] == pytest.approx(5.1257, abs=1e-4)
        assert accepted.min() == 1 and accepted.max() == hi
    else:
        assert (accepted.min(), accepted.max()) == (lo, hi)
    assert np.array_equal(accepted, np.arange(accepted.min(), accepted.max() + 1))  # one interval


def test_christoffersen_check_value():
    # n00 = 238, n01 = 5, n10 = 5, n11 = 2 gives LR_ind = 6.7514 (REFERENCES.md, computed
    # from Christoffersen 1998, eq. for LR_ind); p-value from scipy.stats.chi2.
    lr, p = independence_lr(238, 5, 5, 2)
    assert lr == pytest.approx(6.7514, abs=5e-5)
    assert p == pytest.approx(stats.chi2.sf(6.751439, 1), rel=1e-5)


def test_transition_counts_of_a_known_sequence():
    hits = np.array([0, 1, 1, 0, 0, 1, 0, 1, 1, 1], bool)
    assert tuple(int(v) for v in transition_counts(hits)) == (1, 3, 2, 3)


@pytest.mark.parametrize(
    "hits",
    [
        np.zeros(250, bool),  # no exceptions
        np.ones(250, bool),  # only exceptions
        np.r_[np.zeros(249, bool), True],  # one exception on the last day: no 1 -> x
        np.r_[True, np.zeros(249, bool)],  # one exception on the first day
        np.tile([True, False], 125),  # alternating: no 1 -> 1
    ],
)
def test_degenerate_sequences_give_finite_results_without_warnings(hits):
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        res = coverage_tests(hits, 0.99)
    for name in ("kupiec_lr", "kupiec_p", "independence_lr", "independence_p", "cc_lr", "cc_p"):
        value = getattr(res, name)
        assert np.isfinite(value) and value >= 0, name
    if hits.all() or not hits.any():
        assert res.independence_lr == 0.0


def test_clustered_exceptions_reject_independence():
    # Ten exceptions in four bursts over 500 days: the count is close to 1% of 500 but
    # consecutive exceptions are far more frequent than independence allows.
    hits = np.zeros(500, bool)
    hits[[100, 101, 102, 250, 251, 252, 400, 401, 470, 471]] = True
    res = coverage_tests(hits, 0.98)
    assert res.kupiec_p > 0.05  # the count alone is fine
    assert res.independence_p < 1e-4
    assert res.cc_p < 1e-3


def test_iid_bernoulli_rejects_independence_at_about_the_nominal_rate():
    # 4,000 sequences, each from its own seed 0..3999, T = 2000, p = 5%,
    # where the chi-squared(1) approximation holds well. Binomial standard error of the
    # rate is 0.35%; the band allows 3.5 of them (the LR test's own size is 5.0-5.6% here).
    # At T = 250, p = 1% the test's finite-sample size is far from 5% (about 1.7%): see docs.
    hits = np.stack([np.random.default_rng(seed).random(2000) < 0.05 for seed in range(4000)])
    res = coverage_tests(hits, 0.95)
    rate = float(np.mean(res.independence_p < 0.05))
    assert 0.038 <= rate <= 0.068
    assert 0.038 <= float(np.mean(res.cc_p < 0.05)) <= 0.068


def test_conditional_coverage_is_the_sum_with_two_dof():
    rng = np.random.default_rng(3)
    hits = rng.random((3, 4, 250)) < 0.02
    conf = np.array([0.99, 0.98, 0.975, 0.95])
    res = coverage_tests(hits, conf)
    assert res.exceptions.shape == (3, 4)
    np.testing.assert_allclose(res.cc_lr, res.kupiec_lr + res.independence_lr)
    np.testing.assert_allclose(res.cc_p, stats.chi2.sf(res.cc_lr, 2), rtol=1e-9)  # scipy.stats
    n00, n01, n10, n11 = res.transitions
    np.testing.assert_array_equal(n00 + n01 + n10 + n11, 249)


def test_coverage_tests_need_two_days():
    with pytest.raises(ValueError, match="at least 2 days"):
        coverage_tests(np.array([True]), 0.99)
