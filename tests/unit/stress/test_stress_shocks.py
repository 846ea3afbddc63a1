"""Hypothetical shocks: reading shocks.yaml, selector precedence, full revaluation."""

from __future__ import annotations

import json
import textwrap

import numpy as np
import pytest

from tailtrace.errors import InputError, ModelWarning
from tailtrace.estimators.base import linear_revalue
from tailtrace.stress.hypothetical import run_hypothetical
from tailtrace.stress.instruments import InstrumentMeta
from tailtrace.stress.shocks import Shock, ShockScenario, load_shock_scenarios, resolve_scenarios


def _scenario(*shocks, name="s", horizon=0):
    return ShockScenario(name, "", horizon, tuple(Shock(*s, line=10 + i) for i, s in enumerate(shocks)), "shocks.yaml", 9)


def _run(meta, values, *scenarios, prices=None, **kw):
    resolved = resolve_scenarios(scenarios, meta, prices=prices)
    return run_hypothetical(resolved, linear_revalue(values), portfolios=[f"p{i}" for i in range(len(values))], **kw)


def test_zero_shocks_change_nothing(meta, values):
    prices = np.array([50.0, 20.0, 100.0, 98.0, 90.0, 0.9])
    scen = _scenario(
        ("asset_class", "equity", "relative", 0.0),
        ("currency", "USD", "absolute", 0.0),
        ("instrument", "FX.USD", "relative", 0.0),
        ("asset_class", "bond", "vol", 0.0),
    )
    res = _run(meta, values, scen, prices=prices)
    assert np.all(res.shocks.log_shocks == 0.0)
    assert np.all(res.pnl == 0.0)


def test_ten_percent_fall_on_a_linear_long_position_loses_ten_percent(meta):
    values = np.zeros((1, meta.n))
    values[0, 0] = 1_234_567.0
    res = _run(meta, values, _scenario(("instrument", "EQ.A", "relative", -0.10)))
    # exact up to one rounding of log1p/expm1
    assert res.pnl[0, 0] == pytest.approx(-123_456.7, rel=1e-14)


def test_absolute_shock_in_price_units(meta):
    prices = np.array([50.0, 20.0, 100.0, 98.0, 90.0, 0.9])
    values = np.zeros((1, meta.n))
    values[0, 0] = 1000.0
    res = _run(meta, values, _scenario(("instrument", "EQ.A", "absolute", -5.0)), prices=prices)
    assert res.pnl[0, 0] == pytest.approx(-100.0, rel=1e-13)  # 50 -> 45 is -10 %


def test_selector_precedence_instrument_over_asset_class_over_currency(meta, values):
    # listed from most to least specific, so the order in the file cannot be what decides
    scen = _scenario(
        ("instrument", "EQ.US", "relative", -0.30),
        ("asset_class", "equity", "relative", -0.20),
        ("currency", "USD", "relative", -0.10),
    )
    loc = resolve_scenarios([scen], meta).local_log_shocks[0]
    expected = np.log1p([-0.20, -0.20, -0.30, -0.10, -0.10, 0.0])  # FX.USD: currency picks no FX rate
    np.testing.assert_allclose(loc, expected, rtol=1e-15)
    levels = resolve_scenarios([scen], meta).price_level[0]
    assert levels.tolist() == [2, 2, 3, 1, 1, 0]
    # same result with the shocks in the reverse order
    rev = ShockScenario("s", "", 0, scen.shocks[::-1], "shocks.yaml", 9)
    np.testing.assert_array_equal(resolve_scenarios([rev], meta).local_log_shocks[0], loc)


def test_price_and_vol_shocks_resolve_separately(meta):
    scen = _scenario(("asset_class", "equity", "vol", 0.10), ("instrument", "EQ.A", "relative", -0.2))
    res = resolve_scenarios([scen], meta)
    assert res.vol_shocks[0].tolist() == [0.10, 0.10, 0.10, 0.0, 0.0, 0.0]
    assert res.local_log_shocks[0, 0] == pytest.approx(np.log(0.8))


