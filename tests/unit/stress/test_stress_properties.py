"""Properties every stress figure of a linear book must have (hypothesis)."""

from __future__ import annotations

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from tailtrace.estimators.base import linear_revalue
from tailtrace.stress.historical import worst_losses
from tailtrace.stress.liquidity import liquidity_adjusted_es
from tailtrace.stress.reverse import ShockGroup, group_loadings, reverse_stress
from tailtrace.stress.instruments import InstrumentMeta
from tailtrace.stress.stressed import find_stressed_window

META = InstrumentMeta.from_columns(["A", "B", "C"], ["equity", "bond", "commodity"], ["EUR"] * 3, "EUR")
DATES = np.busday_offset(np.datetime64("2019-01-02"), np.arange(300), roll="forward")


@settings(max_examples=25, deadline=None)
@given(seed=st.integers(0, 2**32 - 1), k=st.floats(0.01, 100.0))
def test_scaling_positions_scales_every_figure(seed, k):
    rng = np.random.default_rng(seed)
    r = rng.standard_t(4, size=(300, 3)) * 0.01
    v = rng.normal(0, 1000, size=(2, 3))
    names = ("a", "b")
    base, scaled = linear_revalue(v), linear_revalue(k * v)
    w1, wk = (worst_losses(r, DATES, f, [1, 10], portfolios=names) for f in (base, scaled))
    np.testing.assert_allclose(wk.pnl, k * w1.pnl, rtol=1e-9)
    lh = np.array([10, 20, 60])
    e1, ek = (liquidity_adjusted_es(r, f, lh, portfolios=names) for f in (base, scaled))
    np.testing.assert_allclose(ek.es, k * e1.es, rtol=1e-9)
    # the cascade never falls below the base ES
    assert np.all(e1.es >= e1.es_subset[:, 0] - 1e-12)
    s1, sk = (find_stressed_window(r, DATES, f, portfolios=names, length_days=100) for f in (base, scaled))
    np.testing.assert_allclose(sk.es, k * s1.es, rtol=1e-9)


@settings(max_examples=25, deadline=None)
@given(value=st.floats(1.0, 1e7), share=st.floats(0.001, 0.98), k=st.floats(0.1, 10.0))
def test_reverse_shock_is_scale_free_on_a_long_position(value, share, k):
    groups = (ShockGroup("all", "all"),)
    c = group_loadings(META, groups)
    v = np.array([[value, 0.0, 0.0]])
    kw = dict(portfolios=("p",), groups=groups)
    one = reverse_stress(linear_revalue(v), c, np.array([share * value]), **kw)
    big = reverse_stress(linear_revalue(k * v), c, np.array([share * value * k]), **kw)
    assert abs(one.shock[0, 0] + share) < 1e-9 and abs(big.shock[0, 0] - one.shock[0, 0]) < 1e-9
