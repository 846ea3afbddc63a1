"""Traffic-light zones against the Basel Committee's 1996 table and scipy.stats.binom."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from tailtrace.backtest.zones import format_zone_table, traffic_light, zone_table

# Basel Committee on Banking Supervision (1996), Supervisory framework for the use of
# "backtesting" ..., Table 2: 250 observations, 99% VaR. Cumulative probabilities in %
# for k = 0..10 (as printed, two decimals) and plus factors (memory, high confidence).
BASEL_CUMULATIVE_PCT = [8.11, 28.58, 54.32, 75.81, 89.22, 95.88, 98.63, 99.60, 99.89, 99.97, 99.99]
BASEL_ZONES = ["green"] * 5 + ["yellow"] * 5 + ["red"]
BASEL_PLUS = [0.0] * 5 + [0.40, 0.50, 0.65, 0.75, 0.85, 1.00]


def test_basel_1996_table_is_reproduced():
    table = zone_table(250, 0.99)
    assert table.standard
    assert table.exceptions.tolist() == list(range(11))
    # Printed values are rounded: the 99.99% of k = 10 is 99.9946%, which the table
    # rounds down to 99.99 (rounding to nearest would print 99.99 as well).
    np.testing.assert_allclose(100 * table.cumulative, BASEL_CUMULATIVE_PCT, atol=0.005 + 1e-12)
    assert list(table.zones) == BASEL_ZONES
    np.testing.assert_allclose(table.plus_factors, BASEL_PLUS)
    assert (table.green_max, table.red_min) == (4, 10)


def test_basel_point_probabilities():
    # The three values quoted in the issue: 0 -> 8.11%, 4 -> 89.22%, 9 -> 99.97%.
    _, _, cum = traffic_light(np.array([0, 4, 9]), 250, 0.99)
    np.testing.assert_allclose(np.round(100 * cum, 2), [8.11, 89.22, 99.97])


def test_counts_beyond_the_table_are_red_with_full_plus_factor():
    zones, plus, _ = traffic_light(np.array([10, 11, 25, 250]), 250, 0.99)
    assert zones.tolist() == ["red"] * 4
    np.testing.assert_allclose(plus, 1.0)


@pytest.mark.parametrize(("n", "c"), [(250, 0.975), (500, 0.99), (1000, 0.99), (260, 0.99), (125, 0.95)])
def test_zones_follow_the_binomial_cutoffs(n, c):
    # Independent check: scipy.stats.binom.cdf with the 1996 cut-offs (green below 95%,
    # red from 99.99%).
    k = np.arange(n + 1)
    zones, plus, cum = traffic_light(k, n, c)
    ref = stats.binom.cdf(k, n, 1 - c)
    np.testing.assert_allclose(cum, ref, rtol=1e-10, atol=1e-14)
    expected = np.where(ref < 0.95, "green", np.where(ref < 0.9999, "yellow", "red"))
    assert zones.tolist() == expected.tolist()
    yellow = zones == "yellow"
    assert np.all(plus[zones == "green"] == 0) and np.all(plus[zones == "red"] == 1.0)
    assert np.all((plus[yellow] >= 0.40) & (plus[yellow] <= 0.85))
    assert np.all(np.diff(plus) >= 0)  # more exceptions never lower the factor


def test_plus_factor_rule_for_other_windows_uses_equivalent_probability():
    # 500 days at 99%: each yellow count takes the factor of the largest standard count
    # whose 250-day cumulative probability does not exceed its own.
    std_cum = stats.binom.cdf(np.arange(5, 10), 250, 0.01)
    zones, plus, cum = traffic_light(np.arange(30), 500, 0.99)
    for z, pf, f in zip(zones, plus, cum):
        if z == "yellow":
            j = max([5] + [5 + i for i, v in enumerate(std_cum) if v <= f])
            assert pf == {5: 0.40, 6: 0.50, 7: 0.65, 8: 0.75, 9: 0.85}[j]
    _, plus_na, _ = traffic_light(np.array([3, 12]), 500, 0.99, plus_factor_rule="standard_only")
    assert np.isnan(plus_na).all()


def test_zero_exceptions_is_green_even_in_tiny_windows():
    # With 5 days at 99%, P(X = 0) = 95.1% >= 95%: the rule alone would call it yellow.
    zones, plus, cum = traffic_light(np.array([0, 1]), 5, 0.99)
    assert cum[0] >= 0.95
    assert zones.tolist()[0] == "green" and plus[0] == 0.0


def test_format_zone_table_prints_a_markdown_table():
    text = format_zone_table(zone_table(250, 0.99))
    assert "| 4 | 89.22 | green | 0.00 |" in text
    assert "| 9 | 99.97 | yellow | 0.85 |" in text
    assert "| 10+ | 99.99 | red | 1.00 |" in text
    assert text.count("\n|") == 13  # header, rule, 11 rows


@pytest.mark.parametrize(
    ("args", "message"),
    [((0, 0.99), "positive integer"), ((250, 1.0), "strictly between"), ((250.5, 0.99), "positive integer")],
)
def test_bad_window_or_coverage(args, message):
    with pytest.raises(ValueError, match=message):
        zone_table(*args)


def test_bad_counts_and_rule():
    with pytest.raises(ValueError, match="0..250"):
        traffic_light(np.array([251]), 250, 0.99)
    with pytest.raises(ValueError, match="unknown plus-factor rule"):
        traffic_light(np.array([1]), 250, 0.99, plus_factor_rule="nearest")
