"""Settings of the end-of-day report."""

from __future__ import annotations

import math
from dataclasses import dataclass

from tailtrace.errors import ConfigError

__all__ = ["ReportOptions"]


@dataclass(frozen=True)
class ReportOptions:
    """What the report shows and how.

    Attributes
    ----------
    base_currency : str
        ISO 4217 code all amounts are stated in (e.g. ``"EUR"``).
    headline_method : str
        Method shown first in the headline tables, used for limits that name
        no method, for the charts and for the contributors section.
    disagreement_ratio : float
        A (portfolio, measure, confidence, horizon) is flagged when the
        largest figure across methods exceeds the smallest by more than this
        factor. Default 1.5 (common practice, no source).
    top_n : int
        Contributors listed per portfolio.
    near_limit : float
        Utilisation (figure / limit) from which a limit is marked as near.
    max_chart_portfolios : int
        Portfolios drawn in each chart (the tables always show all).
    max_quality_rows : int
        Data-quality rows listed (the count of the rest is stated).
    chart_confidence : float or None
        Confidence of the charts; ``None`` takes the highest one available.
    code_version : str or None
        Version or source hash of the package, printed in the footer.
    title : str
        Heading of the page.
    db_attempts : int
        Attempts to open the database read-only while a writer holds it.
    db_retry_seconds : float
        Pause between those attempts.
    decimals : int
        Decimals of the amounts shown (the CSV keeps full precision).
    """

    base_currency: str
    headline_method: str
    disagreement_ratio: float = 1.5
    top_n: int = 10
    near_limit: float = 0.9
    max_chart_portfolios: int = 6
    max_quality_rows: int = 200
    chart_confidence: float | None = None
    code_version: str | None = None
    title: str = "End-of-day market risk"
    db_attempts: int = 10
    db_retry_seconds: float = 0.5
    decimals: int = 0

    def __post_init__(self) -> None:
        if not str(self.base_currency).strip():
            raise ConfigError("report option base_currency must not be empty")
        if not str(self.headline_method).strip():
            raise ConfigError("report option headline_method must not be empty")
        ratio = float(self.disagreement_ratio)
        if not math.isfinite(ratio) or ratio <= 1.0:
            raise ConfigError(
                f"report option disagreement_ratio must be a number above 1, got {self.disagreement_ratio!r}")
        if not 0.0 < float(self.near_limit) <= 1.0:
            raise ConfigError(f"report option near_limit must lie in (0, 1], got {self.near_limit!r}")
        for name in ("top_n", "max_chart_portfolios", "max_quality_rows", "db_attempts"):
            value = getattr(self, name)
            if isinstance(value, bool) or not isinstance(value, int) or value < 1:
                raise ConfigError(f"report option {name} must be a positive integer, got {value!r}")
        if isinstance(self.decimals, bool) or not isinstance(self.decimals, int) or not 0 <= self.decimals <= 6:
            raise ConfigError(f"report option decimals must be an integer from 0 to 6, got {self.decimals!r}")
        if self.db_retry_seconds < 0:
            raise ConfigError(f"report option db_retry_seconds must not be negative, got {self.db_retry_seconds!r}")
        if self.chart_confidence is not None and not 0.0 < float(self.chart_confidence) < 1.0:
            raise ConfigError(f"report option chart_confidence must lie in (0, 1), got {self.chart_confidence!r}")
