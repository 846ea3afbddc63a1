"""Small HTML helpers: escaping and the formatting of numbers for display."""

from __future__ import annotations

import html
import math
from typing import Iterable, Mapping

__all__ = [
    "esc",
    "attrs",
    "is_number",
    "fmt_amount",
    "fmt_confidence",
    "fmt_percent",
    "fmt_pvalue",
    "fmt_date",
    "data_value",
    "table",
    "NA",
]

NA = "n/a"


def esc(value: object) -> str:
    """Escape any text for HTML content and attribute values."""
    return html.escape(str(value), quote=True)


def attrs(values: Mapping[str, object]) -> str:
    """Render ``name="value"`` pairs (values escaped, ``None`` skipped)."""
    return "".join(f' {name}="{esc(v)}"' for name, v in values.items() if v is not None)


def is_number(value: object) -> bool:
    """True for a finite int or float (not bool, not None or NaN)."""
    if value is None or isinstance(value, bool):
        return False
    try:
        return math.isfinite(float(value))  # type: ignore[arg-type]
    except (TypeError, ValueError):
        return False


def fmt_amount(value: object, decimals: int = 0) -> str:
    """Amount with thousands separators, or n/a."""
    return f"{float(value):,.{decimals}f}" if is_number(value) else NA  # type: ignore[arg-type]


def fmt_confidence(value: object) -> str:
    """0.975 -> "97.5%"."""
    return f"{float(value) * 100:g}%" if is_number(value) else NA  # type: ignore[arg-type]


def fmt_percent(value: object, decimals: int = 1) -> str:
    """0.8734 -> "87.3%"."""
    return f"{float(value) * 100:,.{decimals}f}%" if is_number(value) else NA  # type: ignore[arg-type]


def fmt_pvalue(value: object) -> str:
    """p-value to three decimals, "<0.001" below that."""
    if not is_number(value):
        return NA
    p = float(value)  # type: ignore[arg-type]
    return "<0.001" if p < 0.001 else f"{p:.3f}"


def fmt_date(value: object) -> str:
    """ISO date of a date-like value, or n/a."""
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return NA
    text = str(value)
    return NA if text in ("NaT", "nan", "None") else text[:10]


def data_value(value: object) -> str | None:
    """Exact text of a number for a ``data-value`` attribute (round-trips)."""
    return repr(float(value)) if is_number(value) else None  # type: ignore[arg-type]


def table(caption: str, header: Iterable[str], rows: Iterable[str], *, cls: str = "") -> str:
    """A table with a caption, a header row of column headings and body rows.

    Parameters
    ----------
    caption : str
        Caption HTML (already escaped).
    header : iterable of str
        ``<th scope="col">`` cells (already built).
    rows : iterable of str
        ``<tr>`` elements (already built).
    cls : str
        Class of the table.
    """
    klass = f' class="{esc(cls)}"' if cls else ""
    return (
        f'<div class="table-wrap"><table{klass}><caption>{caption}</caption>'
        f"<thead><tr>{''.join(header)}</tr></thead><tbody>{''.join(rows)}</tbody></table></div>"
    )
