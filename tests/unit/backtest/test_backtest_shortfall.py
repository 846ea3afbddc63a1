"""Acerbi-Szekely Z2: thresholds reproduced by simulation, behaviour on known cases."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from tailtrace.backtest.shortfall import (
    PUBLISHED_Z2,
    acerbi_szekely_z2,
    z2_null_sample,
    z2_p_value,
    z2_thresholds,
    z2_zone,
)


def test_published_thresholds_reproduced_by_simulation_under_normality():
    # Acerbi & Szekely (2014), Risk: T = 250, alpha = 2.5%, yellow Z2 <= -0.70 (5% level),
    # red Z2 <= -1.8 (0.01% level); values recalled from memory (REFERENCES.md), where a
    # normal simulation gives about -0.701 and -1.80. The red quantile rests on ~200 of
    # 2e6 draws, simulation error about 0.02: tolerance 0.06.
    th = z2_thresholds(250, 0.025, source="simulated_normal")
    assert th.source == "simulated_normal"
    assert th.yellow == pytest.approx(-0.70, abs=0.01)
    assert th.red == pytest.approx(-1.80, abs=0.06)
    assert z2_thresholds(250, 0.025).source == "published"
    assert (z2_thresholds(250, 0.025).yellow, z2_thresholds(250, 0.025).red) == (-0.70, -1.8)


def test_null_shortcut_agrees_with_brute_force_simulation():
    # Independent brute force: full T = 250 normal paths with the exact normal VaR/ES
    # (scipy.stats.norm), Z2 by its definition; compares the 5% quantile and the mean.
    alpha = 0.025
    rng = np.random.default_rng(11)
    x = rng.standard_normal((40_000, 250))
    var = -stats.norm.ppf(alpha)
    es = stats.norm.pdf(stats.norm.ppf(alpha)) / alpha
    z2_brute = (x * (x < -var)).sum(axis=1) / (250 * alpha * es) + 1
    fast = z2_null_sample(250, alpha, sims=400_000, seed=5)
    # 5% quantile standard error with 40,000 draws is about 0.006.
    assert np.quantile(z2_brute, 0.05) == pytest.approx(np.quantile(fast, 0.05), abs=0.025)
    assert fast.mean() == pytest.approx(0.0, abs=0.005)  # E[Z2] = 0 under H0
    np.testing.assert_allclose(
        acerbi_szekely_z2(x[:5], var, es, 1 - alpha), z2_brute[:5], rtol=1e-12
    )


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
    p = z2_p_value(np.array([-0.701, 0.0, -1.79]), 250, 0.025)
    assert p[0] == pytest.approx(0.05, abs=0.002)
    assert 0.3 < p[1] < 0.7
    assert p[2] == pytest.approx(1e-4, abs=6e-5)


def test_thresholds_for_other_levels_are_simulated_and_published_only_where_they_exist():
    th = z2_thresholds(500, 0.01)
    assert th.source == "simulated_normal" and th.red < th.yellow < 0
    with pytest.raises(ValueError, match="only for T = 250"):
        z2_thresholds(500, 0.025, source="published")
    assert PUBLISHED_Z2["n_obs"] == 250
