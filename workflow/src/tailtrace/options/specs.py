"""Option rows of ``instruments.csv``: validation and parsed contract terms.

A row is an option when any of ``underlying``, ``option_type``, ``strike``,
``expiry`` or ``implied_vol`` is filled. Option rows carry no price series of
their own: they are priced by model from their underlying.

Columns (numbers are decimals, not percent):

``underlying``      instrument with a price series (required)
``option_type``     ``call`` or ``put`` (required, case-insensitive)
``strike``          > 0, in the underlying's currency (required)
``expiry``          ISO date, strictly after as_of (required)
``implied_vol``     per year, 0 < σ <= 5 (required; 0.2 means 20 %)
``rate``            continuous discount rate, default 0; the domestic rate
                    for FX options
``dividend_yield``  continuous dividend yield, default 0; the foreign rate
                    for FX options; must be empty or 0 for futures options
``multiplier``      units of underlying per contract, > 0, default 1

The pricing model follows the underlying: an ``FX.<CCY>`` instrument (or
asset class ``fx``) gives Garman–Kohlhagen; an asset class ``future`` or
ending in ``_future`` gives Black-76; anything else Black–Scholes–Merton.
"""

from __future__ import annotations

from collections.abc import Collection, Mapping, Sequence
from dataclasses import dataclass
from datetime import date
from typing import Any

import numpy as np
import pandas as pd

from tailtrace.errors import InputError

from .pricing import MODEL_BLACK76, MODEL_BSM, MODEL_GK, year_fraction

__all__ = [
    "OPTION_COLUMNS",
    "OPTION_TRIGGER_COLUMNS",
    "OptionSpecs",
    "is_option_row",
    "model_for_underlying",
    "validate_option_rows",
]

OPTION_TRIGGER_COLUMNS = ("underlying", "option_type", "strike", "expiry", "implied_vol")
OPTION_COLUMNS = OPTION_TRIGGER_COLUMNS + ("rate", "dividend_yield", "multiplier")

_MAX_VOL = 5.0  # above 500 % a vol is almost surely given in percent
_MAX_ABS_RATE = 1.0  # likewise for rates and yields


@dataclass(frozen=True)
class OptionSpecs:
    """Parsed, validated terms of the option rows (one entry per option).

    Attributes
    ----------
    instrument, underlying : tuple of str
    is_call : (M,) bool
    strike, implied_vol, rate, dividend_yield, multiplier : (M,) float
    expiry : (M,) datetime64[D]
    model : tuple of str
        ``bsm``, ``black76`` or ``garman_kohlhagen`` (see module docstring).
    currency : tuple of str or None
        The option's currency (equal to its underlying's), when the table
        has a ``currency`` column.
    rows : (M,) int
        1-based line numbers in the file (header = line 1).
    """

    instrument: tuple[str, ...]
    underlying: tuple[str, ...]
    is_call: np.ndarray
    strike: np.ndarray
    expiry: np.ndarray
    implied_vol: np.ndarray
    rate: np.ndarray
    dividend_yield: np.ndarray
    multiplier: np.ndarray
    model: tuple[str, ...]
    currency: tuple[str, ...] | None
    rows: np.ndarray

    def __len__(self) -> int:
        return len(self.instrument)

    def time_to_expiry(self, as_of: Any) -> np.ndarray:
        """ACT/365 years from ``as_of`` to each expiry."""
        return year_fraction(as_of, self.expiry)

    @classmethod
    def empty(cls) -> OptionSpecs:
        """Specs of a table without options."""
        f = np.empty(0, dtype=np.float64)
        return cls((), (), np.empty(0, bool), f, np.empty(0, "datetime64[D]"), f, f, f, f, (), None,
                   np.empty(0, np.int64))


def _blank(value: Any) -> bool:
    if value is None:
        return True
    if isinstance(value, str):
        return value.strip() == ""
    try:
        return bool(pd.isna(value))
    except (TypeError, ValueError):
        return False


def _text(value: Any) -> str:
    return "" if _blank(value) else str(value).strip()


