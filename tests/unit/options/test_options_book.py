"""Book builder: full revaluation, Taylor terms and the sensitivities table."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from option_book_fixtures import AS_OF, BASE, COLUMNS, PRICES, instruments_table, positions_table

import tailtrace.options.book as book_module
from tailtrace.errors import InputError
from tailtrace.estimators.base import linear_revalue
from tailtrace.options import SENSITIVITY_COLUMNS, build_book, option_price

N = len(COLUMNS)


def _build(positions=None, instruments=None, prices=PRICES, **kw):
    return build_book(positions_table() if positions is None else positions,
                      instruments_table() if instruments is None else instruments,
                      prices, as_of=AS_OF, columns=COLUMNS, base_currency=BASE, **kw)


def test_linear_book_is_exactly_linear_revalue():
    pos = positions_table().loc[lambda t: t["portfolio"] == "linear"]
    book = _build(pos)
    shocks = np.random.default_rng(1).normal(0, 0.02, (50, N))
    np.testing.assert_array_equal(book.revalue(shocks, 10), linear_revalue(book.linear_values)(shocks, 10))
    np.testing.assert_array_equal(book.exposures, book.linear_values)
    assert book.linear_values[0, 0] == pytest.approx(-300 * PRICES["EQ.EU"])


def test_exposures_and_gammas_are_derivatives_of_revalue(demo_book):
    # Central finite differences of the full revaluation, no ageing (horizon 0).
    eps = 1e-4
    eye = np.eye(N) * eps
    plus, minus = demo_book.revalue(eye, 0), demo_book.revalue(-eye, 0)
    np.testing.assert_allclose(demo_book.exposures, (plus - minus) / (2 * eps), rtol=1e-6,
                               atol=1e-6 * np.abs(demo_book.exposures).max())
    ii, jj = (a.ravel() for a in np.meshgrid(np.arange(N), np.arange(N), indexing="ij"))

    def at(si, sj):  # P&L after shocking factor i by si*eps and factor j by sj*eps
        shock = np.zeros((N * N, N))
        np.add.at(shock, (np.arange(N * N), ii), si * eps)
        np.add.at(shock, (np.arange(N * N), jj), sj * eps)
        return demo_book.revalue(shock, 0).reshape(-1, N, N)

    fd = (at(1, 1) - at(1, -1) - at(-1, 1) + at(-1, -1)) / (4 * eps * eps)
    scale = np.abs(demo_book.gammas).max()
    np.testing.assert_allclose(demo_book.gammas, fd, rtol=0, atol=1e-5 * scale)
    np.testing.assert_allclose(demo_book.gammas, np.swapaxes(demo_book.gammas, 1, 2))
    # The EUR put carries an FX exposure beyond its delta-equivalent (column FX.EUR).
    assert demo_book.exposures[0, COLUMNS.index("FX.EUR")] != 0.0


def test_ageing_over_the_horizon(demo_book):
    # No shock: the P&L is pure time decay over h * 7/5 calendar days.
    zero = np.zeros((1, N))
    assert demo_book.revalue(zero, 0)[:, 0] == pytest.approx(0.0, abs=1e-9)
    decay_1d = demo_book.revalue(zero, 1)[:, 0]
    np.testing.assert_allclose(decay_1d, demo_book.thetas * 1.4, rtol=1e-2)  # theta is first order in time
    o = demo_book.held
    tau = o.tau - 14 / 365
    expected = demo_book.units @ (o.fx * (option_price(o.spot, o.strike, tau, o.vol, o.rate, o.carry, o.is_call)
                                          - o.greeks.price))
    np.testing.assert_allclose(demo_book.revalue(zero, 10)[:, 0], expected, rtol=1e-12)


def test_option_expiring_inside_horizon_settles_at_intrinsic():
    inst = instruments_table(**{"CALL.US": {"expiry": "2025-01-03", "strike": 45.0}})
    pos = pd.DataFrame([("p", "CALL.US", 1.0)], columns=["portfolio", "instrument", "quantity"])
    book = _build(pos, inst)
    shock = np.zeros((1, N))
    shock[0, COLUMNS.index("EQ.US")] = np.log(1.1)  # EQ.US to 55
    pnl = book.revalue(shock, 10)[0, 0]  # 14 calendar days > 3 days to expiry
    assert pnl == pytest.approx(100 * ((55.0 - 45.0) - book.held.greeks.price[0]), rel=1e-12)


def test_vol_shock_matches_vega_column(demo_book):
    vol_shocks = np.full((1, N), 1e-4)  # 0.01 vol point on every underlying
    change = demo_book.revalue(np.zeros((1, N)), 0, vol_shocks=vol_shocks)[:, 0]
    table = demo_book.sensitivities
    vega = table.groupby("portfolio", sort=False)["vega"].sum().reindex(demo_book.portfolios).to_numpy()
    np.testing.assert_allclose(change, vega * 0.01, rtol=1e-3, atol=1e-9)
    floored = demo_book.revalue(np.zeros((1, N)), 0, vol_shocks=np.full((1, N), -5.0))
    assert np.isfinite(floored).all()


def test_sensitivities_table_adds_up(demo_book):
    t = demo_book.sensitivities
    assert tuple(t.columns) == SENSITIVITY_COLUMNS
    assert len(t) == len(positions_table())
    by_p = t.groupby("portfolio", sort=False).sum(numeric_only=True).reindex(demo_book.portfolios)
    np.testing.assert_allclose(by_p["value"], demo_book.market_values, rtol=1e-12)
    np.testing.assert_allclose(by_p["theta"], demo_book.thetas, rtol=1e-12)
    # delta + fx_delta per risk factor reproduce the exposures
    expo = np.zeros_like(demo_book.exposures)
    p = t["portfolio"].map({n: i for i, n in enumerate(demo_book.portfolios)}).to_numpy()
    np.add.at(expo, (p, t["underlying"].map({c: j for j, c in enumerate(COLUMNS)}).to_numpy()), t["delta"])
    fx = t["currency"] == "EUR"
    np.add.at(expo, (p[fx], COLUMNS.index("FX.EUR")), t.loc[fx, "fx_delta"])
    np.testing.assert_allclose(expo, demo_book.exposures, rtol=1e-10, atol=1e-6)
    put = t.loc[(t["portfolio"] == "hedged") & (t["instrument"] == "PUT.EU")].iloc[0]
    assert put["model"] == "bsm" and put["currency"] == "EUR" and put["option_type"] == "put"
    assert put["underlying_price"] == pytest.approx(80.0) and put["fx_rate"] == pytest.approx(1.04)
    assert put["delta"] < 0 and put["gamma"] > 0 and put["vega"] > 0 and put["theta"] < 0
    assert put["value"] == pytest.approx(10000 * put["price"] * 1.04)
    fut = t.loc[t["instrument"] == "FCALL.EU"].iloc[0]
    assert fut["model"] == "black76" and fut["multiplier"] == 10.0
    assert t.loc[t["instrument"] == "FXPUT.EUR", "model"].iloc[0] == "garman_kohlhagen"


def test_greek_units_in_table():
    # One long US call: delta in base = n m Δ S, gamma = n m Γ S², vega per vol point, theta per day.
    pos = pd.DataFrame([("p", "CALL.US", 2.0)], columns=["portfolio", "instrument", "quantity"])
    book = _build(pos)
    row = book.sensitivities.iloc[0]
    g = book.held.greeks
    assert row["delta"] == pytest.approx(200 * g.delta[0] * 50.0)
    assert row["gamma"] == pytest.approx(200 * g.gamma[0] * 50.0 ** 2)
    assert row["vega"] == pytest.approx(200 * g.vega[0] / 100)
    assert row["theta"] == pytest.approx(200 * g.theta[0] / 365)
    assert row["fx_delta"] == 0.0


def test_chunked_revaluation_matches_one_block(demo_book, monkeypatch):
    shocks = np.random.default_rng(4).normal(0, 0.03, (37, N))
    whole = demo_book.revalue(shocks, 5)
    monkeypatch.setattr(book_module, "_CHUNK_ELEMENTS", 8)  # two scenarios per block
    np.testing.assert_allclose(demo_book.revalue(shocks, 5), whole, rtol=1e-13, atol=1e-9)


def test_portfolio_order_and_duplicate_lines():
    pos = pd.concat([positions_table(), pd.DataFrame([("mixed", "EQ.US", 500.0)],
                                                       columns=["portfolio", "instrument", "quantity"])])
    book = _build(pos, portfolios=["linear", "mixed", "hedged"])
    assert book.portfolios == ("linear", "mixed", "hedged")
    assert book.linear_values[1, COLUMNS.index("EQ.US")] == pytest.approx(2500 * 50.0)


@pytest.mark.parametrize(
    "kwargs, file, match",
    [
        (dict(positions=pd.DataFrame([("p", "EQ.XX", 1.0)], columns=["portfolio", "instrument", "quantity"])),
         "positions.csv", "row 2, column 'instrument': instrument is neither an option"),
        (dict(positions=pd.DataFrame([("p", "EQ.US", "ten")], columns=["portfolio", "instrument", "quantity"])),
         "positions.csv", "row 2, column 'quantity': quantity must be a finite number"),
        (dict(prices={k: v for k, v in PRICES.items() if k != "EQ.EU"}), "prices", "price at as_of for 'EQ.EU'"),
        (dict(instruments=instruments_table(**{"FXPUT.EUR": {"currency": "EUR"}}).assign(
            currency=lambda t: np.where(t["instrument"] == "FX.EUR", "EUR", t["currency"]))),
         "instruments.csv", "column 'currency': an FX option is priced in the base currency"),
    ],
)
def test_bad_book_inputs(kwargs, file, match):
    with pytest.raises(InputError, match=match) as info:
        _build(**kwargs)
    assert info.value.file == file


def test_missing_fx_series_for_option_currency():
    columns = tuple(c for c in COLUMNS if c != "FX.EUR")
    pos = positions_table().loc[lambda t: t["instrument"] == "PUT.EU"]
    inst = instruments_table().loc[lambda t: t["instrument"] != "FXPUT.EUR"]
    with pytest.raises(InputError, match="row 6, column 'currency': an option in EUR needs the returns of FX.EUR"):
        build_book(pos, inst, PRICES, as_of=AS_OF, columns=columns, base_currency=BASE)


def test_explicit_fx_rates_override_prices():
    pos = positions_table().loc[lambda t: t["instrument"] == "PUT.EU"]
    book = _build(pos, fx_rates={"EUR": 1.30})
    assert book.held.spot[0] == pytest.approx(PRICES["EQ.EU"] / 1.30)


def test_risk_sample_fields(demo_book):
    returns = np.random.default_rng(3).normal(0, 0.01, (20, N))
    fields = demo_book.risk_sample_fields(returns)
    np.testing.assert_array_equal(fields["pnl"], demo_book.revalue(returns, 1))
    assert fields["values"] is demo_book.exposures and fields["gammas"] is demo_book.gammas
    assert fields["revalue"] == demo_book.revalue


def test_table_types_for_storage(demo_book):
    t = demo_book.sensitivities
    assert str(t["expiry"].dtype).startswith("datetime64")
    assert t.loc[t["model"] == "linear", "expiry"].isna().all()
    assert t.loc[t["instrument"] == "PUT.EU", "expiry"].iloc[0] == pd.Timestamp("2025-06-30")
    numeric = [c for c in SENSITIVITY_COLUMNS if c not in
               ("portfolio", "instrument", "underlying", "model", "currency", "option_type", "expiry")]
    assert all(np.issubdtype(t[c].dtype, np.floating) for c in numeric)


def test_specs_validated_earlier_are_rechecked_for_expiry():
    # Specs parsed for an earlier date must not be priced silently after expiry.
    from tailtrace.options import validate_option_rows

    specs = validate_option_rows(instruments_table(), file="instruments.csv", known_instruments=COLUMNS,
                                 as_of=AS_OF)
    pos = pd.DataFrame([("p", "CALL.US", 1.0)], columns=["portfolio", "instrument", "quantity"])
    with pytest.raises(InputError, match=r"row 7, column 'expiry': option has expired"):
        build_book(pos, instruments_table(), PRICES, as_of="2025-03-21", columns=COLUMNS, base_currency=BASE,
                   options=specs)
