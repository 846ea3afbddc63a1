from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from tailtrace.report.tables import disagreement_flags, method_order, quality_table, top_contributors


def _figures(values: dict[str, float], *, portfolio: str = "book", es_factor: float = 1.2) -> pd.DataFrame:
    return pd.DataFrame(dict(
        portfolio=portfolio, method=list(values), confidence=0.99, horizon_days=1,
        var=list(values.values()), es=[v * es_factor for v in values.values()],
    ))


def test_method_order_puts_headline_first() -> None:
    assert method_order(["b", "historical", "a", "b"], "historical") == ["historical", "a", "b"]
    assert method_order(["b", "a"], "historical") == ["a", "b"]


def test_disagreement_ratio_and_flag() -> None:
    values = {"historical": 100.0, "parametric_normal": 80.0, "ewma_normal": 130.0}
    out = disagreement_flags(_figures(values), ratio=1.5)
    assert out["metric"].tolist() == ["var", "es"]
    var = out.iloc[0]
    # Independent computation of max/min with plain Python.
    assert var["ratio"] == pytest.approx(max(values.values()) / min(values.values()))
    assert (var["max_method"], var["min_method"]) == ("ewma_normal", "parametric_normal")
    assert var["ratio"] == 1.625 and bool(var["flagged"])  # 130 / 80 exceeds 1.5
    assert not disagreement_flags(_figures(values), ratio=1.7)["flagged"].any()


def test_disagreement_flags_only_above_ratio() -> None:
    calm = disagreement_flags(_figures({"a": 100.0, "b": 149.0}), ratio=1.5)
    wide = disagreement_flags(_figures({"a": 100.0, "b": 151.0}), ratio=1.5)
    assert not calm["flagged"].any()
    assert wide["flagged"].all()


def test_disagreement_with_non_positive_figure() -> None:
    out = disagreement_flags(_figures({"a": -5.0, "b": 10.0}), ratio=1.5)
    assert np.isnan(out["ratio"]).all()
    assert out["flagged"].all()
    assert out["note"].iloc[0] == "one method shows no loss"
    both_gain = disagreement_flags(_figures({"a": -5.0, "b": -1.0}), ratio=1.5)
    assert not both_gain["flagged"].any()


def test_single_method_and_nan_are_not_compared() -> None:
    assert disagreement_flags(_figures({"a": 100.0}), ratio=1.5).empty
    out = disagreement_flags(_figures({"a": 100.0, "b": float("nan"), "c": 300.0}), ratio=1.5)
    assert out["n_methods"].tolist() == [2, 2]
    assert out["ratio"].tolist() == [3.0, 3.0]


def _contrib(method: str = "historical") -> pd.DataFrame:
    comps = [50.0, -30.0, 10.0, 70.0, 5.0]
    return pd.DataFrame(dict(
        portfolio="book", method=method, confidence=0.99, horizon_days=1, instrument=list("abcde"),
        position_value=1000.0, marginal_var=0.01, component_var=comps, incremental_var=comps,
        standalone_var=[abs(c) for c in comps], diversification_benefit=60.0,
    ))


def test_top_contributors_rank_by_absolute_component() -> None:
    view = top_contributors(_contrib(), headline="historical", confidence=None, top_n=3)
    assert view is not None
    assert view.rows["instrument"].tolist() == ["d", "a", "b"]
    assert view.totals["total_component"].tolist() == [105.0]
    assert view.rows["share"].tolist() == pytest.approx([70 / 105, 50 / 105, -30 / 105])
    assert view.note == ""


def test_top_contributors_fall_back_to_another_method() -> None:
    view = top_contributors(_contrib("parametric_normal"), headline="historical", confidence=0.99, top_n=10)
    assert view is not None and view.method == "parametric_normal"
    assert "historical has no decomposition" in view.note
    assert len(view.rows) == 5


def test_top_contributors_pick_highest_confidence_and_shortest_horizon() -> None:
    frame = pd.concat([_contrib(), _contrib().assign(confidence=0.975), _contrib().assign(horizon_days=10)])
    view = top_contributors(frame, headline="historical", confidence=None, top_n=2)
    assert view is not None and (view.confidence, view.horizon_days) == (0.99, 1)
    picked = top_contributors(frame, headline="historical", confidence=0.975, top_n=2)
    assert picked is not None and picked.confidence == 0.975


def test_quality_most_severe_first() -> None:
    frame = pd.DataFrame(dict(file=["f1", "f2", "f3", "f4"], instrument=["x"] * 4, check=["c"] * 4,
                              first_date=[None] * 4, severity=["info", "Warning", "odd", "error"]))
    assert quality_table(frame)["file"].tolist() == ["f4", "f2", "f1", "f3"]
