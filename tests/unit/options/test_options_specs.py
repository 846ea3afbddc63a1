"""Validation of the option rows of instruments.csv."""

from __future__ import annotations

import re

import numpy as np
import pandas as pd
import pytest
from option_book_fixtures import AS_OF, COLUMNS, instruments_table

from tailtrace.errors import InputError
from tailtrace.options import MODEL_BLACK76, MODEL_BSM, MODEL_GK, model_for_underlying, validate_option_rows

FILE = "data/instruments.csv"


def _validate(table, as_of=AS_OF):
    return validate_option_rows(table, file=FILE, known_instruments=COLUMNS, as_of=as_of)


def test_valid_table_parses_terms_and_models():
    specs = _validate(instruments_table())
    assert specs.instrument == ("PUT.EU", "CALL.US", "FCALL.EU", "FXPUT.EUR")
    assert specs.model == (MODEL_BSM, MODEL_BSM, MODEL_BLACK76, MODEL_GK)
    np.testing.assert_array_equal(specs.rows, [6, 7, 8, 9])  # header is line 1
    np.testing.assert_array_equal(specs.is_call, [False, True, True, False])
    np.testing.assert_array_equal(specs.strike, [72.0, 55.0, 5000.0, 1.0])
    assert specs.expiry[0] == np.datetime64("2025-06-30")
    assert specs.dividend_yield[2] == 0.0  # empty on the futures option
    assert specs.currency == ("EUR", "USD", "EUR", "USD")
    assert specs.time_to_expiry(AS_OF)[0] == pytest.approx(181 / 365)


def test_defaults_and_column_mapping_input():
    table = instruments_table(**{"PUT.EU": {"rate": None, "dividend_yield": "", "multiplier": None}})
    columns = {c: table[c].tolist() for c in table.columns}  # a plain mapping works too
    specs = _validate(columns)
    assert (specs.rate[0], specs.dividend_yield[0], specs.multiplier[0]) == (0.0, 0.0, 1.0)


def test_strings_as_read_from_csv_are_accepted():
    table = instruments_table().astype(object).where(instruments_table().notna(), "").astype(str)
    specs = _validate(table)
    assert specs.strike[1] == 55.0 and specs.model[3] == MODEL_GK


def test_table_without_options():
    specs = _validate(instruments_table().iloc[:4])
    assert len(specs) == 0 and specs.strike.shape == (0,)


@pytest.mark.parametrize(
    "column, value, message",
    [
        ("strike", None, "option row needs 'strike'"),
        ("expiry", "", "option row needs 'expiry'"),
        ("implied_vol", None, "option row needs 'implied_vol'"),
        ("underlying", " ", "option row needs 'underlying'"),
        ("option_type", None, "option row needs 'option_type'"),
        ("strike", 0.0, "strike must be positive"),
        ("strike", -5, "strike must be positive"),
        ("strike", "seventy", "'strike' is not a number"),
        ("implied_vol", 0.0, "implied_vol must be positive"),
        ("implied_vol", -0.2, "implied_vol must be positive"),
        ("implied_vol", 24.0, "implied_vol is a decimal"),
        ("underlying", "EQ.XX", "unknown underlying"),
        ("underlying", "CALL.US", "the underlying is itself an option"),
        ("underlying", "PUT.EU", "an option cannot be its own underlying"),
        ("option_type", "straddle", "option_type must be 'call' or 'put'"),
        ("expiry", "30/06/2025", "expiry is not an ISO date"),
        ("expiry", "2024-12-30", "option has expired"),
        ("multiplier", 0, "multiplier must be positive"),
        ("multiplier", -100, "multiplier must be positive"),
        ("rate", 2.5, "rate is a continuous decimal rate"),
        ("currency", "USD", "option currency must equal its underlying's"),
    ],
)
def test_bad_cell_names_file_row_and_column(column, value, message):
    table = instruments_table(**{"PUT.EU": {column: value}})
    with pytest.raises(InputError, match=re.escape(message)) as info:
        _validate(table)
    err = info.value
    assert (err.file, err.row, err.column) == (FILE, 6, column)
    assert f"file {FILE}, row 6, column '{column}'" in str(err)


def test_option_expiring_on_as_of_is_rejected_not_priced():
    table = instruments_table(**{"FXPUT.EUR": {"expiry": AS_OF}})
    with pytest.raises(InputError, match=r"row 9, column 'expiry': option has expired: expiry is on or before "
                                         r"as_of 2024-12-31 \(found '2024-12-31'\)"):
        _validate(table)


def test_dividend_yield_on_futures_option_is_rejected():
    table = instruments_table(**{"FCALL.EU": {"dividend_yield": 0.02}})
    with pytest.raises(InputError, match="does not apply to an option on a future") as info:
        _validate(table)
    assert (info.value.row, info.value.column) == (8, "dividend_yield")


def test_first_bad_row_is_reported():
    table = instruments_table(**{"CALL.US": {"strike": -1}, "FXPUT.EUR": {"implied_vol": None}})
    with pytest.raises(InputError, match="row 7, column 'strike'"):
        _validate(table)


def test_underlying_without_metadata_row():
    table = instruments_table().loc[lambda t: t["instrument"] != "EQ.US"]
    with pytest.raises(InputError, match="has no row in the instruments table"):
        _validate(table)


def test_model_for_underlying():
    assert model_for_underlying("FX.JPY", None) == MODEL_GK
    assert model_for_underlying("X", "FX") == MODEL_GK
    assert model_for_underlying("X", "equity_index_future") == MODEL_BLACK76
    assert model_for_underlying("X", "future") == MODEL_BLACK76
    assert model_for_underlying("X", "equity_index") == MODEL_BSM
    assert model_for_underlying("X", None) == MODEL_BSM


def test_dates_parsed_by_pandas_are_accepted():
    table = instruments_table()
    table["expiry"] = pd.to_datetime(table["expiry"])
    assert _validate(table).expiry[3] == np.datetime64("2025-06-30")
