"""run_backtest, the summary and forecast tables, and the actual P&L reader."""

from __future__ import annotations

import datetime as dt
import warnings

import numpy as np
import pytest

from tailtrace.backtest import (
    FORECAST_COLUMNS,
    FORECASTERS,
    SUMMARY_COLUMNS,
    coverage_tests,
    forecast_table,
    read_actual_pnl,
    run_backtest,
    summary_rows,
    summary_table,
)
from tailtrace.errors import ConfigError, DataQualityWarning, InputError, ModelWarning

METHODS = ["parametric_normal", "historical", "ewma_normal", "monte_carlo"]


@pytest.fixture(scope="module")
def setup(garch_t):
    x = garch_t(21, 3, 400, scale=1e5)
    dates = np.arange(np.datetime64("2023-01-02"), np.datetime64("2023-01-02") + 400)
    return x, dates, ("north", "south", "east")


@pytest.fixture(scope="module")
def result(setup):
    x, dates, names = setup
    return run_backtest(
        x, dates, names, methods=METHODS, confidences=[0.99, 0.975], window=150, days=250,
        options={"monte_carlo": {"paths": 2000}}, seed=3,
    )


def test_run_backtest_shapes_and_realised_pnl(result, setup):
    x, dates, names = setup
    assert result.var.shape == (4, 3, 2, 250)
    np.testing.assert_array_equal(result.pnl, x[:, -250:])
    np.testing.assert_array_equal(result.dates, dates[-250:])
    assert result.methods == tuple(METHODS) and result.portfolios == names
    hs = FORECASTERS["historical"](x, [0.99, 0.975], window=150, days=250)
    np.testing.assert_array_equal(result.var[1], hs.var)


def test_summary_rows_agree_with_the_statistics(result):
    rows = summary_rows(result)
    assert len(rows) == 4 * 3 * 2
    assert all(tuple(r) == SUMMARY_COLUMNS for r in rows)
    hits = result.exceptions
    tests = coverage_tests(hits, result.confidences[None, None, :])
    row = rows[2 * 3 * 2 + 1 * 2 + 1]  # method 2, portfolio 1, confidence 1
    assert (row["method"], row["portfolio"], row["confidence"]) == ("ewma_normal", "south", 0.975)
    assert row["exceptions"] == int(tests.exceptions[2, 1, 1]) == len(row["exception_dates"])
    assert row["expected_exceptions"] == pytest.approx(6.25)
    assert row["kupiec_lr"] == pytest.approx(float(tests.kupiec_lr[2, 1, 1]))
    assert row["n"] == 250 and row["first_date"] == dt.date(2023, 6, 1)  # 2023-01-02 + 150 days
    days = np.datetime_as_string(result.dates[hits[2, 1, 1]], unit="D").tolist()
    assert row["exception_dates"] == days
    assert {r["zone"] for r in rows} <= {"green", "yellow", "red"}
    for r in rows:
        if r["confidence"] == 0.99:
            assert r["es_thresholds"] == "normal_null"


def test_published_z2_thresholds_used_for_250_days_at_975(result):
    rows = summary_rows(result)
    # alpha = 1 - 0.975 rounds to 0.025: the published case (T = 250, alpha = 2.5%).
    assert {r["es_thresholds"] for r in rows if r["confidence"] == 0.975} == {"published"}


def test_summary_table_schema(result):
    table = summary_table(result)
    assert tuple(table.column_names) == SUMMARY_COLUMNS
    assert table.num_rows == 24
    assert str(table.schema.field("exception_dates").type) == "list<item: string>"
    assert str(table.schema.field("first_date").type) == "date32[day]"


def test_forecast_table_long_form(result):
    table = forecast_table(result)
    assert tuple(table.column_names) == FORECAST_COLUMNS
    assert table.num_rows == 4 * 3 * 2 * 250
    col = {name: table.column(name).to_numpy(zero_copy_only=False) for name in ("var", "pnl", "exception")}
    np.testing.assert_array_equal(col["var"], result.var.ravel())
    np.testing.assert_array_equal(col["exception"], col["pnl"] < -col["var"])
    first = table.slice(0, 1).to_pylist()[0]
    assert first["method"] == "parametric_normal" and first["portfolio"] == "north"
    assert first["date"] == dt.date(2023, 6, 1)