def is_option_row(row: Mapping[str, Any]) -> bool:
    """True when any option-defining column of the row is filled."""
    return any(not _blank(row.get(c)) for c in OPTION_TRIGGER_COLUMNS)


def model_for_underlying(underlying: str, asset_class: str | None) -> str:
    """Pricing model for an option on ``underlying`` of ``asset_class``.

    Parameters
    ----------
    underlying : str
        Instrument name; ``FX.<CCY>`` names are FX rates by convention.
    asset_class : str or None
        The underlying's asset class from ``instruments.csv``.

    Returns
    -------
    str
        :data:`~tailtrace.options.pricing.MODEL_GK`, ``MODEL_BLACK76`` or
        ``MODEL_BSM``.
    """
    cls = (asset_class or "").strip().lower()
    if underlying.startswith("FX.") or cls == "fx":
        return MODEL_GK
    if cls == "future" or cls.endswith("_future"):
        return MODEL_BLACK76
    return MODEL_BSM


def _as_frame(table_or_columns: pd.DataFrame | Mapping[str, Sequence[Any]]) -> pd.DataFrame:
    if isinstance(table_or_columns, pd.DataFrame):
        return table_or_columns.reset_index(drop=True)
    return pd.DataFrame(dict(table_or_columns))


class _RowChecker:
    """Parses one option row, raising InputError at the first bad cell."""

    def __init__(self, record: Mapping[str, Any], *, file: str, row: int) -> None:
        self.record, self.file, self.row = record, file, row

    def fail(self, column: str, message: str, value: Any = None) -> None:
        raise InputError(message, file=self.file, row=self.row, column=column, value=value)

    def required_text(self, column: str) -> str:
        text = _text(self.record.get(column))
        if not text:
            self.fail(column, f"option row needs '{column}'")
        return text

    def number(self, column: str, *, default: float | None = None) -> float:
        raw = self.record.get(column)
        if _blank(raw):
            if default is None:
                self.fail(column, f"option row needs '{column}'")
            return float(default)
        try:
            value = float(str(raw).strip()) if isinstance(raw, str) else float(raw)
        except (TypeError, ValueError):
            self.fail(column, f"'{column}' is not a number", raw)
        if not np.isfinite(value):
            self.fail(column, f"'{column}' must be finite", raw)
        return value


