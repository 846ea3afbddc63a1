"""Liquidity-horizon ES cascade (Basel Committee, Minimum capital requirements for market risk, 2019, MAR33.4)."""

from __future__ import annotations

import numpy as np
import pytest

from tailtrace.errors import ConfigError
from tailtrace.estimators import historical
from tailtrace.estimators.base import RiskSample, linear_revalue
from tailtrace.stress.instruments import InstrumentMeta
from tailtrace.stress.liquidity import DEFAULT_LIQUIDITY_HORIZONS, liquidity_adjusted_es, liquidity_horizons


def test_cascade_against_a_hand_computation():
    # Source: MAR33.4, ES = sqrt(ES_T(P)^2 + sum_{j>=2} (ES_T(P, j) * sqrt((LH_j - LH_{j-1}) / T))^2),
    # T = 10, LH = 10, 20, 40, 60, 120; ES_T(P, j) shocks only factors with LH >= LH_j.
    #
    # Three instruments, values 1000 (LH 10), 500 (LH 40), 200 (LH 120). 49 days of zero returns
    # except: day 20, instrument A falls 10 % and B falls 20 % (log returns ln 0.9, ln 0.8);
    # day 35, instrument C falls 50 %. The 40 overlapping 10-day windows hold day 20 (loss
    # 100 + 100 = 200 with all factors) or day 35 (loss 100), never both (15 days apart).
    # At 97.5 % the tail of 40 observations is k = floor(40 * 0.025) = 1: ES is the worst loss.
    #   j = 1 (all factors):          ES_T(P)    = 200
    #   j = 2 (LH >= 20: B, C):       ES_T(P, 2) = 100  (B alone or C alone)
    #   j = 3 (LH >= 40: B, C):       ES_T(P, 3) = 100
    #   j = 4 (LH >= 60: C):          ES_T(P, 4) = 100
    #   j = 5 (LH >= 120: C):         ES_T(P, 5) = 100
    # ES = sqrt(200^2 + (100 sqrt(10/10))^2 + (100 sqrt(20/10))^2 + (100 sqrt(20/10))^2
    #           + (100 sqrt(60/10))^2)
    #    = sqrt(40000 + 10000 + 20000 + 20000 + 60000) = sqrt(150000) = 387.298335...
    r = np.zeros((49, 3))
    r[20, 0], r[20, 1], r[35, 2] = np.log(0.9), np.log(0.8), np.log(0.5)
    values = np.array([[1000.0, 500.0, 200.0]])
    res = liquidity_adjusted_es(r, linear_revalue(values), np.array([10, 40, 120]), portfolios=("p",))
    assert res.n_obs == 40
    np.testing.assert_allclose(res.es_subset[0], [200, 100, 100, 100, 100], rtol=1e-12)
    np.testing.assert_allclose(
        res.scaled_term[0], [200, 100, 100 * np.sqrt(2), 100 * np.sqrt(2), 100 * np.sqrt(6)], rtol=1e-12
    )
    assert res.es[0] == pytest.approx(np.sqrt(150_000.0), rel=1e-12)
    assert res.n_instruments.tolist() == [3, 2, 2, 1, 1]


def test_all_positions_at_ten_days_give_the_base_es(history, values, revalue, portfolios):
    r, _ = history
    res = liquidity_adjusted_es(r[-500:], revalue, np.full(6, 10), portfolios=portfolios)
    np.testing.assert_allclose(res.es, res.es_subset[:, 0], rtol=0)
    assert np.all(res.es_subset[:, 1:] == 0.0)
    # the base ES is the spine's overlapping 10-day historical ES at 97.5 %
    sample = RiskSample(
        as_of=np.datetime64("2021-06-30"), portfolios=portfolios, instruments=tuple("abcdef"),
        dates=np.arange(500).astype("datetime64[D]"), returns=r[-500:], history=r, values=values,
        pnl=revalue(r[-500:], 1), revalue=revalue,
    )
    spine = historical.estimate_overlapping(sample, [0.975], [10], options={})
    np.testing.assert_allclose(res.es, spine.es[:, 0, 0], rtol=1e-12)


def test_longer_horizons_never_lower_the_figure(history, values, revalue, portfolios):
    r, _ = history
    base = liquidity_adjusted_es(r[-500:], revalue, np.full(6, 10), portfolios=portfolios)
    longer = liquidity_adjusted_es(r[-500:], revalue, np.array([10, 10, 20, 10, 60, 40]), portfolios=portfolios)
    assert np.all(longer.es >= base.es - 1e-9)


def test_horizon_mapping_from_asset_classes(meta):
    lh = liquidity_horizons(meta)
    assert lh.tolist() == [10, 10, 10, 10, 20, 10]
    assert liquidity_horizons(meta, {"commodity": 60, "bond": 20}).tolist() == [10, 10, 10, 20, 60, 10]
    assert DEFAULT_LIQUIDITY_HORIZONS["equity"] == 10


def test_unmapped_asset_class_and_bad_horizons_are_refused():
    meta = InstrumentMeta.from_columns(["X", "Y"], ["equity", "crypto"], ["EUR", "EUR"], "EUR")
    with pytest.raises(ConfigError, match="no liquidity horizon for asset class.*crypto"):
        liquidity_horizons(meta)
    assert liquidity_horizons(meta, default=120).tolist() == [10, 120]
    with pytest.raises(ConfigError, match="liquidity horizon of 'crypto' is 30 days"):
        liquidity_horizons(meta, {"crypto": 30})
    r = np.zeros((30, 2))
    with pytest.raises(ConfigError, match="must equal the base horizon"):
        liquidity_adjusted_es(r, linear_revalue(np.ones((1, 2))), np.array([20, 20]), portfolios=("p",),
                              buckets=(20, 40))
    with pytest.raises(ConfigError, match=r"liquidity horizons \[30\] are not among the buckets"):
        liquidity_adjusted_es(r, linear_revalue(np.ones((1, 2))), np.array([10, 30]), portfolios=("p",))


def test_rows_for_the_table(history, revalue, portfolios):
    r, _ = history
    res = liquidity_adjusted_es(r[-300:], revalue, np.array([10, 10, 20, 40, 60, 120]), portfolios=portfolios)
    rows = res.rows(np.datetime64("2021-06-30"), calibration="stressed")
    assert len(rows) == 3 * 5
    assert {row["calibration"] for row in rows} == {"stressed"}
    first = [row for row in rows if row["portfolio"] == "long_only"]
    assert [row["liquidity_horizon_days"] for row in first] == [10, 20, 40, 60, 120]
    total = np.sqrt(sum(row["scaled_term"] ** 2 for row in first))
    assert first[0]["es_liquidity_adjusted"] == pytest.approx(total, rel=1e-12)
