"""Traffic-light zones for VaR exception counts.

The Basel Committee's 1996 backtesting framework sets the zones for 250
days of 99% VaR from the binomial distribution of the exception count
under a correct model. The same cumulative-probability cut-offs give zones
for any window length and coverage level.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.special import bdtr

__all__ = [
    "GREEN",
    "YELLOW",
    "RED",
    "GREEN_BELOW",
    "RED_FROM",
    "STANDARD_N_OBS",
    "STANDARD_COVERAGE",
    "STANDARD_PLUS_FACTORS",
    "PLUS_FACTOR_RULES",
    "ZoneTable",
    "exception_rate",
    "zone_table",
    "traffic_light",
    "format_zone_table",
]

GREEN, YELLOW, RED = "green", "yellow", "red"
ZONE_NAMES = (GREEN, YELLOW, RED)
GREEN_BELOW = 0.95  # green while P(X <= k) < 95%
RED_FROM = 0.9999  # red once P(X <= k) >= 99.99%
STANDARD_N_OBS = 250
STANDARD_COVERAGE = 0.99
# Basel Committee (1996), Table 2: plus factor by exception count, 250 days at 99%.
STANDARD_PLUS_FACTORS = {5: 0.40, 6: 0.50, 7: 0.65, 8: 0.75, 9: 0.85}
RED_PLUS_FACTOR = 1.00
PLUS_FACTOR_RULES = ("equivalent_probability", "standard_only")


def exception_rate(coverage: float | np.ndarray) -> np.ndarray:
    """Expected exception rate ``1 - coverage``, rounded to 12 decimals.

    Rounding removes binary noise (``1 - 0.99 = 0.010000000000000009``) so
    that a coverage of 0.99 reproduces the standard table bit for bit.
    """
    return np.round(1.0 - np.asarray(coverage, dtype=float), 12)


def _check(n_obs: int, coverage: float) -> tuple[int, float]:
    n = int(n_obs)
    if n != n_obs or n < 1:
        raise ValueError(f"n_obs must be a positive integer, got {n_obs!r}")
    c = float(coverage)
    if not 0.0 < c < 1.0:
        raise ValueError(f"coverage must lie strictly between 0 and 1, got {coverage!r}")
    return n, c


def _is_standard(n: int, c: float) -> bool:
    return n == STANDARD_N_OBS and abs(c - STANDARD_COVERAGE) < 1e-12


def _zone_codes(k: np.ndarray, cum: np.ndarray) -> np.ndarray:
    # Zero exceptions is never evidence of underestimated risk, even in a
    # window so short that P(X = 0) >= 95%.
    codes = np.where(cum < GREEN_BELOW, 0, np.where(cum < RED_FROM, 1, 2))
    return np.where(k == 0, 0, codes)


def _standard_yellow_bounds() -> np.ndarray:
    """Cumulative probabilities of 6..9 exceptions in the standard table."""
    ks = np.array(sorted(STANDARD_PLUS_FACTORS))[1:]
    return bdtr(ks, STANDARD_N_OBS, float(exception_rate(STANDARD_COVERAGE)))


def _plus_factors(k: np.ndarray, cum: np.ndarray, codes: np.ndarray, n: int, c: float, rule: str) -> np.ndarray:
    if rule not in PLUS_FACTOR_RULES:
        raise ValueError(f"unknown plus-factor rule {rule!r}; use one of {PLUS_FACTOR_RULES}")
    yellow_factors = np.array([STANDARD_PLUS_FACTORS[j] for j in sorted(STANDARD_PLUS_FACTORS)])
    if _is_standard(n, c):
        idx = np.clip(k - min(STANDARD_PLUS_FACTORS), 0, len(yellow_factors) - 1)
    elif rule == "standard_only":
        return np.full(np.shape(k), np.nan)
    else:
        # Same cumulative probability as the standard table's 5..9 counts.
        idx = np.searchsorted(_standard_yellow_bounds(), cum, side="right")
    yellow = yellow_factors[idx]
    return np.where(codes == 0, 0.0, np.where(codes == 1, yellow, RED_PLUS_FACTOR))


@dataclass(frozen=True)
class ZoneTable:
    """Traffic-light table for one window length and coverage level.

    Attributes
    ----------
    n_obs : int
        Days in the backtest window.
    coverage : float
        VaR confidence level.
    exceptions : numpy.ndarray of int
        Counts 0, 1, ..., ``red_min``.
    cumulative : numpy.ndarray
        ``P(X <= k)`` for ``X ~ Binomial(n_obs, 1 - coverage)``.
    zones : tuple of str
        Zone of each count.
    plus_factors : numpy.ndarray
        Plus factor of each count (NaN when the rule gives none).
    green_max, red_min : int
        Largest green count and smallest red count.
    standard : bool
        True for the 250-day, 99% case of the 1996 framework.
    """

    n_obs: int
    coverage: float
    exceptions: np.ndarray
    cumulative: np.ndarray
    zones: tuple[str, ...]
    plus_factors: np.ndarray
    green_max: int
    red_min: int
    standard: bool


def traffic_light(
    n_exceptions: np.ndarray,
    n_obs: int,
    coverage: float,
    *,
    plus_factor_rule: str = "equivalent_probability",
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Zone, plus factor and cumulative probability of exception counts.

    Parameters
    ----------
    n_exceptions : array_like of int
        Exception counts (any shape).
    n_obs : int
        Days in the backtest window.
    coverage : float
        VaR confidence level.
    plus_factor_rule : {"equivalent_probability", "standard_only"}
        How to give a plus factor outside 250 days at 99% (see Notes).

    Returns
    -------
    zones : numpy.ndarray of str
        "green", "yellow" or "red".
    plus_factors : numpy.ndarray of float
    cumulative : numpy.ndarray of float
        ``P(X <= k)`` under a correct model.

    Notes
    -----
    ``X ~ Binomial(n, p)``, ``p = 1 - coverage``, ``F(k) = P(X <= k)``.
    Green while ``F(k) < 95%``, red once ``F(k) >= 99.99%``, yellow in
    between; for 250 days at 99% this gives green 0-4, yellow 5-9, red 10+.
    Zero exceptions is always green (it matters only for windows so short
    that ``P(X = 0) >= 95%``).
    Plus factors: the 1996 table for 250 days at 99% (0 in green;
    0.40, 0.50, 0.65, 0.75, 0.85 for 5-9; 1.00 in red). Elsewhere, with
    ``"equivalent_probability"``, a yellow count takes the factor of the
    largest standard count j in 5..9 whose cumulative probability
    ``F_250,99%(j)`` does not exceed ``F(k)`` (0.40 when none does); green
    is 0 and red 1.00. ``"standard_only"`` returns NaN instead.

    References
    ----------
    Basel Committee on Banking Supervision (1996). Supervisory framework
    for the use of "backtesting" in conjunction with the internal models
    approach to market risk capital requirements, Table 2.
    """
    n, c = _check(n_obs, coverage)
    k = np.asarray(n_exceptions)
    if not np.issubdtype(k.dtype, np.integer):
        if not np.all(k == np.floor(k)):
            raise ValueError("exception counts must be whole numbers")
        k = k.astype(np.int64)
    if np.any(k < 0) or np.any(k > n):
        raise ValueError(f"exception counts must lie in 0..{n}")
    cum = bdtr(k, n, float(exception_rate(c)))
    codes = _zone_codes(k, cum)
    zones = np.asarray(ZONE_NAMES, dtype=object)[codes]
    return zones, _plus_factors(k, cum, codes, n, c, plus_factor_rule), cum


