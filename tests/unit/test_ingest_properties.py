"""Property-based tests: malformed CSV never escapes as anything but InputError.

Whatever bytes a price, instruments or positions file holds, the readers
either return a valid table or raise :class:`InputError` naming the file (and,
when it names a row, a row that exists in the file).
"""

from __future__ import annotations

import re
import tempfile
import warnings
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from tailtrace.errors import DataQualityWarning, InputError
from tailtrace import ingest
from tailtrace.ingest import quality_checks, read_price_file
from tailtrace.reference import read_instruments, read_positions

KNOWN = ("EQ.A", "EQ.B", "FX.USD")
TODAY = np.datetime64("2025-06-30")
FAST = settings(max_examples=200, deadline=None, suppress_health_check=[HealthCheck.too_slow])

# Tokens that break CSV readers: quotes, separators, line ends, odd numbers and dates.
NASTY = [
    "", " ", ",", ";", "\t", '"', '""', "'", "\n", "\r", "\r\n", "\x00", "\ufeff", "\u2028", "\x0c", "\x85",
    "nan", "NaN", "inf", "-inf", "1e999", "-0", "0", "1,5", "1.234,5", '"1,234.5"', "1_000", "0x1F", "+.5", "1e-999",
    "2024-01-02", "2024-02-30", "02/01/2024", "2024-1-2", "9999-12-31", "0000-01-01", "20240102",
    "EQ.A", "EQ.B", "FX.USD", "eq.a", "EQ.Z", "é", "😀", "date", "instrument", "close",
]
HEADERS = [
    "date,instrument,close", "instrument,close,date", '"date","instrument","close"', "date,instrument,close,extra",
    "date;instrument;close", "date,instrument", "date,instrument,close,close", "Date,Instrument,Close", "", ",,",
]


def field() -> st.SearchStrategy[str]:
    return st.one_of(st.sampled_from(NASTY), st.text(max_size=6),
                     st.floats(allow_nan=True, allow_infinity=True).map(repr),
                     st.dates().map(str))


@st.composite
def messy_csv(draw) -> bytes:
    header = draw(st.sampled_from(HEADERS))
    rows = draw(st.lists(st.lists(field(), min_size=0, max_size=5), max_size=8))
    sep = draw(st.sampled_from(["\n", "\r\n", "\r"]))
    text = header + sep + sep.join(",".join(r) for r in rows) + draw(st.sampled_from(["", sep, sep * 3]))
    data = text.encode("utf-8")
    if draw(st.booleans()):
        data = b"\xef\xbb\xbf" + data
    if draw(st.integers(0, 4)) == 0:  # occasionally corrupt one byte
        at = draw(st.integers(0, max(len(data) - 1, 0)))
        data = data[:at] + bytes([draw(st.integers(0x80, 0xFF))]) + data[at + 1 :]
    return data


@st.composite
def nearly_valid_prices(draw) -> bytes:
    """A valid price file with a few fields replaced by nasty tokens."""
    n = draw(st.integers(1, 12))
    days = np.datetime64("2024-01-01") + np.arange(n)
    lines = ["date,instrument,close"] + [f"{d},{'EQ.A' if i % 2 else 'EQ.B'},{100 + i}.5" for i, d in enumerate(days)]
    for _ in range(draw(st.integers(0, 3))):
        i = draw(st.integers(1, n))
        parts = lines[i].split(",")
        parts[draw(st.integers(0, 2))] = draw(field())
        lines[i] = ",".join(parts)
    return ("\n".join(lines) + "\n").encode("utf-8")


def check_clean_failure(exc: InputError, path: Path, data: bytes) -> None:
    assert exc.file == str(path)
    assert str(exc).startswith(f"file {path}")
    if exc.row is not None:
        n_lines = len(re.split(rb"\r\n|\r|\n", data))
        assert 1 <= exc.row <= max(n_lines, 1)


def load_prices(path: Path):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DataQualityWarning)
        return read_price_file(path, KNOWN, today=TODAY)


def assert_price_invariants(table) -> None:
    close = table.column("close").to_numpy()
    assert np.all(np.isfinite(close)) and np.all(close > 0)
    assert set(table.column("instrument").to_pylist()) <= set(KNOWN)
    dates = table.column("date").to_numpy().astype("datetime64[D]")
    assert np.all(dates <= TODAY)
    keys = list(zip(table.column("instrument").to_pylist(), dates.astype(np.int64).tolist()))
    assert keys == sorted(keys) and len(set(keys)) == len(keys)
    quality_checks(table, "f.csv", stale_days=3)  # runs on anything the reader accepts


@pytest.fixture(scope="module")
def scratch():
    with tempfile.TemporaryDirectory() as folder:
        yield Path(folder)


@FAST
@given(data=st.one_of(messy_csv(), nearly_valid_prices(), st.binary(max_size=200)))
def test_price_reader_loads_or_raises_input_error(scratch, data):
    path = scratch / "prices.csv"
    path.write_bytes(data)
    try:
        table, _ = load_prices(path)
    except InputError as exc:
        check_clean_failure(exc, path, data)
    else:
        assert_price_invariants(table)


@FAST
@given(data=st.one_of(messy_csv(), st.binary(max_size=120)), kind=st.sampled_from(["instruments", "positions"]))
def test_reference_readers_load_or_raise_input_error(scratch, data, kind):
    header = b"instrument,asset_class,currency" if kind == "instruments" else b"portfolio,instrument,quantity"
    data = data.replace(b"date,instrument,close", header, 1)
    path = scratch / f"{kind}.csv"
    path.write_bytes(data)
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", DataQualityWarning)
            table = read_instruments(path) if kind == "instruments" else read_positions(path, KNOWN)
    except InputError as exc:
        check_clean_failure(exc, path, data)
    else:
        assert table.num_rows >= 1
        assert table.column("row").to_pylist() == list(range(2, table.num_rows + 2))


@FAST
@given(rows=st.lists(st.tuples(st.integers(0, 30), st.sampled_from(KNOWN), st.floats(0.01, 1e6)), min_size=1, max_size=30))
def test_valid_rows_in_any_order_load_sorted_and_unchanged(scratch, rows):
    day0 = np.datetime64("2024-01-01")
    unique = {(inst, d): c for d, inst, c in rows}  # last wins: no duplicates written
    lines = ["date,instrument,close"] + [f"{day0 + d},{inst},{c!r}" for (inst, d), c in unique.items()]
    path = scratch / "prices.csv"
    path.write_text("\n".join(lines) + "\n")
    table, extra = load_prices(path)
    assert extra == []
    assert_price_invariants(table)
    got = dict(zip(zip(table.column("instrument").to_pylist(),
                       (table.column("date").to_numpy().astype("datetime64[D]") - day0).astype(int).tolist()),
                   table.column("close").to_pylist()))
    assert got == unique  # repr round-trips floats exactly


def _outcome(path: Path):
    try:
        table, extra = load_prices(path)
    except InputError as exc:
        return str(exc)
    return table, extra


@FAST
@given(data=st.one_of(messy_csv(), nearly_valid_prices()))
def test_typed_fast_path_reads_exactly_what_the_strict_reader_reads(scratch, data):
    path = scratch / "prices.csv"
    path.write_bytes(data)
    fast = _outcome(path)
    with pytest.MonkeyPatch.context() as patch:
        patch.setattr(ingest, "_read_plain_prices", lambda p: None)  # the strict reader only
        strict = _outcome(path)
    if isinstance(strict, str) or isinstance(fast, str):
        assert fast == strict
    else:
        assert fast[0].equals(strict[0]) and fast[1] == strict[1]
