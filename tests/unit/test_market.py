"""Calendar alignment, bounded carry-forward and FX conversion."""

import numpy as np
import pyarrow as pa
import pytest

from tailtrace.errors import InputError
from tailtrace.market import build_market, forward_fill_limited


def prices(rows):
    d, i, c = zip(*rows)
    return pa.table({"date": pa.array(np.array(d, dtype="datetime64[D]"), pa.date32()),
                     "instrument": pa.array(i), "close": pa.array(c, pa.float64())})


def instruments(rows):
    inst, ccy = zip(*rows)
    return pa.table({"instrument": list(inst), "asset_class": ["equity"] * len(inst), "currency": list(ccy),
                     "row": list(range(2, 2 + len(inst)))})


def test_forward_fill_respects_limit_and_leading_gaps():
    x = np.array([[np.nan], [1.0], [np.nan], [np.nan], [np.nan], [5.0]])
    out = forward_fill_limited(x, 2)
    assert np.isnan(out[0, 0]) and out[1, 0] == 1 and out[2, 0] == 1 and out[3, 0] == 1
    assert np.isnan(out[4, 0]) and out[5, 0] == 5


def test_fx_conversion_and_log_returns():
    p = prices([("2024-01-01", "US", 100.0), ("2024-01-02", "US", 110.0),
                ("2024-01-01", "FX.USD", 0.90), ("2024-01-02", "FX.USD", 0.95)])
    market, filled = build_market([("p.csv", p)], instruments([("US", "USD"), ("FX.USD", "EUR")]),
                                  base_currency="EUR", max_fill_days=3)
    j = market.column("US")
    assert market.base[:, j] == pytest.approx([90.0, 104.5])
    assert market.log_returns[1, j] == pytest.approx(np.log(110 / 100) + np.log(0.95 / 0.90))
    assert filled.num_rows == 0


def test_missing_fx_series_names_instruments_row():
    p = prices([("2024-01-01", "US", 100.0), ("2024-01-02", "US", 101.0)])
    with pytest.raises(InputError, match=r"instruments.csv, row 2, column 'currency'.*FX.USD"):
        build_market([("p.csv", p)], instruments([("US", "USD")]), base_currency="EUR", max_fill_days=3)


def test_instrument_in_two_files_is_rejected():
    a = prices([("2024-01-01", "X", 1.0)])
    b = prices([("2024-01-02", "X", 1.0)])
    with pytest.raises(InputError, match="also priced in a.csv"):
        build_market([("a.csv", a), ("b.csv", b)], instruments([("X", "EUR")]), base_currency="EUR", max_fill_days=3)


def test_filled_dates_are_reported():
    p = prices([("2024-01-01", "A", 1.0), ("2024-01-02", "A", 1.1), ("2024-01-03", "A", 1.2),
                ("2024-01-01", "B", 5.0), ("2024-01-03", "B", 5.5)])
    market, filled = build_market([("p.csv", p)], instruments([("A", "EUR"), ("B", "EUR")]),
                                  base_currency="EUR", max_fill_days=3)
    row = filled.to_pylist()[0]
    assert (row["instrument"], row["check"], row["n"]) == ("B", "filled", 1)
    assert market.log_returns[1, market.column("B")] == 0.0
