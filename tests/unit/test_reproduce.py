"""Bit-for-bit comparison of figure tables."""

from __future__ import annotations

import numpy as np
import pyarrow as pa

from tailtrace.figures import FIGURE_SCHEMA
from tailtrace.reproduce import Difference, ReproduceReport, diff_figures, format_reproduce


def _figures(var: list[float]) -> pa.Table:
    n = len(var)
    return pa.table({
        "as_of": pa.array(np.full(n, np.datetime64("2024-08-09", "D")), pa.date32()), "portfolio": [f"P{i}" for i in range(n)],
        "method": ["historical"] * n, "confidence": [0.99] * n, "horizon_days": pa.array([10] * n, pa.int32()),
        "var": var, "es": [1.0] * n, "currency": ["EUR"] * n, "scaling": ["sqrt_time"] * n,
        "n_obs": pa.array([60] * n, pa.int32()), "var_se": pa.nulls(n, pa.float64()), "es_se": pa.nulls(n, pa.float64()),
        "var_lo": pa.nulls(n, pa.float64()), "var_hi": pa.nulls(n, pa.float64()), "diagnostics": ["{}"] * n,
    }, schema=FIGURE_SCHEMA)


def test_identical_tables_have_no_differences_even_with_nan():
    t = _figures([1.5, float("nan")])
    assert diff_figures(t, t, "x") == []


def test_one_ulp_and_signed_zero_count_as_differences():
    a = _figures([1.5, 0.0])
    b = _figures([np.nextafter(1.5, 2.0), -0.0])
    found = diff_figures(a, b, "risk_figures")
    assert [(d.key.split()[1], d.column) for d in found] == [("P0", "var"), ("P1", "var")]


def test_missing_rows_and_run_id_is_ignored():
    a = _figures([1.0, 2.0]).append_column("run_id", pa.array(["r1", "r1"]))
    b = _figures([1.0]).append_column("run_id", pa.array(["r2"]))
    found = diff_figures(a, b, "risk_figures")
    assert found == [Difference("risk_figures", "2024-08-09 P1 historical 0.99 10d", None, "present", "absent")]


def test_report_text_lists_differences_and_the_verdict():
    d = Difference("figure file", "2024-08-09 P0 historical 0.99 10d", "var", 1.0, 1.25)
    report = ReproduceReport("r1", "r2", ({"path": "data/prices/fx.csv", "source": "live", "as_recorded": False,
                                           "restored_sha256": "abc"},),
                             ({"method": "historical", "recorded": "a" * 64, "rebuilt": "b" * 64, "identical": False},),
                             4, (d,), ("run id differs",))
    text = format_reproduce(report)
    assert "CHANGED: sha256 now abc" in text and "figures historical: DIFFER" in text
    assert "DIFF [figure file] 2024-08-09 P0 historical 0.99 10d var: stored 1.0, rebuilt 1.25 (diff +0.25)" in text
    assert text.endswith("1 difference(s) found.") and not report.identical
