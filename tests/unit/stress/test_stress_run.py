"""The pipeline entry point: every stress figure of one as_of from one call."""

from __future__ import annotations

import pytest

from tailtrace.errors import ConfigError
from tailtrace.estimators.base import RiskSample
from tailtrace.stress.historical import StressWindow
from tailtrace.stress.records import STRESS_KINDS, records_to_frame
from tailtrace.stress.reverse import ShockGroup
from tailtrace.stress.run import StressSettings, run_stress
from tailtrace.stress.shocks import Shock, ShockScenario


@pytest.fixture
def sample(history, values, revalue, portfolios, meta):
    r, dates = history
    return RiskSample(
        as_of=dates[-1], portfolios=portfolios, instruments=meta.instruments, dates=dates[-500:],
        returns=r[-500:], history=r, values=values, pnl=revalue(r[-500:], 1), revalue=revalue,
    )


def test_run_stress_produces_every_kind(sample, history, meta):
    _, dates = history
    windows = [StressWindow("w", dates[300], dates[360], "", "f.yaml", 2)]
    scenarios = [ShockScenario("eq", "", 0, (Shock("asset_class", "equity", "relative", -0.2, 3),), "s.yaml", 2)]
    run = run_stress(sample, dates, meta, windows=windows, scenarios=scenarios)
    frame = records_to_frame(run.records)
    assert set(frame["kind"]) == set(STRESS_KINDS)
    # 3 portfolios × (2 worst + 1 window + 1 scenario + 5 reverse groups: all, bond, commodity, equity, fx)
    assert len(frame) == 3 * 9
    assert {row["calibration"] for row in run.liquidity_rows} == {"current", "stressed"}
    assert len(run.liquidity_rows) == 2 * 3 * 5
    (wrow,) = run.stressed_window_rows
    assert wrow["label"] == "aggregate" and wrow["length_days"] == 250
    stressed = [r for r in run.liquidity_rows if r["calibration"] == "stressed" and r["liquidity_horizon_days"] == 10]
    assert all(r["n_obs"] == 241 for r in stressed)


def test_per_portfolio_basis_gives_one_stressed_row_per_portfolio(sample, history, meta):
    _, dates = history
    settings = StressSettings.from_config({"stressed_window": {"basis": "per_portfolio"}})
    run = run_stress(sample, dates, meta, windows=[], scenarios=[], settings=settings)
    assert [r["label"] for r in run.stressed_window_rows] == list(sample.portfolios)
    assert {r["portfolio"] for r in run.liquidity_rows if r["calibration"] == "stressed"} == set(sample.portfolios)


def test_settings_from_config():
    st = StressSettings.from_config(
        {
            "windows_file": "config/stress_windows.yaml",
            "worst_horizons_days": [1, 5],
            "liquidity_es": {"by_asset_class": {"commodity": 60}},
            "reverse": {"target_loss": 1e6, "groups": [{"name": "eq", "selector": "asset_class", "target": "equity"}]},
        }
    )
    assert st.worst_horizons_days == (1, 5) and st.lh_by_asset_class == {"commodity": 60}
    assert st.reverse_target_loss == 1e6 and st.reverse_target_loss_fraction is None
    assert st.reverse_groups == (ShockGroup("eq", "asset_class", "equity"),)
    assert StressSettings.from_config({}) == StressSettings()
    with pytest.raises(ConfigError, match=r"unknown key stress\.reverse\.target"):
        StressSettings.from_config({"reverse": {"target": 1}})
    with pytest.raises(ConfigError, match=r"unknown key stress\.colour"):
        StressSettings.from_config({"colour": 1})
