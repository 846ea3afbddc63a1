"""Reverse stress: the smallest uniform shock that loses the target amount."""

from __future__ import annotations

import json

import numpy as np
import pytest

from tailtrace.errors import ConfigError
from tailtrace.estimators.base import linear_revalue
from tailtrace.stress.instruments import InstrumentMeta
from tailtrace.stress.reverse import ShockGroup, default_groups, group_loadings, reverse_stress, reverse_targets

ONE = InstrumentMeta.from_columns(["EQ.A"], ["equity"], ["EUR"], "EUR")
ALL = (ShockGroup("all", "all"),)


def _reverse(values, target, meta=ONE, groups=ALL, revalue=None, **kw):
    values = np.asarray(values, dtype=float)
    return reverse_stress(
        revalue or linear_revalue(values), group_loadings(meta, groups), np.asarray(target, dtype=float),
        portfolios=[f"p{i}" for i in range(values.shape[0])], groups=groups, **kw,
    )


def test_linear_long_position_needs_shock_loss_over_value():
    res = _reverse([[2_000_000.0]], [150_000.0])
    # P&L = V · s for a linear long position, so s = −loss / V
    assert res.reachable[0, 0]
    assert res.shock[0, 0] == pytest.approx(-150_000.0 / 2_000_000.0, abs=1e-9)
    assert res.pnl[0, 0] == pytest.approx(-150_000.0, rel=1e-8)
    assert res.pnl[0, 0] <= -150_000.0


def test_linear_short_position_needs_a_rise():
    res = _reverse([[-500_000.0]], [100_000.0])
    assert res.shock[0, 0] == pytest.approx(0.2, abs=1e-9)


def test_several_portfolios_are_solved_together_and_alike():
    values = np.array([[1000.0], [-400.0], [250.0]])
    target = np.array([100.0, 60.0, 10.0])
    together = _reverse(values, target)
    for p in range(3):
        alone = _reverse(values[p : p + 1], target[p : p + 1])
        assert together.shock[p, 0] == pytest.approx(alone.shock[0, 0], abs=1e-12)
    np.testing.assert_allclose(together.shock[:, 0], [-0.1, 0.15, -0.04], atol=1e-9)


def test_unreachable_loss_is_reported_clearly():
    res = _reverse([[1000.0]], [995.0], max_fall=0.99)
    assert not res.reachable[0, 0] and np.isnan(res.shock[0, 0])
    # the worst found in the range is the maximal fall
    assert res.worst_shock[0, 0] == pytest.approx(-0.99) and res.pnl[0, 0] == pytest.approx(-990.0)
    detail = json.loads(res.records(np.datetime64("2024-01-02"))[0].detail)
    assert detail["status"] == "not_reachable" and detail["shock"] is None
    assert detail["searched"] == [-0.99, 1.0] and detail["target_loss"] == 995.0


def test_hedged_book_cannot_be_hurt_by_a_uniform_move():
    meta = InstrumentMeta.from_columns(["A", "B"], ["equity", "equity"], ["EUR", "EUR"], "EUR")
    res = _reverse([[1000.0, -1000.0]], [1.0], meta=meta)
    assert not res.reachable[0, 0] and res.pnl[0, 0] == pytest.approx(0.0, abs=1e-9)


def test_nonlinear_book_takes_the_smaller_of_fall_and_rise():
    # a short-volatility book: P&L = −A s² for a uniform move s (either direction loses)
    A = 10_000.0

    def revalue(log_shocks, horizon):
        s = np.expm1(log_shocks[:, 0])
        return (-A * s**2)[None, :]

    res = _reverse([[1.0]], [100.0], revalue=revalue)
    assert res.shock[0, 0] == pytest.approx(-0.1, abs=1e-9)  # tie goes to the fall


def test_group_loadings_count_fx_translation(meta):
    groups = (ShockGroup("all", "all"), ShockGroup("fx", "asset_class", "fx"), ShockGroup("usd", "currency", "USD"))
    c = group_loadings(meta, groups)
    # a USD instrument moves with its own price and with FX.USD under "all"
    assert c[0].tolist() == [1, 1, 2, 2, 2, 1]
    assert c[1].tolist() == [0, 0, 1, 1, 1, 1]
    assert c[2].tolist() == [0, 0, 1, 1, 1, 0]


def test_uniform_shock_on_a_foreign_position_includes_the_fx_move(meta):
    values = np.zeros((1, meta.n))
    values[0, 2] = 1000.0  # USD equity
    groups = (ShockGroup("all", "all"),)
    res = _reverse(values, [190.0], meta=meta, groups=groups)
    # (1 + s)² − 1 = −0.19  ⇒  s = −0.1
    assert res.shock[0, 0] == pytest.approx(-0.1, abs=1e-9)


def test_default_groups_and_bad_groups(meta):
    names = [g.name for g in default_groups(meta)]
    assert names == ["all", "bond", "commodity", "equity", "fx"]
    with pytest.raises(ConfigError, match="selects no instrument"):
        group_loadings(meta, [ShockGroup("x", "asset_class", "crypto")])
    with pytest.raises(ConfigError, match="unknown selector"):
        group_loadings(meta, [ShockGroup("x", "sector", "tech")])


def test_targets_from_config():
    values = np.array([[1000.0, -500.0], [200.0, 0.0]])
    np.testing.assert_allclose(reverse_targets(values, fraction_of_gross=0.1), [150.0, 20.0])
    np.testing.assert_allclose(reverse_targets(values, amount=50.0), [50.0, 50.0])
    np.testing.assert_allclose(reverse_targets(values, amount={"a": 1.0, "b": 2.0}, portfolios=["a", "b"]), [1, 2])
    with pytest.raises(ConfigError, match="exactly one of"):
        reverse_targets(values)
    with pytest.raises(ConfigError, match="no amount for portfolio.*b"):
        reverse_targets(values, amount={"a": 1.0}, portfolios=["a", "b"])
    with pytest.raises(ConfigError, match="must be positive"):
        reverse_targets(np.zeros((1, 2)), fraction_of_gross=0.1)


def test_records_for_reached_shocks():
    res = _reverse([[1000.0]], [100.0])
    (rec,) = res.records(np.datetime64("2024-01-02"))
    detail = json.loads(rec.detail)
    assert rec.kind == "reverse" and rec.scenario == "reverse_all" and rec.horizon_days == 0
    assert detail["status"] == "reached" and detail["shock"] == pytest.approx(-0.1, abs=1e-9)
