from __future__ import annotations

import re

import numpy as np
import pandas as pd

from tailtrace.report import charts


def _contrib(names: list[str]) -> pd.DataFrame:
    return pd.DataFrame(dict(portfolio="p$1$", instrument=names, component_var=[30.0, -10.0, 5.0][: len(names)]))


def test_svg_is_deterministic_and_undated() -> None:
    rows = _contrib(["a", "b", "c"])
    first = charts.contributions_chart(rows, portfolios=["p$1$"], currency="EUR", label="x")
    second = charts.contributions_chart(rows, portfolios=["p$1$"], currency="EUR", label="x")
    assert first == second
    assert first.startswith("<?xml") and "<dc:date>" not in first


def test_dollar_signs_print_as_written_and_text_is_escaped() -> None:
    # With mathtext on, "$...$" would be typeset as math (or fail when unbalanced).
    svg = charts.contributions_chart(_contrib(["cost $5", "<b>x</b>", "$"]), portfolios=["p$1$"], currency="EUR",
                                     label="y")
    assert "cost $5" in svg and "p$1$" in svg
    assert "<b>x</b>" not in svg and "&lt;b&gt;x&lt;/b&gt;" in svg


def test_histogram_marks_var_and_es_and_hatches_the_tail() -> None:
    rng = np.random.default_rng(3)
    pnl = pd.DataFrame(dict(portfolio="book", pnl=rng.normal(0, 100, 500)))
    marks = pd.DataFrame(dict(portfolio=["book"], var=[233.0], es=[266.0]))
    svg = charts.pnl_distribution_chart(pnl, marks, portfolios=["book"], currency="EUR", label="m")
    assert "VaR 233" in svg and "ES 266" in svg and "losses beyond VaR" in svg
    unmarked = charts.pnl_distribution_chart(pnl, marks.iloc[:0], portfolios=["book"], currency="EUR", label="m")
    assert "VaR 233" not in unmarked


def test_short_amount_labels() -> None:
    assert [charts._short_amount(v) for v in (0, 950, 12_300, -4_500_000, 1.2e9)] == [
        "0", "950", "12.3k", "-4.5m", "1.2bn"]
    assert re.fullmatch(r"0\.\d+", charts._short_amount(0.25))
