"""instruments.csv and positions files: validation and the tables they give."""

from __future__ import annotations

import numpy as np
import pytest

from tailtrace.errors import InputError
from tailtrace.reference import (
    ASSET_CLASSES,
    OPTION_COLUMNS,
    OPTION_REQUIRED,
    fx_instrument,
    read_instruments,
    read_positions,
)

INSTRUMENTS = "instrument,asset_class,currency\nEQ.A,equity,EUR\nEQ.C,equity,USD\nFX.USD,fx,EUR\n"
POSITIONS = "portfolio,instrument,quantity\nLONG,EQ.A,1000\nLONG,EQ.C,-20.5\nHEDGE,FX.USD,-2e4\n"
KNOWN = ("EQ.A", "EQ.C", "FX.USD")
OPTION_HEADER = "instrument,asset_class,currency," + ",".join(OPTION_COLUMNS)


def write(tmp_path, text: str, name: str):
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return path


def test_fx_instrument_naming():
    assert fx_instrument("USD") == "FX.USD"


def test_instruments_table_carries_file_rows(tmp_path):
    table = read_instruments(write(tmp_path, INSTRUMENTS, "instruments.csv"))
    assert table.column_names == ["instrument", "asset_class", "currency", "row"]
    assert table.column("instrument").to_pylist() == list(KNOWN)
    assert table.column("row").to_pylist() == [2, 3, 4]


def test_every_documented_asset_class_is_accepted(tmp_path):
    rows = "".join(f"I{i},{a},EUR\n" for i, a in enumerate(ASSET_CLASSES) if a != "option")
    table = read_instruments(write(tmp_path, "instrument,asset_class,currency\n" + rows, "instruments.csv"))
    assert table.num_rows == len(ASSET_CLASSES) - 1


@pytest.mark.parametrize(
    "text, match",
    [
        pytest.param(INSTRUMENTS + "EQ.A,equity,EUR\n", r"row 5, column 'instrument': instrument listed twice \(rows 2 and 5\)", id="duplicate"),
        pytest.param(INSTRUMENTS.replace("EQ.A,equity", "EQ.A,stock"), r"row 2, column 'asset_class': unknown asset_class", id="asset-class"),
        pytest.param(INSTRUMENTS.replace("EQ.A,equity,EUR", "EQ.A,Equity,EUR"), r"row 2, column 'asset_class'", id="asset-class-case"),
        pytest.param(INSTRUMENTS.replace("equity,USD", "equity,usd"), r"row 3, column 'currency': currency must be a three-letter ISO 4217", id="currency-case"),
        pytest.param(INSTRUMENTS.replace("equity,USD", "equity,US$"), r"row 3, column 'currency'", id="currency-symbol"),
        pytest.param(INSTRUMENTS.replace("equity,USD", "equity,"), r"row 3, column 'currency': empty value", id="currency-empty"),
        pytest.param(INSTRUMENTS.replace("EQ.C,", ","), r"row 3, column 'instrument': empty value", id="instrument-empty"),
        pytest.param("instrument,currency\nEQ.A,EUR\n", r"row 1, column 'asset_class': missing required column", id="missing-column"),
    ],
)
def test_bad_instruments(tmp_path, text, match):
    with pytest.raises(InputError, match=r"file .*instruments\.csv, " + match):
        read_instruments(write(tmp_path, text, "instruments.csv"))


def option_row(**fields: str) -> str:
    values = {"underlying": "EQ.A", "option_type": "call", "strike": "100", "expiry": "2025-06-20",
              "implied_vol": "0.25", "rate": "0.02", "dividend_yield": "", "multiplier": "100", **fields}
    return "OPT.A,option,EUR," + ",".join(values[c] for c in OPTION_COLUMNS) + "\n"


def with_options(*rows: str) -> str:
    base = "".join(line + "," * len(OPTION_COLUMNS) + "\n" for line in INSTRUMENTS.splitlines()[1:])
    return OPTION_HEADER + "\n" + base + "".join(rows)