def zone_table(
    n_obs: int, coverage: float, *, plus_factor_rule: str = "equivalent_probability"
) -> ZoneTable:
    """Build the traffic-light table for any window length and coverage.

    Parameters
    ----------
    n_obs : int
        Days in the backtest window.
    coverage : float
        VaR confidence level.
    plus_factor_rule : {"equivalent_probability", "standard_only"}
        See :func:`traffic_light`.

    Returns
    -------
    ZoneTable
        Rows for 0 exceptions up to the first red count.

    Notes
    -----
    See :func:`traffic_light` for the rule. When even ``n_obs`` exceptions
    stay below 99.99% (tiny windows), ``red_min`` is ``n_obs + 1``: no count
    is red.

    References
    ----------
    Basel Committee on Banking Supervision (1996), Table 2.
    """
    n, c = _check(n_obs, coverage)
    all_k = np.arange(n + 1)
    cum_all = bdtr(all_k, n, float(exception_rate(c)))
    codes_all = _zone_codes(all_k, cum_all)
    red = np.flatnonzero(codes_all == 2)
    red_min = int(red[0]) if red.size else n + 1
    green = np.flatnonzero(codes_all == 0)
    green_max = int(green[-1]) if green.size else -1
    k = all_k[: min(red_min, n) + 1]
    zones, factors, cum = traffic_light(k, n, c, plus_factor_rule=plus_factor_rule)
    return ZoneTable(
        n_obs=n,
        coverage=c,
        exceptions=k,
        cumulative=cum,
        zones=tuple(str(z) for z in zones),
        plus_factors=factors,
        green_max=green_max,
        red_min=red_min,
        standard=_is_standard(n, c),
    )


def format_zone_table(table: ZoneTable, *, digits: int = 2) -> str:
    """Render a :class:`ZoneTable` as a Markdown table for the docs.

    Parameters
    ----------
    table : ZoneTable
    digits : int
        Decimals of the cumulative probability in percent.

    Returns
    -------
    str
        Header line with window and coverage, then one row per count; the
        last row reads "k+" for the first red count.
    """
    lines = [
        f"Traffic light: {table.n_obs} days, {table.coverage:.4g} VaR "
        f"(green {0}-{table.green_max}, red from {table.red_min})",
        "",
        "| exceptions | cumulative probability (%) | zone | plus factor |",
        "|---:|---:|:---|---:|",
    ]
    last = len(table.exceptions) - 1
    for i, (k, cum, zone, pf) in enumerate(
        zip(table.exceptions, table.cumulative, table.zones, table.plus_factors)
    ):
        label = f"{k}+" if i == last and zone == RED else f"{k}"
        factor = "n/a" if np.isnan(pf) else f"{pf:.2f}"
        lines.append(f"| {label} | {100 * cum:.{digits}f} | {zone} | {factor} |")
    return "\n".join(lines) + "\n"
