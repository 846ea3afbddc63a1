"""Properties every method must have (hypothesis, seeded numpy data)."""

import json

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from tailtrace.estimators.registry import METHODS, get_estimator
from tailtrace.estimators.samples import linear_sample

CONF = [0.9, 0.95, 0.975, 0.99]
HORIZONS = [1, 10]
OPTIONS = {"monte_carlo": {"paths": 2000}, "monte_carlo_t": {"paths": 2000}}

markets = st.fixed_dictionaries(
    {
        "seed": st.integers(0, 2**32 - 1),
        "window": st.integers(60, 300),
        "instruments": st.integers(1, 3),
        "portfolios": st.integers(1, 3),
        "fat": st.booleans(),
        "k": st.floats(0.01, 100.0),
        "cash": st.floats(-5e6, 5e6),
    }
)


def _market(m):
    rng = np.random.default_rng(m["seed"])
    n = m["instruments"]
    history = rng.standard_normal((300, n)) * rng.uniform(0.005, 0.03, n)
    if m["fat"]:
        history *= np.sqrt(2 / rng.chisquare(4, size=(300, 1)))
    values = rng.uniform(-2e6, 2e6, (m["portfolios"], n))
    return history, values


def _run(method, history, values, window):
    sample = linear_sample(history[-window:], values, history=history)
    return get_estimator(method)(sample, CONF, HORIZONS, options=OPTIONS.get(method, {}), seed=123)


@pytest.mark.filterwarnings("ignore::tailtrace.errors.ModelWarning")
@pytest.mark.parametrize("method", sorted(METHODS))
@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(m=markets)
def test_var_es_properties(method, m):
    history, values = _market(m)
    base = _run(method, history, values, m["window"])
    size = np.abs(base.var).max() + 1.0
    # VaR rises (weakly) with confidence; ES is at least VaR
    assert np.all(np.diff(base.var, axis=1) >= -1e-9 * size)
    assert np.all(base.es >= base.var - 1e-9 * size)
    # scaling every position by k > 0 scales VaR and ES by k
    scaled = _run(method, history, m["k"] * values, m["window"])
    assert scaled.var == pytest.approx(m["k"] * base.var, rel=1e-6, abs=1e-9 * m["k"] * size)
    assert scaled.es == pytest.approx(m["k"] * base.es, rel=1e-6, abs=1e-9 * m["k"] * size)
    # a riskless cash position (zero returns) changes nothing; rel 1e-6 because a fitted ν sits on a flat
    # likelihood, where rounding-level changes in the data move it by about 1e-8
    with_cash = _run(
        method,
        np.hstack([history, np.zeros((len(history), 1))]),
        np.hstack([values, np.full((len(values), 1), m["cash"])]),
        m["window"],
    )
    assert with_cash.var == pytest.approx(base.var, rel=1e-6, abs=1e-9 * size)
    assert with_cash.es == pytest.approx(base.es, rel=1e-6, abs=1e-9 * size)


@pytest.mark.filterwarnings("ignore::tailtrace.errors.ModelWarning")
@pytest.mark.parametrize("method", sorted(METHODS))
def test_diagnostics_are_strict_json(method):
    m = {"seed": 1, "window": 280, "instruments": 3, "portfolios": 2, "fat": True}
    history, values = _market(m)
    est = _run(method, history, values, m["window"])
    json.dumps(est.diagnostics, allow_nan=False)
    assert est.var.shape == (2, len(CONF), len(HORIZONS)) and np.all(np.isfinite(est.var))
