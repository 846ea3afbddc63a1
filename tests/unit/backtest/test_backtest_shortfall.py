"""Acerbi-Szekely Z2: thresholds reproduced by simulation, behaviour on known cases."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from tailtrace.backtest.shortfall import (
    PUBLISHED_Z2,
    acerbi_szekely_z2,
    z2_null_distribution,
    z2_p_value,
    z2_thresholds,
    z2_zone,
)


def _seeded_null_sample(n_obs: int, alpha: float, sims: int, seed: int) -> np.ndarray:
    """Z2 under a correct normal model by seeded simulation (independent of the FFT).

    Exception count ~ Binomial(T, alpha); given the count, the losses beyond VaR are iid
    normal tail draws Phi^-1(alpha U). Only ~T alpha draws per simulated backtest.
    """
    rng = np.random.default_rng(seed)
    counts = rng.binomial(n_obs, alpha, size=sims)
    tail = stats.norm.ppf(alpha * (1.0 - rng.random(int(counts.sum()))))
    sums = np.bincount(np.repeat(np.arange(sims), counts), weights=tail, minlength=sims)
    return sums / (n_obs * stats.norm.pdf(stats.norm.ppf(alpha))) + 1.0


def test_published_thresholds_reproduced_by_seeded_simulation_under_normality():
    # Acerbi & Szekely (2014), Risk: T = 250, alpha = 2.5%, yellow Z2 <= -0.70 (5% level),
    # red Z2 <= -1.8 (0.01% level); values recalled from memory (REFERENCES.md: a normal
    # simulation gives about -0.701 and -1.80). Seeded simulation of 2e6 backtests: the 5%
    # quantile has standard error ~0.001, the 0.01% quantile (200 draws beyond it) ~0.02.
    sample = _seeded_null_sample(250, 0.025, 2_000_000, seed=20141201)
    sim_yellow, sim_red = np.quantile(sample, [0.05, 0.0001])
    assert sim_yellow == pytest.approx(-0.70, abs=0.01)
    assert sim_red == pytest.approx(-1.80, abs=0.06)
    # The code's thresholds (exact normal null by FFT) agree with the simulation.
    th = z2_thresholds(250, 0.025, source="normal_null")
    assert th.yellow == pytest.approx(sim_yellow, abs=0.005)
    assert th.red == pytest.approx(sim_red, abs=0.05)
    assert th.yellow == pytest.approx(-0.70, abs=0.005) and th.red == pytest.approx(-1.8, abs=0.02)
    published = z2_thresholds(250, 0.025)
    assert (published.source, published.yellow, published.red) == ("published", -0.70, -1.8)


@pytest.mark.parametrize(("n_obs", "alpha"), [(250, 0.01), (500, 0.025), (1000, 0.01)])
def test_null_distribution_matches_seeded_simulation(n_obs, alpha):
    # Kolmogorov distance between the FFT null CDF and 200,000 seeded simulated backtests:
    # sampling error alone is about 1.36 / sqrt(2e5) = 0.003 at 5%.
    sample = np.sort(_seeded_null_sample(n_obs, alpha, 200_000, seed=n_obs))
    z, cdf = z2_null_distribution(n_obs, alpha)
    model = np.interp(sample, z, cdf)
    empirical = np.searchsorted(sample, sample, side="right") / sample.size  # ties: the atom at 1
    assert np.max(np.abs(model - empirical)) < 0.004
    th = z2_thresholds(n_obs, alpha)
    assert th.source == "normal_null"
    assert th.yellow == pytest.approx(np.quantile(sample, 0.05), abs=0.01)


def test_null_shortcut_agrees_with_brute_force_simulation():
    # Independent brute force: full T = 250 normal paths with the exact normal VaR/ES
    # (scipy.stats.norm), Z2 by its definition; compares the 5% quantile and the mean.
    alpha = 0.025
    rng = np.random.default_rng(11)
    x = rng.standard_normal((40_000, 250))
    var = -stats.norm.ppf(alpha)
    es = stats.norm.pdf(stats.norm.ppf(alpha)) / alpha
    z2_brute = (x * (x < -var)).sum(axis=1) / (250 * alpha * es) + 1
    th = z2_thresholds(250, alpha, source="normal_null")
    # 5% quantile standard error with 40,000 draws is about 0.006.
    assert np.quantile(z2_brute, 0.05) == pytest.approx(th.yellow, abs=0.025)
    assert z2_brute.mean() == pytest.approx(0.0, abs=0.01)  # E[Z2] = 0 under H0
    np.testing.assert_allclose(acerbi_szekely_z2(x[:5], var, es, 1 - alpha), z2_brute[:5], rtol=1e-12)


def test_z2_flags_underestimated_es():
    # Forecasts of a unit normal on data with sigma = 1.4: the closed form
    # E[Z2] = 1 - sigma phi(q/sigma) / phi(q) (q the VaR quantile; from the definition of
    # Z2 and the normal partial expectation E[X; X < -q] = -sigma phi(q/sigma)) is -2.59.
    rng = np.random.default_rng(2)
    alpha, sigma = 0.025, 1.4
    q = stats.norm.ppf(1 - alpha)
    es1 = stats.norm.pdf(q) / alpha
    x = sigma * rng.standard_normal((400, 250))
    z2 = acerbi_szekely_z2(x, q, es1, 1 - alpha)
    expected = 1 - sigma * stats.norm.pdf(q / sigma) / stats.norm.pdf(q)
    assert expected == pytest.approx(-2.59, abs=0.01)
    assert z2.mean() == pytest.approx(expected, abs=0.1)  # 400 paths: standard error ~0.05
    zones = z2_zone(z2, z2_thresholds(250, alpha))
    assert np.mean(zones == "red") > 0.7


def test_z2_without_exceptions_is_one_and_zero_es_gives_minus_inf():
    x = np.array([[1.0, 2.0, -0.5, 0.3], [-3.0, 1.0, 1.0, 1.0]])
    z2 = acerbi_szekely_z2(x, np.array([[1.0], [0.0]]), np.array([[1.5], [0.0]]), 0.975)
    assert z2[0] == 1.0
    assert z2[1] == -np.inf


def test_p_value_and_zone():
    th = z2_thresholds(250, 0.025)
    assert z2_zone(np.array([0.1, -0.70, -1.0, -1.8, -5.0]), th).tolist() == [
        "green",
        "yellow",
        "yellow",
        "red",
        "red",
    ]
    exact = z2_thresholds(250, 0.025, source="normal_null")
    p = z2_p_value(np.array([exact.yellow, exact.red, 0.0, -np.inf, 1.0]), 250, 0.025)
    np.testing.assert_allclose(p[:2], [0.05, 1e-4], rtol=1e-6)
    assert 0.3 < p[2] < 0.7
    assert p[3] == 0.0 and p[4] == pytest.approx(1.0)


def test_thresholds_for_other_levels_are_simulated_and_published_only_where_they_exist():
    th = z2_thresholds(500, 0.01)
    assert th.source == "normal_null" and th.red < th.yellow < 0
    with pytest.raises(ValueError, match="only for T = 250"):
        z2_thresholds(500, 0.025, source="published")
    assert PUBLISHED_Z2["n_obs"] == 250