def test_foreign_instrument_moves_with_its_fx_rate(meta):
    values = np.zeros((1, meta.n))
    values[0, 2] = 1000.0  # USD equity, EUR value
    scen = _scenario(("instrument", "EQ.US", "relative", -0.10), ("instrument", "FX.USD", "relative", -0.10))
    res = _run(meta, values, scen)
    # base value = local price × EUR per USD: 0.9 × 0.9 − 1 = −19 %
    assert res.pnl[0, 0] == pytest.approx(-190.0, rel=1e-13)
    # an FX shock alone moves every USD instrument but not the EUR ones
    fx_only = resolve_scenarios([_scenario(("asset_class", "fx", "relative", 0.05))], meta).log_shocks[0]
    np.testing.assert_allclose(fx_only, np.log1p([0, 0, 0.05, 0.05, 0.05, 0.05]), rtol=1e-15)


def test_same_level_clash_is_an_error(meta):
    scen = _scenario(("asset_class", "equity", "relative", -0.2), ("asset_class", "equity", "absolute", -1.0))
    with pytest.raises(InputError, match=r"shocks\.yaml, row 11, column 'asset_class'.*shocks EQ.A again at the same level as line 10"):
        resolve_scenarios([scen], meta, prices=np.ones(meta.n))


def test_selector_matching_nothing_is_skipped_with_a_warning(meta):
    with pytest.warns(ModelWarning, match="'FX.GBP' matches no instrument"):
        resolve_scenarios([_scenario(("instrument", "FX.GBP", "relative", -0.2))], meta)


def test_unknown_asset_class_is_an_error(meta):
    with pytest.raises(InputError, match=r"row 10, column 'asset_class'.*'equty' matches no instrument"):
        resolve_scenarios([_scenario(("asset_class", "equty", "relative", -0.2))], meta)


def test_absolute_shock_needs_prices_and_a_positive_result(meta):
    with pytest.raises(InputError, match="need today's prices"):
        resolve_scenarios([_scenario(("instrument", "EQ.A", "absolute", -1.0))], meta)
    with pytest.raises(InputError, match="takes the price of EQ.A to zero or below"):
        resolve_scenarios([_scenario(("instrument", "EQ.A", "absolute", -50.0))], meta, prices=np.full(meta.n, 50.0))


def test_vol_shocks_on_a_linear_book_warn_and_are_ignored(meta, values):
    scen = _scenario(("asset_class", "equity", "vol", 0.1), ("asset_class", "equity", "relative", -0.1), name="volup")
    with pytest.warns(ModelWarning, match="vol shocks ignored in scenario.*volup"):
        res = _run(meta, values, scen)
    np.testing.assert_allclose(res.pnl[:, 0], values[:, :3].sum(axis=1) * -0.1, rtol=1e-13)
    assert json.loads(res.records("2024-01-02")[0].detail)["vol_shocks_applied"] is False


def test_vol_aware_revaluation_receives_the_vol_shocks(meta, values):
    seen = {}

    def revalue_vol(log_shocks, vol_shocks, horizon):
        seen["vol"], seen["h"] = vol_shocks.copy(), horizon
        return np.zeros((values.shape[0], log_shocks.shape[0]))

    scen = _scenario(("instrument", "EQ.B", "vol", 0.05), horizon=3)
    res = _run(meta, values, scen, revalue_vol=revalue_vol)
    assert seen["h"] == 3 and seen["vol"][0].tolist() == [0, 0.05, 0, 0, 0, 0]
    assert res.vol_applied.tolist() == [True]


def test_scenarios_with_different_horizons_reach_revalue_grouped(meta, values):
    calls = []

    def revalue(log_shocks, horizon):
        calls.append((horizon, log_shocks.shape[0]))
        return values @ np.expm1(log_shocks).T

    scen = [_scenario(("asset_class", "equity", "relative", x), name=f"s{i}", horizon=h)
            for i, (x, h) in enumerate([(-0.1, 0), (-0.2, 5), (-0.3, 0)])]
    res = run_hypothetical(resolve_scenarios(scen, meta), revalue, portfolios=["a", "b", "c"])
    assert sorted(calls) == [(0, 2), (5, 1)]
    np.testing.assert_allclose(res.pnl[0], values[0, :3].sum() * np.array([-0.1, -0.2, -0.3]), rtol=1e-13)
    recs = res.records(np.datetime64("2024-01-02"))
    assert {(r.scenario, r.horizon_days) for r in recs} == {("s0", 0), ("s1", 5), ("s2", 0)}
    assert all(r.kind == "hypothetical" and r.start_date is None for r in recs)


