"""Sequential-substitution attribution: exact sums, and figures recomputed from a state."""

from __future__ import annotations

import decimal

import numpy as np
import pyarrow as pa
import pytest
from scipy.stats import norm

from tailtrace.errors import InputError
from tailtrace.explain import Parameters, State, attribute, figure_value
from tailtrace.market import MarketData
from tailtrace.recorded import FigureKey


def test_components_sum_exactly_to_the_total():
    rng = np.random.default_rng(5)
    for _ in range(200):
        values = rng.lognormal(8, 1.5, size=(6, 2))  # awkward magnitudes: float sums would round
        chain = [("start", tuple(values[0]))] + [(k, tuple(v)) for k, v in
                                                 zip(["code", "positions", "market", "parameters", "code"], values[1:])]
        parts = attribute(chain)
        assert [p["component"] for p in parts] == ["code", "positions", "market", "parameters"]
        with decimal.localcontext() as ctx:
            ctx.prec = 1200
            for m, j in (("var", 0), ("es", 1)):
                total = decimal.Decimal(values[-1, j]) - decimal.Decimal(values[0, j])
                assert sum(decimal.Decimal(p[f"{m}_exact"]) for p in parts) == total
                for p in parts:
                    assert p[m] == float(decimal.Decimal(p[f"{m}_exact"]))  # the nearest double of the exact amount


def test_no_change_gives_exact_zeros():
    parts = attribute([("start", (1.0, 2.0)), ("positions", (1.0, 2.0)), ("market", (1.0, 2.0))])
    assert [(p["var_exact"], p["es_exact"]) for p in parts] == [("0", "0"), ("0", "0")]


def _state(quantities: dict[str, float], as_of_row: int = 70) -> tuple[State, np.ndarray]:
    rng = np.random.default_rng(9)
    n_days, names = 90, ("EQ.A", "EQ.B")
    base = 100 * np.exp(np.cumsum(rng.normal(0, [0.01, 0.02], size=(n_days, 2)), axis=0))
    log_returns = np.full_like(base, np.nan)
    log_returns[1:] = np.diff(np.log(base), axis=0)
    dates = np.arange(np.datetime64("2024-01-01"), np.datetime64("2024-01-01") + n_days)
    market = MarketData(dates=dates, instruments=names, local=None, base=base, observed=None, log_returns=log_returns)
    positions = pa.table({"portfolio": ["P"] * len(quantities), "instrument": list(quantities),
                          "quantity": [float(q) for q in quantities.values()],
                          "row": list(range(2, 2 + len(quantities)))})
    params = Parameters(window_days=40, confidences=(0.95, 0.99), horizons=(1, 10), options={"include_mean": False},
                        seed=1)
    return State(positions, "positions.csv", market, dates[as_of_row], params), base


def _normal_var(base: np.ndarray, quantities: np.ndarray, end: int, window: int, c: float, h: int) -> float:
    # Normal VaR = σ z √h with σ² = vᵀΣv (REFERENCES.md: "Normal: VaR = −μ + σ·z", zero mean; Jorion ch. 7)
    prices = base[end - window: end + 1]
    simple = prices[1:] / prices[:-1] - 1
    v = quantities * base[end]
    return float(np.sqrt(v @ np.cov(simple, rowvar=False, ddof=1) @ v) * norm.ppf(c) * np.sqrt(h))


def test_a_pure_position_change_is_all_positions():
    key = FigureKey("2024-03-11", "P", "parametric_normal", 0.99, 10)
    s1, base = _state({"EQ.A": 100, "EQ.B": -30})
    s2, _ = _state({"EQ.A": 100, "EQ.B": -45})
    v1, v2 = figure_value(s1, key), figure_value(s2, key)
    # independent check of both ends: price ratios and scipy's normal quantile
    assert v1[0] == pytest.approx(_normal_var(base, np.array([100, -30]), 70, 40, 0.99, 10), rel=1e-12)
    assert v2[0] == pytest.approx(_normal_var(base, np.array([100, -45]), 70, 40, 0.99, 10), rel=1e-12)
    # chain: positions, then market (unchanged), then parameters (unchanged)
    parts = {p["component"]: p for p in attribute([("start", v1), ("positions", v2), ("market", v2),
                                                   ("parameters", v2)])}
    assert parts["positions"]["var"] == v2[0] - v1[0] and parts["market"]["var"] == parts["parameters"]["var"] == 0


def test_a_state_that_cannot_be_valued_names_the_instrument():
    state, _ = _state({"EQ.A": 1.0})
    state = State(pa.table({"portfolio": ["P"], "instrument": ["EQ.Z"], "quantity": [1.0], "row": [2]}),
                  "positions.csv", state.market, state.as_of, state.params)
    with pytest.raises(InputError, match=r"positions.csv, column 'instrument': instrument has no prices .*EQ.Z"):
        figure_value(state, FigureKey("2024-03-11", "P", "parametric_normal", 0.99, 10))


def test_parameters_differences_name_what_changed():
    a = Parameters(60, (0.99,), (1,), {}, 1)
    b = Parameters(120, (0.99, 0.975), (1,), {"include_mean": True}, 1)
    assert a.differences(b) == ["window_days 60 -> 120", "options {} -> {'include_mean': True}"]
