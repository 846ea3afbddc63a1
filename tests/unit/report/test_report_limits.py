from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import report_dbfixture as fx

from tailtrace.errors import DataQualityWarning, InputError
from tailtrace.report.limits import limit_utilisation, read_limits


def _write(tmp_path: Path, text: str) -> Path:
    path = tmp_path / "limits.csv"
    path.write_text(text, encoding="utf-8")
    return path


def test_reads_rows_with_line_numbers_and_default_method(tmp_path: Path) -> None:
    path = _write(tmp_path, "portfolio,metric,confidence,horizon_days,limit,method\n"
                            "book_a,VaR,0.99,1,1000000,\n"
                            "\n"
                            "book_b,es,0.975,10,2.5e6,monte_carlo\n")
    frame = read_limits(path, default_method="historical")
    assert list(frame["portfolio"]) == ["book_a", "book_b"]
    assert list(frame["metric"]) == ["var", "es"]
    assert list(frame["method"]) == ["historical", "monte_carlo"]
    assert list(frame["line"]) == [2, 4]  # the blank line 3 is skipped but still counted
    assert frame["limit"].tolist() == [1_000_000.0, 2_500_000.0]
    assert frame["horizon_days"].tolist() == [1, 10]


def test_method_column_is_optional(tmp_path: Path) -> None:
    path = _write(tmp_path, "portfolio,metric,confidence,horizon_days,limit\nbook_a,var,0.99,1,5\n")
    assert read_limits(path, default_method="ewma_normal")["method"].tolist() == ["ewma_normal"]


def test_header_only_gives_no_limits(tmp_path: Path) -> None:
    path = _write(tmp_path, "portfolio,metric,confidence,horizon_days,limit\n")
    assert read_limits(path, default_method="historical").empty


@pytest.mark.parametrize(
    ("row", "message"),
    [
        (",var,0.99,1,5", r"row 2, column 'portfolio': portfolio is empty"),
        ("book,cvar,0.99,1,5", r"row 2, column 'metric': metric must be 'var' or 'es' \(found 'cvar'\)"),
        ("book,var,99,1,5", r"row 2, column 'confidence': confidence must lie strictly between 0 and 1"),
        ("book,var,abc,1,5", r"row 2, column 'confidence': not a number \(found 'abc'\)"),
        ("book,var,0.99,0,5", r"row 2, column 'horizon_days': horizon_days must be a positive whole number"),
        ("book,var,0.99,2.5,5", r"row 2, column 'horizon_days'"),
        ("book,var,0.99,1,-5", r"row 2, column 'limit': limit must be a positive amount"),
        ("book,var,0.99,1,inf", r"row 2, column 'limit': must be a finite number"),
        ("book,var,0.99,1,5,extra", r"row 2: more cells than header columns"),
    ],
)
def test_bad_cells_name_file_row_and_column(tmp_path: Path, row: str, message: str) -> None:
    path = _write(tmp_path, "portfolio,metric,confidence,horizon_days,limit\n" + row + "\n")
    with pytest.raises(InputError, match=f"file {path}, " + message):
        read_limits(path, default_method="historical")


def test_missing_column_names_the_header(tmp_path: Path) -> None:
    path = _write(tmp_path, "portfolio,metric,confidence,limit\nbook,var,0.99,5\n")
    with pytest.raises(InputError, match=r"row 1, column 'horizon_days': missing column"):
        read_limits(path, default_method="historical")


def test_duplicate_limit_names_both_lines(tmp_path: Path) -> None:
    # Same key once with the default method spelled out and once implied.
    path = _write(tmp_path, "portfolio,metric,confidence,horizon_days,limit,method\n"
                            "book,var,0.99,1,5,historical\nbook,VAR,0.990,1,7,\n")
    with pytest.raises(InputError, match=r"row 3, column 'portfolio': limit defined twice \(first on line 2\)"):
        read_limits(path, default_method="historical")


def test_missing_file(tmp_path: Path) -> None:
    with pytest.raises(InputError, match="limits file not found"):
        read_limits(tmp_path / "nope.csv", default_method="historical")


def test_unknown_column_warns(tmp_path: Path) -> None:
    path = _write(tmp_path, "portfolio,metric,confidence,horizon_days,limit,owner\nbook,var,0.99,1,5,desk 4\n")
    with pytest.warns(DataQualityWarning, match="unknown columns"):
        assert len(read_limits(path, default_method="historical")) == 1


def _figures() -> pd.DataFrame:
    return pd.DataFrame(dict(
        portfolio=["a", "a", "b", "c"], method=["historical"] * 4, confidence=[0.99, 0.975, 0.99, 0.99],
        horizon_days=[1, 1, 10, 1], var=[120.0, 90.0, 50.0, 100.0], es=[150.0, 110.0, 60.0, 130.0],
    ))


def _limits(rows: list[tuple[object, ...]]) -> pd.DataFrame:
    frame = pd.DataFrame(rows, columns=["portfolio", "metric", "confidence", "horizon_days", "limit", "method"])
    frame["line"] = np.arange(2, 2 + len(frame))
    return frame


def test_utilisation_status_and_order() -> None:
    limits = _limits([
        ("a", "var", 0.975, 1, 1000.0, "historical"),  # 9% -> ok
        ("c", "var", 0.99, 1, 100.0, "historical"),  # exactly at the limit -> near, not breach
        ("b", "es", 0.99, 10, 40.0, "historical"),  # 150% -> breach
        ("a", "var", 0.99, 1, 100.0, "historical"),  # 120% -> breach
        ("a", "var", 0.99, 10, 100.0, "historical"),  # no such figure
        ("a", "es", 0.99, 1, 160.0, "historical"),  # 93.75% -> near
        ("a", "var", 0.99, 1, 500.0, "monte_carlo"),  # method not computed
    ])
    out = limit_utilisation(limits, _figures(), near_limit=0.9)
    assert out["status"].tolist() == ["breach", "breach", "no figure", "no figure", "near", "near", "ok"]
    assert out["utilisation"].iloc[:2].tolist() == [1.5, 1.2]  # hand-computed: 60/40, 120/100
    assert out["headroom"].iloc[0] == -20.0
    near = out[out["status"] == "near"]
    assert near["utilisation"].tolist() == [1.0, 0.9375]


def test_confidence_matches_despite_float_noise() -> None:
    limits = _limits([("a", "var", 0.1 * 9.9, 1, 100.0, "historical")])  # 0.9900000000000001
    out = limit_utilisation(limits, _figures(), near_limit=0.9)
    assert out["figure"].tolist() == [120.0]


def test_without_figures_every_limit_is_unchecked() -> None:
    limits = _limits([("a", "var", 0.99, 1, 100.0, "historical")])
    assert limit_utilisation(limits, None, near_limit=0.9)["status"].tolist() == ["no figure"]


def test_fixture_limits_file_round_trip(tmp_path: Path) -> None:
    path = fx.write_limits(tmp_path / "l.csv", [(fx.EVIL, "var", 0.99, 1, 10.0, "")], method_column=True)
    frame = read_limits(path, default_method="historical")
    assert frame["portfolio"].tolist() == [fx.EVIL]
