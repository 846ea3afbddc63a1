"""Build the day's report files: the HTML page and the headline CSV."""

from __future__ import annotations

import csv
import os
from dataclasses import dataclass
from pathlib import Path
from typing import Sequence

import pandas as pd

from tailtrace.report.content import ReportContent, collect_report
from tailtrace.report.limits import STATUS_BREACH, STATUS_MISSING
from tailtrace.report.options import ReportOptions
from tailtrace.report.render import render_html
from tailtrace.report.tables import HEADLINE_CSV_COLUMNS

__all__ = ["ReportResult", "build_report", "headline_csv_text"]

# Cells starting with these are run as formulas by spreadsheet programs.
_FORMULA_START = ("=", "+", "-", "@", "\t", "\r")


@dataclass(frozen=True)
class ReportResult:
    """What :func:`build_report` wrote and the facts a caller may log.

    Attributes
    ----------
    html_path, csv_path : pathlib.Path
    n_figures : int
        Headline rows written to the CSV.
    n_breaches, n_unchecked : int
        Limits breached, and limits without a matching figure.
    content : ReportContent
    """

    html_path: Path
    csv_path: Path
    n_figures: int
    n_breaches: int
    n_unchecked: int
    content: ReportContent


def _write_atomic(path: Path, text: str) -> None:
    # Write beside the target, then rename: readers never see half a file.
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(f".{path.name}.{os.getpid()}.tmp")
    try:
        with open(tmp, "w", encoding="utf-8", newline="") as handle:
            handle.write(text)
        os.replace(tmp, path)
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise


def _defuse(value: object) -> object:
    # A leading apostrophe keeps a spreadsheet from evaluating a name as a formula
    # (OWASP "CSV injection" advice); numbers are never touched.
    if isinstance(value, str) and value.startswith(_FORMULA_START):
        return "'" + value
    return value


def headline_csv_text(figures: pd.DataFrame | None) -> str:
    """The headline table as CSV text, one row per figure.

    Parameters
    ----------
    figures : pandas.DataFrame or None
        As in :attr:`ReportContent.figures`; ``None`` gives a header only.

    Returns
    -------
    str
        Columns :data:`tailtrace.report.tables.HEADLINE_CSV_COLUMNS`; floats
        in shortest round-trip form, empty cells for nulls.
    """
    frame = figures if figures is not None else pd.DataFrame(columns=list(HEADLINE_CSV_COLUMNS))
    frame = frame.copy()
    for column in ("portfolio", "method", "currency", "scaling", "run_id"):
        frame[column] = frame[column].map(_defuse)
    return frame.to_csv(index=False, lineterminator="\n", quoting=csv.QUOTE_MINIMAL)


def build_report(
    db_path: str | Path,
    as_of: object,
    *,
    out_html: str | Path,
    out_csv: str | Path,
    options: ReportOptions,
    limits_csv: str | Path | None = None,
    pnl_parquet: str | Path | Sequence[str | Path] | None = None,
) -> ReportResult:
    """Write the end-of-day report of ``as_of``.

    Parameters
    ----------
    db_path : str or Path
        Results DuckDB file (opened read-only; a locked file is retried).
    as_of : date-like
        The day reported.
    out_html, out_csv : str or Path
        Where the page and the headline CSV go (written atomically).
    options : ReportOptions
    limits_csv : str, Path or None
        Limits file; ``None`` when no limits apply.
    pnl_parquet : str, Path, sequence of them, or None
        Scenario P&L for the distribution chart; ``None`` when not produced.

    Returns
    -------
    ReportResult

    Raises
    ------
    tailtrace.errors.InputError
        Missing or locked database, a table lacking a required column, a bad
        limits file or P&L file.

    Notes
    -----
    The output depends only on the inputs: no clock is read, tables are
    sorted, and charts are drawn deterministically, so the same database
    gives the same bytes.
    """
    content = collect_report(db_path, as_of, options=options, limits_csv=limits_csv, pnl_parquet=pnl_parquet)
    html_path, csv_path = Path(out_html), Path(out_csv)
    _write_atomic(csv_path, headline_csv_text(content.figures))
    _write_atomic(html_path, render_html(content))
    util = content.utilisation
    return ReportResult(
        html_path=html_path,
        csv_path=csv_path,
        n_figures=0 if content.figures is None else len(content.figures),
        n_breaches=0 if util is None else int((util["status"] == STATUS_BREACH).sum()),
        n_unchecked=0 if util is None else int((util["status"] == STATUS_MISSING).sum()),
        content=content,
    )
