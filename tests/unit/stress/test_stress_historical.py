"""Historical stress: worst losses over the history and named window replays."""

from __future__ import annotations

import json
import textwrap

import numpy as np
import pytest

from tailtrace.errors import InputError
from tailtrace.estimators.base import linear_revalue
from tailtrace.estimators.historical import overlapping_log_returns
from tailtrace.stress.historical import (
    StressWindow,
    horizon_log_returns,
    load_stress_windows,
    replay_windows,
    worst_losses,
)


def test_horizon_returns_match_direct_window_sums(history):
    r, _ = history
    for h in (1, 2, 10, 37):
        # independent implementation: the spine's sliding-window sums
        np.testing.assert_allclose(horizon_log_returns(r, h), overlapping_log_returns(r, h), atol=1e-13)


def test_horizon_longer_than_history_is_refused(history):
    r, _ = history
    with pytest.raises(Exception, match="longer than the history"):
        horizon_log_returns(r[:5], 6)


def test_worst_losses_match_brute_force(history, values, revalue, portfolios):
    r, dates = history
    res = worst_losses(r, dates, revalue, [1, 5, 20], portfolios=portfolios)
    for k, h in enumerate((1, 5, 20)):
        for p in range(len(portfolios)):
            # brute force: every h-day stretch, linear book, plain Python loop
            pnl = [values[p] @ np.expm1(r[t : t + h].sum(axis=0)) for t in range(r.shape[0] - h + 1)]
            t = int(np.argmin(pnl))
            assert res.pnl[p, k] == pytest.approx(pnl[t], rel=1e-12)
            assert res.start_dates[p, k] == dates[t]
            assert res.end_dates[p, k] == dates[t + h - 1]
        assert res.n_windows[k] == r.shape[0] - h + 1


def test_worst_day_of_a_short_book_is_the_largest_rise(business_days):
    r = np.zeros((50, 1))
    r[10, 0], r[30, 0] = -0.08, 0.05
    dates = business_days(50)
    res = worst_losses(r, dates, linear_revalue(np.array([[1000.0], [-1000.0]])), [1], portfolios=("long", "short"))
    assert res.end_dates[0, 0] == dates[10] and res.pnl[0, 0] == pytest.approx(1000 * np.expm1(-0.08))
    assert res.end_dates[1, 0] == dates[30] and res.pnl[1, 0] == pytest.approx(-1000 * np.expm1(0.05))
    kinds = {rec.kind for rec in res.records(dates[-1])}
    assert kinds == {"historical_worst_1d"}


def test_worst_records_kinds_and_scenarios(history, revalue, portfolios):
    r, dates = history
    recs = worst_losses(r, dates, revalue, [1, 10], portfolios=portfolios).records(dates[-1])
    assert [(x.kind, x.scenario) for x in recs[:1]] == [("historical_worst_1d", "worst_1d")]
    assert {(x.kind, x.scenario, x.horizon_days) for x in recs} == {
        ("historical_worst_1d", "worst_1d", 1),
        ("historical_worst_hd", "worst_10d", 10),
    }


def _window(name, start, end, line=3):
    return StressWindow(name, np.datetime64(start, "D"), np.datetime64(end, "D"), "", "config/stress_windows.yaml", line)


def test_window_replay_linear_book(history, values, revalue, portfolios):
    r, dates = history
    win = _window("w", "2018-03-01", "2018-06-15")
    res = replay_windows([win], r, dates, revalue, portfolios=portfolios)
    inside = (dates >= win.start) & (dates <= win.end)
    block = r[inside]
    assert res.n_days[0] == inside.sum()
    assert res.start_dates[0] == dates[inside][0] and res.end_dates[0] == dates[inside][-1]
    for p in range(len(portfolios)):
        # cumulative P&L of a linear book: V (exp(Σ r) − 1), no rebalancing
        assert res.pnl[p, 0] == pytest.approx(values[p] @ np.expm1(block.sum(axis=0)), rel=1e-12)
        # drawdown by brute force over all (peak, trough) pairs of the path, V_0 = 0
        path = np.concatenate([[0.0], [values[p] @ np.expm1(block[: k + 1].sum(axis=0)) for k in range(len(block))]])
        dd = min(path[j] - path[:j + 1].max() for j in range(len(path)))
        assert res.drawdown_pnl[p, 0] == pytest.approx(dd, rel=1e-12, abs=1e-9)
        daily = np.expm1(block) @ values[p]
        assert res.worst_day_pnl[p, 0] == pytest.approx(daily.min())