def validate_option_rows(
    table_or_columns: pd.DataFrame | Mapping[str, Sequence[Any]],
    *,
    file: str,
    known_instruments: Collection[str],
    as_of: Any,
) -> OptionSpecs:
    """Validate the option rows of an instruments table and parse their terms.

    Parameters
    ----------
    table_or_columns : DataFrame or mapping of column -> values
        The whole instruments table in file order (row ``i`` is line
        ``i + 2`` of the file); non-option rows are skipped.
    file : str
        File name used in error messages.
    known_instruments : collection of str
        Instruments with a price series (valid underlyings).
    as_of : date-like
        Valuation date; an option expiring on or before it is rejected.

    Returns
    -------
    OptionSpecs
        One entry per option row, in file order.

    Raises
    ------
    InputError
        At the first bad cell, naming file, 1-based row (header = 1), column
        and value: missing strike/expiry/implied_vol/underlying/option_type,
        non-numeric numbers, strike or vol <= 0, vol > 5 or |rate| > 1
        (percent given for a decimal), unknown underlying, an option as
        underlying, option_type not call/put, expiry on or before as_of,
        multiplier <= 0, a dividend yield on a futures option, or an option
        currency different from its underlying's (quanto options are not
        supported).
    """
    frame = _as_frame(table_or_columns)
    as_of_day = np.datetime64(pd.Timestamp(as_of).date(), "D")
    records = frame.to_dict(orient="records")
    known = set(known_instruments)
    by_name = {_text(r.get("instrument")): r for r in records}
    option_names = {_text(r.get("instrument")) for r in records if is_option_row(r)}
    has_currency = "currency" in frame.columns
    out: dict[str, list[Any]] = {k: [] for k in (
        "instrument", "underlying", "is_call", "strike", "expiry", "implied_vol", "rate",
        "dividend_yield", "multiplier", "model", "currency", "rows")}
    for i, record in enumerate(records):
        if not is_option_row(record):
            continue
        row = i + 2
        chk = _RowChecker(record, file=file, row=row)
        name = chk.required_text("instrument")
        underlying = chk.required_text("underlying")
        if underlying == name:
            chk.fail("underlying", "an option cannot be its own underlying", underlying)
        if underlying in option_names:
            chk.fail("underlying", "the underlying is itself an option (not supported)", underlying)
        if underlying not in known:
            chk.fail("underlying", "unknown underlying: no instrument with a price series has this name", underlying)
        kind = chk.required_text("option_type").lower()
        if kind not in ("call", "put"):
            chk.fail("option_type", "option_type must be 'call' or 'put'", record.get("option_type"))
        strike = chk.number("strike")
        if strike <= 0:
            chk.fail("strike", "strike must be positive", record.get("strike"))
        expiry_text = chk.required_text("expiry")
        try:
            expiry = np.datetime64(date.fromisoformat(expiry_text[:10]), "D")
        except ValueError:
            chk.fail("expiry", "expiry is not an ISO date (YYYY-MM-DD)", expiry_text)
        if expiry <= as_of_day:
            chk.fail("expiry", f"option has expired: expiry is on or before as_of {as_of_day}", expiry_text)
        vol = chk.number("implied_vol")
        if vol <= 0:
            chk.fail("implied_vol", "implied_vol must be positive", record.get("implied_vol"))
        if vol > _MAX_VOL:
            chk.fail("implied_vol", "implied_vol is a decimal per year (0.2 for 20 %)", record.get("implied_vol"))
        rate = chk.number("rate", default=0.0)
        div = chk.number("dividend_yield", default=0.0)
        for column, value in (("rate", rate), ("dividend_yield", div)):
            if abs(value) > _MAX_ABS_RATE:
                chk.fail(column, f"{column} is a continuous decimal rate (0.03 for 3 %)", record.get(column))
        multiplier = chk.number("multiplier", default=1.0)
        if multiplier <= 0:
            chk.fail("multiplier", "multiplier must be positive", record.get("multiplier"))
        under_row = by_name.get(underlying)
        if under_row is None and not underlying.startswith("FX."):
            chk.fail("underlying", "the underlying has no row in the instruments table "
                     "(its asset_class decides the pricing model)", underlying)
        model = model_for_underlying(underlying, None if under_row is None else _text(under_row.get("asset_class")))
        if model == MODEL_BLACK76 and div != 0.0:
            chk.fail("dividend_yield", "dividend_yield does not apply to an option on a future (Black-76); "
                     "leave it empty", record.get("dividend_yield"))
        currency = _text(record.get("currency")) if has_currency else ""
        if has_currency and under_row is not None:
            under_ccy = _text(under_row.get("currency"))
            if currency != under_ccy:
                chk.fail("currency", f"option currency must equal its underlying's ({under_ccy!r}); "
                         "quanto options are not supported", currency)
        for key, value in (("instrument", name), ("underlying", underlying), ("is_call", kind == "call"),
                           ("strike", strike), ("expiry", expiry), ("implied_vol", vol), ("rate", rate),
                           ("dividend_yield", div), ("multiplier", multiplier), ("model", model),
                           ("currency", currency), ("rows", row)):
            out[key].append(value)
    if not out["instrument"]:
        return OptionSpecs.empty()
    return OptionSpecs(
        instrument=tuple(out["instrument"]),
        underlying=tuple(out["underlying"]),
        is_call=np.array(out["is_call"], dtype=bool),
        strike=np.array(out["strike"], dtype=np.float64),
        expiry=np.array(out["expiry"], dtype="datetime64[D]"),
        implied_vol=np.array(out["implied_vol"], dtype=np.float64),
        rate=np.array(out["rate"], dtype=np.float64),
        dividend_yield=np.array(out["dividend_yield"], dtype=np.float64),
        multiplier=np.array(out["multiplier"], dtype=np.float64),
        model=tuple(out["model"]),
        currency=tuple(out["currency"]) if has_currency else None,
        rows=np.array(out["rows"], dtype=np.int64),
    )