def test_run_backtest_checks_labels(setup):
    x, dates, names = setup
    with pytest.raises(ValueError, match="does not match 2 portfolios"):
        run_backtest(x, dates, names[:2], methods=["historical"], confidences=[0.99], window=100)
    bad = dates.copy()
    bad[10] = bad[9]
    with pytest.raises(ValueError, match="strictly increasing"):
        run_backtest(x, bad, names, methods=["historical"], confidences=[0.99], window=100)
    y = x.copy()
    y[2, 5] = np.inf
    with pytest.raises(ValueError, match="portfolio 'east' on 2023-01-07"):
        run_backtest(y, dates, names, methods=["historical"], confidences=[0.99], window=100)
    with pytest.raises(ConfigError, match="listed twice"):
        run_backtest(x, dates, names, methods=["historical", "historical"], confidences=[0.99], window=100)


def _write(tmp_path, text):
    path = tmp_path / "pnl_actual.csv"
    path.write_text(text)
    return path


def test_actual_pnl_replaces_the_hypothetical(setup, tmp_path):
    x, dates, names = setup
    days = dates[-3:]
    lines = ["portfolio,date,pnl,desk"]
    for p, name in enumerate(names):
        for j, d in enumerate(days):
            lines.append(f"{name},{d},{100.0 * p + j},x")
    lines.append(f"west,{days[0]},5.0,x")  # unknown portfolio: warned and ignored
    lines.append(f"north,2020-01-01,5.0,x")  # outside the window: ignored
    path = _write(tmp_path, "\n".join(lines) + "\n")
    with pytest.warns(DataQualityWarning) as record:
        actual = read_actual_pnl(path, names, days)
    assert any("extra column" in str(w.message) for w in record)
    assert any("west" in str(w.message) for w in record)
    np.testing.assert_array_equal(actual, [[0, 1, 2], [100, 101, 102], [200, 201, 202]])
    res = run_backtest(
        x, dates, names, methods=["historical"], confidences=[0.99], window=100, days=3, actual_pnl=actual
    )
    assert res.pnl_source == "actual"
    assert summary_rows(res)[0]["pnl_source"] == "actual"


@pytest.mark.parametrize(
    ("body", "match"),
    [
        ("date,pnl\n", "missing column\\(s\\) \\['portfolio'\\]"),
        ("date,portfolio,pnl\n2023-02-30,north,1\n", "row 2, column 'date': not a calendar date"),
        ("date,portfolio,pnl\n02/01/2023,north,1\n", "row 2, column 'date': date must be YYYY-MM-DD"),
        ("date,portfolio,pnl\n2023-01-02,north,abc\n", "row 2, column 'pnl': P&L is not a number"),
        ("date,portfolio,pnl\n2023-01-02,north,nan\n", "row 2, column 'pnl': P&L must be finite"),
        ("date,portfolio,pnl\n2023-01-02,north,1\n2023-01-02,north,2\n", "row 3, column 'pnl': second P&L"),
        ("date,portfolio,pnl\n2023-01-02,north\n", "row 2: 2 fields"),
        ("date,portfolio,pnl\n2023-01-02,north,1\n", "no actual P&L for 1 .*2023-01-03"),
        ("", "empty"),
    ],
)
def test_actual_pnl_errors_name_file_row_and_column(tmp_path, body, match):
    path = _write(tmp_path, body)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DataQualityWarning)
        with pytest.raises(InputError, match=match) as info:
            read_actual_pnl(path, ["north"], ["2023-01-02", "2023-01-03"])
    assert info.value.file == str(path)


def test_fallback_days_are_counted(garch_t):
    x = np.random.default_rng(0).uniform(-1, 1, (1, 300))  # CF not monotone everywhere
    dates = np.arange(np.datetime64("2022-01-03"), np.datetime64("2022-01-03") + 300)
    with pytest.warns(ModelWarning):
        res = run_backtest(x, dates, ["flat"], methods=["cornish_fisher"], confidences=[0.99], window=100, days=200)
    assert summary_rows(res)[0]["fallback_days"] == 200