def test_window_drawdown_dates(business_days):
    dates = business_days(30)
    r = np.zeros((30, 1))
    # high reached on day 5 and held to day 7, falls on days 8 and 9, recovers on day 12
    r[5, 0], r[8, 0], r[9, 0], r[12, 0] = 0.10, -0.05, -0.20, 0.30
    win = StressWindow("w", dates[3], dates[20], "", "f.yaml", 2)
    res = replay_windows([win], r, dates, linear_revalue(np.array([[100.0]])), portfolios=("p",))
    # the drawdown runs from the last close at the high to the trough
    assert res.drawdown_from[0, 0] == dates[7] and res.drawdown_to[0, 0] == dates[9]
    assert res.drawdown_pnl[0, 0] == pytest.approx(100 * (np.exp(-0.15) - np.exp(0.10)))
    detail = json.loads(res.records(dates[-1])[0].detail)
    assert detail["drawdown_from"] == str(dates[7]) and detail["drawdown_to"] == str(dates[9])


def test_window_without_drawdown_has_no_dates(business_days):
    dates = business_days(10)
    r = np.full((10, 1), 0.01)
    res = replay_windows([StressWindow("up", dates[0], dates[-1], "", "f.yaml", 2)], r, dates,
                         linear_revalue(np.array([[100.0]])), portfolios=("p",))
    detail = json.loads(res.records(dates[-1])[0].detail)
    assert res.drawdown_pnl[0, 0] == 0.0 and detail["drawdown_from"] is None and detail["drawdown_to"] is None


@pytest.mark.parametrize(
    ("start", "end", "column"),
    [("2017-06-01", "2018-02-01", "start"), ("2021-01-04", "2031-01-01", "end")],
)
def test_window_outside_history_names_file_and_entry(history, revalue, portfolios, start, end, column):
    r, dates = history
    win = _window("glasshouse_crisis_2022", start, end, line=7)
    with pytest.raises(InputError, match=r"stress_windows\.yaml, row 7.*glasshouse_crisis_2022.*outside the available history") as exc:
        replay_windows([win], r, dates, revalue, portfolios=portfolios)
    assert exc.value.column == column


def test_window_without_trading_days(business_days, revalue, portfolios):
    dates = business_days(20, "2018-01-01")  # Monday; 2018-01-06/07 is a weekend
    r = np.zeros((20, 6))
    win = _window("weekend", "2018-01-06", "2018-01-07")
    with pytest.raises(InputError, match="holds no trading day"):
        replay_windows([win], r, dates, revalue, portfolios=portfolios)


def _write(tmp_path, text):
    path = tmp_path / "stress_windows.yaml"
    path.write_text(textwrap.dedent(text))
    return path


def test_shipped_windows_file_loads():
    wins = load_stress_windows("config/stress_windows.yaml")
    spans = {(str(w.start), str(w.end)) for w in wins}
    # the demo scenario's episodes
    assert spans == {("2022-02-14", "2022-05-31"), ("2019-08-01", "2019-08-30")}
    assert all(w.line and w.description for w in wins)


@pytest.mark.parametrize(
    ("body", "pattern"),
    [
        ("windows:\n  - name: a\n    start: 2020-01-10\n    end: 2020-01-02\n", r"row 4, column 'end'.*before start"),
        ("windows:\n  - name: a\n    start: 2020-02-30\n    end: 2020-03-02\n", r"row 3, column 'start'.*not an ISO 8601 date"),
        ("windows:\n  - name: a\n    start: 2020-01-01\n    end: 2020-01-02\n  - name: a\n    start: 2020-02-01\n    end: 2020-02-02\n",
         r"row 5, column 'name'.*repeats the entry at line 2"),
        ("windows:\n  - name: a\n    start: 2020-01-01\n", r"row 2: windows\[0\]: 'end' is a required property"),
        ("windows:\n  - name: a\n    start: 2020-01-01\n    end: 2020-01-02\n    colour: red\n", r"row 2.*'colour' was unexpected"),
        ("windows:\n  - name: a b\n    start: 2020-01-01\n    end: 2020-01-02\n", r"row 2, column 'name'.*does not match"),
        ("windows:\n  - name: a\n    start: 2020-01-01\n    start: 2020-01-03\n    end: 2020-01-02\n", r"row 4, column 'start': duplicate key"),
        ("windows: [\n", r"not valid YAML"),
    ],
)
def test_bad_windows_file_names_file_row_and_key(tmp_path, body, pattern):
    path = _write(tmp_path, body)
    with pytest.raises(InputError, match=pattern) as exc:
        load_stress_windows(path)
    assert exc.value.file == str(path)