DEMO_META = InstrumentMeta.from_columns(
    # the demo data's universe (data_demo/instruments.csv, written by another part of the project)
    ["EQ.VELMARSK", "EQ.QUORVENTA", "EQ.OSTRELLIN", "EQ.KARVENHOLT", "EQ.TALLOWMERE", "EQ.SPARROWDYNE",
     "EQ.GRISTVALE", "FUT.VALDORIA20", "CMD.BASEMETAL", "BOND.EURGOV10", "BOND.USDGOV10", "FX.USD"],
    ["equity"] * 7 + ["equity_index_future", "commodity", "bond", "bond", "fx"],
    ["EUR"] * 4 + ["USD"] * 3 + ["EUR", "USD", "EUR", "USD", "EUR"],
    "EUR",
)


def test_shipped_shocks_file_loads_and_resolves_on_the_demo_universe():
    scenarios = load_shock_scenarios("config/shocks.yaml")
    prices = np.array([84.0, 21.5, 12.8, 146.0, 212.0, 57.3, 38.9, 3400.0, 92.0, 100.0, 100.0, 0.834])
    res = resolve_scenarios(scenarios, DEMO_META, prices=prices)
    names = [s.name for s in scenarios]
    assert len(set(names)) == len(names) and np.all(res.horizon_days == 0)
    usd = res.scenarios.index(next(s for s in scenarios if s.name == "usd_asset_flight"))
    # the asset_class pick (bond +2 %) overrides the currency pick (USD −10 %) for the USD bond
    assert res.local_log_shocks[usd, 10] == pytest.approx(np.log(1.02))
    assert res.local_log_shocks[usd, 4] == pytest.approx(np.log(0.90))
    assert res.log_shocks[usd, 4] == pytest.approx(np.log(0.90 * 0.95))


def _write(tmp_path, text):
    path = tmp_path / "shocks.yaml"
    path.write_text(textwrap.dedent(text))
    return path


@pytest.mark.parametrize(
    ("body", "pattern"),
    [
        ("scenarios:\n  - name: a\n    shocks:\n      - {type: relative, size: -0.1}\n",
         r"row 4: scenario 'a', shock 1: give exactly one of instrument, asset_class, currency \(found none\)"),
        ("scenarios:\n  - name: a\n    shocks:\n      - {instrument: X, currency: USD, type: relative, size: -0.1}\n",
         r"row 4: .*found instrument, currency"),
        ("scenarios:\n  - name: a\n    shocks:\n      - {instrument: X, type: relative, size: -1.0}\n",
         r"row 4, column 'size'.*must be above -1"),
        ("scenarios:\n  - name: a\n    shocks:\n      - {instrument: X, type: jump, size: -0.1}\n",
         r"row 4, column 'type'.*'jump' is not one of"),
        ("scenarios:\n  - name: a\n    shocks:\n      - {instrument: X, type: relative, size: ten}\n",
         r"row 4, column 'size'.*'ten' is not of type 'number'"),
        ("scenarios:\n  - name: a\n    horizon_days: -1\n    shocks:\n      - {instrument: X, type: relative, size: 0.1}\n",
         r"row 3, column 'horizon_days'.*minimum"),
        ("scenarios:\n  - name: a\n    shocks: []\n", r"row 3, column 'shocks'.*(should be non-empty|too short)"),
        ("scenarios:\n  - name: a\n    shocks:\n      - {instrument: X, type: relative, size: 0.1}\n"
         "  - name: a\n    shocks:\n      - {instrument: Y, type: relative, size: 0.1}\n",
         r"row 5, column 'name'.*repeats the entry at line 2"),
        ("scenarios:\n  - name: a\n    shocks:\n      - {currency: usd, type: relative, size: 0.1}\n",
         r"row 4, column 'currency'.*does not match"),
    ],
)
def test_bad_shocks_file_names_file_row_and_key(tmp_path, body, pattern):
    path = _write(tmp_path, body)
    with pytest.raises(InputError, match=pattern) as exc:
        load_shock_scenarios(path)
    assert exc.value.file == str(path)


def test_loaded_shocks_carry_their_lines(tmp_path):
    path = _write(tmp_path, """\
        scenarios:
          - name: a
            horizon_days: 2
            shocks:
              - {asset_class: equity, type: relative, size: -0.1}
              - instrument: EQ.A
                type: absolute
                size: -2.5
        """)
    (scen,) = load_shock_scenarios(path)
    assert scen.horizon_days == 2 and scen.line == 2 and scen.description == ""
    assert [(s.selector, s.target, s.type, s.size, s.line) for s in scen.shocks] == [
        ("asset_class", "equity", "relative", -0.1, 5),
        ("instrument", "EQ.A", "absolute", -2.5, 6),
    ]