def test_complete_option_row_is_accepted_with_its_columns_as_text(tmp_path):
    table = read_instruments(write(tmp_path, with_options(option_row()), "instruments.csv"))
    assert table.column("strike").to_pylist()[-1] == "100"
    assert table.column("dividend_yield").to_pylist()[-1] == ""  # optional fields may be empty
    assert table.column("row").to_pylist()[-1] == 5


@pytest.mark.parametrize("column", OPTION_REQUIRED)
def test_option_row_with_an_empty_required_field_is_rejected(tmp_path, column):
    text = with_options(option_row(), option_row(**{column: ""}).replace("OPT.A", "OPT.B"))
    with pytest.raises(InputError, match=rf"instruments\.csv, row 6, column '{column}': empty {column}; an option needs") as info:
        read_instruments(write(tmp_path, text, "instruments.csv"))
    assert info.value.value == "OPT.B"


def test_option_row_without_option_columns_is_rejected(tmp_path):
    text = INSTRUMENTS + "OPT.A,option,EUR\n"
    with pytest.raises(InputError, match=r"instruments\.csv, row 5, column 'underlying': an option row needs column 'underlying'"):
        read_instruments(write(tmp_path, text, "instruments.csv"))


def test_option_columns_may_stay_empty_on_linear_rows(tmp_path):
    table = read_instruments(write(tmp_path, with_options(), "instruments.csv"))
    assert table.num_rows == 3


def test_positions_table(tmp_path):
    table = read_positions(write(tmp_path, POSITIONS, "positions.csv"), KNOWN)
    assert table.column_names == ["portfolio", "instrument", "quantity", "row"]
    np.testing.assert_array_equal(table.column("quantity").to_numpy(), [1000.0, -20.5, -20000.0])
    assert table.column("row").to_pylist() == [2, 3, 4]


def test_a_zero_line_is_fine_when_the_portfolio_holds_something_else(tmp_path):
    table = read_positions(write(tmp_path, POSITIONS + "LONG,FX.USD,0\n", "positions.csv"), KNOWN)
    assert table.num_rows == 4


@pytest.mark.parametrize(
    "text, match",
    [
        pytest.param(POSITIONS + "LONG,EQ.Z,5\n", r"row 5, column 'instrument': position in an unknown instrument", id="unknown-instrument"),
        pytest.param(POSITIONS.replace("1000", "ten"), r"row 2, column 'quantity': not a plain decimal number", id="text-quantity"),
        pytest.param(POSITIONS.replace("1000", '"1,000"'), r"row 2, column 'quantity': not a plain decimal number", id="thousands"),
        pytest.param(POSITIONS.replace("1000", "nan"), r"row 2, column 'quantity': not a plain decimal number", id="nan"),
        pytest.param(POSITIONS.replace("1000", ""), r"row 2, column 'quantity': not a plain decimal number", id="empty"),
        pytest.param(POSITIONS + "LONG,EQ.A,5\n", r"row 5, column 'instrument': position listed twice for this portfolio \(rows 2 and 5\)", id="duplicate"),
        pytest.param(POSITIONS.replace("-2e4", "0"), r"row 4, column 'quantity': portfolio has no positions \(every quantity is zero\) \(found 'HEDGE'\)", id="all-zero"),
        pytest.param(POSITIONS.replace("HEDGE,", ","), r"row 4, column 'portfolio': empty value", id="no-portfolio-name"),
        pytest.param("portfolio,instrument,quantity\n", r"row 2, column 'portfolio': no data rows", id="header-only"),
        pytest.param("portfolio,instrument\nLONG,EQ.A\n", r"row 1, column 'quantity': missing required column", id="missing-column"),
    ],
)
def test_bad_positions(tmp_path, text, match):
    with pytest.raises(InputError, match=r"file .*positions\.csv, " + match):
        read_positions(write(tmp_path, text, "positions.csv"), KNOWN)
