#!/usr/bin/env python
"""Generate the invented tailtrace demo scenario (seeded, deterministic).

Run ``python data_demo/generate_demo.py [--out DIR]``: it writes
``instruments.csv``, ``prices/*.csv``, ``positions.csv`` and the dated files
``positions/2024-12-30.csv`` and ``positions/2024-12-31.csv`` and prints a
short summary. The same seed gives byte-identical files (with the pinned
numpy: numpy does not promise identical random streams across versions).

Every name in the scenario is invented: no real firm, person, brand, index or
ticker is meant, and any likeness is accidental.

The simulation functions are importable (the benchmark reuses them):
:func:`simulate_market` builds dates and price paths for the demo universe or
for a synthetic universe of any size, and :func:`write_demo` writes the demo.
Only numpy and the standard library are used, so the script runs before the
package is installed.
"""

from __future__ import annotations

import argparse
import csv
from dataclasses import dataclass, field
from pathlib import Path
from typing import Iterable, Mapping, Sequence

import numpy as np

__all__ = [
    "BASE_CURRENCY",
    "DEFAULT_SEED",
    "FACTORS",
    "HOLIDAYS_MMDD",
    "DEMO_START",
    "DEMO_END",
    "DEMO_EPISODES",
    "PRICE_FILES",
    "QUIRK_INSTRUMENT",
    "QUIRK_GAPS",
    "QUIRK_STALE",
    "InstrumentSpec",
    "Episode",
    "MarketPaths",
    "DemoSummary",
    "business_calendar",
    "demo_universe",
    "synthetic_universe",
    "episode_profile",
    "garch_t_paths",
    "simulate_market",
    "format_fixed",
    "price_decimals",
    "write_price_csv",
    "write_market",
    "demo_positions",
    "max_drawdown",
    "write_demo",
    "main",
]

BASE_CURRENCY = "EUR"
DEFAULT_SEED = 20_240_238
DEMO_START = "2018-01-02"
DEMO_END = "2024-12-31"
# Month-day of the holidays on which no venue in the scenario publishes a close.
HOLIDAYS_MMDD = ("01-01", "12-25", "12-26")

# Standardised risk factors of the simulation (unit unconditional variance).
FACTORS = ("equity_global", "equity_eur", "equity_usd", "rates", "fx_usd", "commodity")
_G = FACTORS.index("equity_global")

# GARCH(1,1) (alpha, beta) and Student-t degrees of freedom per factor. Each
# keeps beta^2 + 2 alpha beta + k alpha^2 < 1 (k = 3 + 6 / (nu - 4), the
# innovation kurtosis), so the fourth moment is finite and sample kurtosis and
# autocorrelation of squares are stable statistics.
_FACTOR_GARCH = {
    "equity_global": (0.07, 0.91, 5.0),
    "equity_eur": (0.06, 0.92, 5.0),
    "equity_usd": (0.06, 0.92, 5.0),
    "rates": (0.09, 0.89, 8.0),
    "fx_usd": (0.08, 0.90, 8.0),
    "commodity": (0.07, 0.91, 5.0),
}
_IDIO_GARCH = (0.06, 0.92, 5.0)
_BURN_IN = 250
_STR = np.dtypes.StringDType()  # variable-width strings: less memory than "U"
_TRADING_DAYS = 252


@dataclass(frozen=True)
class InstrumentSpec:
    """One simulated instrument.

    Attributes
    ----------
    name, asset_class, currency : str
        Row of ``instruments.csv``; the price is in ``currency``.
    annual_vol : float
        Realised volatility of the instrument's daily log-return noise over
        the whole simulated sample, annualised with 252 days (the noise is
        rescaled to it; drifts add a little). Episodes and GARCH clustering
        shape when the volatility comes, not how much there is in total.
    loadings : mapping of str to float
        Loading on each factor of :data:`FACTORS` (missing ones are 0); the
        squared loadings sum to the systematic share of variance (< 1), the
        rest is an idiosyncratic GARCH-t series.
    drift : float
        Annual expected log return outside episodes.
    start_price : float
        Close on the first date.
    stress_sensitivity : float
        Share of an episode's volatility spike the instrument takes (1 = all).
    """

    name: str
    asset_class: str
    currency: str
    annual_vol: float
    loadings: Mapping[str, float] = field(default_factory=dict)
    drift: float = 0.0
    start_price: float = 100.0
    stress_sensitivity: float = 1.0


@dataclass(frozen=True)
class Episode:
    """A stress episode: volatility spike, rising equity correlation, a fall.

    Attributes
    ----------
    name, start, end : str
        Label and first/last date (ISO) of returns inside the episode.
    vol_multiplier : float
        Peak multiplier of volatility.
    equity_drop : float
        Peak-to-trough fall, as a fraction (0.30 is 30 %), of the
        equal-weighted equities (mean of their log returns) inside the
        episode, reached by a drift through the global equity factor.
    correlation_boost : float
        Share of each equity's idiosyncratic variance moved onto the global
        equity factor at the peak (0 keeps correlations, 1 makes them 1).
    """

    name: str
    start: str
    end: str
    vol_multiplier: float
    equity_drop: float
    correlation_boost: float


DEMO_EPISODES = (
    Episode("sell-off", "2019-08-01", "2019-08-30", 1.8, 0.08, 0.3),
    Episode("crisis", "2022-02-14", "2022-05-31", 3.5, 0.30, 0.7),
)

# Which instruments go to which price file (files named after their source).
PRICE_FILES = {
    "equities_eur.csv": ("EQ.KARVENHOLT", "EQ.OSTRELLIN", "EQ.QUORVENTA", "EQ.VELMARSK"),
    "equities_usd.csv": ("EQ.GRISTVALE", "EQ.SPARROWDYNE", "EQ.TALLOWMERE"),
    "derivatives.csv": ("FUT.VALDORIA20",),
    "commodities_rates.csv": ("BOND.EURGOV10", "BOND.USDGOV10", "CMD.BASEMETAL"),
    "fx.csv": ("FX.USD",),
}

# Planted data-quality problems for the ingest's warnings to find.
QUIRK_INSTRUMENT = "EQ.OSTRELLIN"
QUIRK_GAPS = (("2020-06-10", "2020-06-11"), ("2023-03-14", "2023-03-16"))
QUIRK_STALE = ("2021-09-06", "2021-09-13")  # six trading days, one close


@dataclass(frozen=True)
class MarketPaths:
    """Simulated closes of a universe.

    Attributes
    ----------
    dates : (T,) datetime64[D]
        Trading dates.
    instruments, asset_classes, currencies : tuple of str, length N
    prices : (T, N) float
        Closes in each instrument's own currency.
    log_returns : (T - 1, N) float
        Simulated daily log returns (``diff(log(prices))`` up to rounding);
        row ``t`` is the return ending on ``dates[t + 1]``.
    stress : (T - 1,) float
        Episode volatility multiplier applied to each return date (1 outside).
    """

    dates: np.ndarray
    instruments: tuple[str, ...]
    asset_classes: tuple[str, ...]
    currencies: tuple[str, ...]
    prices: np.ndarray
    log_returns: np.ndarray
    stress: np.ndarray

    def column(self, name: str) -> int:
        """Index of instrument ``name``."""
        return self.instruments.index(name)


@dataclass(frozen=True)
class DemoSummary:
    """What :func:`write_demo` wrote, for the printed summary and tests.

    ``seed`` is None when a Generator was passed instead of an int.
    """

    out_dir: Path
    seed: int | None
    files: tuple[Path, ...]
    paths: MarketPaths
    realised_vol: Mapping[str, float]
    episode_drawdown: Mapping[str, float]
    episode_vol_ratio: Mapping[str, float]
    gross_value: Mapping[str, float]

    def text(self) -> str:
        """Human-readable summary."""
        p = self.paths
        lines = [
            f"tailtrace demo scenario (seed {self.seed}) written to {self.out_dir}",
            f"  instruments: {len(p.instruments)}; price dates: {len(p.dates)} "
            f"from {p.dates[0]} to {p.dates[-1]}",
            "  realised annualised volatility of daily log returns:",
        ]
        for i, name in enumerate(p.instruments):
            lines.append(
                f"    {name:<16} {p.asset_classes[i]:<20} {p.currencies[i]}  "
                f"{100 * self.realised_vol[name]:5.1f} %"
            )
        for ep in DEMO_EPISODES:
            lines.append(
                f"  {ep.name} {ep.start}..{ep.end}: EUR equity basket max drawdown "
                f"{100 * self.episode_drawdown[ep.name]:.1f} %, equity vol inside/outside "
                f"{self.episode_vol_ratio[ep.name]:.2f}x"
            )
        gaps = ", ".join(f"{a}..{b}" for a, b in QUIRK_GAPS)
        lines.append(
            f"  planted quirks on {QUIRK_INSTRUMENT}: gaps {gaps}; "
            f"stale close {QUIRK_STALE[0]}..{QUIRK_STALE[1]}"
        )
        for name, value in self.gross_value.items():
            lines.append(f"  portfolio {name}: gross value {value:,.0f} {BASE_CURRENCY}")
        return "\n".join(lines)


def _in_window(dates: np.ndarray, first: str, last: str) -> np.ndarray:
    """Mask of ``dates`` from ``first`` to ``last`` (ISO), both included."""
    return (dates >= np.datetime64(first)) & (dates <= np.datetime64(last))


def business_calendar(
    start: str,
    end: str | None = None,
    *,
    n_days: int | None = None,
    holidays_mmdd: Sequence[str] = HOLIDAYS_MMDD,
) -> np.ndarray:
    """Weekdays from ``start`` minus fixed-date holidays.

    Parameters
    ----------
    start, end : str
        ISO dates, both included; give ``end`` or ``n_days``.
    n_days : int, optional
        Number of trading dates wanted instead of an end date.
    holidays_mmdd : sequence of str
        ``"MM-DD"`` of holidays repeated every year.

    Returns
    -------
    (T,) datetime64[D]
    """
    first = np.datetime64(start, "D")
    if end is not None:
        last = np.datetime64(end, "D")
    elif n_days is not None:
        # 5 trading days per 7 calendar days, plus room for holidays.
        last = first + int(n_days * 1.5) + 30
    else:
        raise ValueError("business_calendar needs end or n_days")
    days = np.arange(first, last + 1, dtype="datetime64[D]")
    month_start = days.astype("datetime64[M]")
    month = month_start.astype(np.int64) % 12 + 1
    day = (days - month_start.astype("datetime64[D]")).astype(np.int64) + 1
    holiday = np.zeros(days.shape, dtype=bool)
    for mmdd in holidays_mmdd:
        mm, dd = (int(x) for x in mmdd.split("-"))
        holiday |= (month == mm) & (day == dd)
    dates = days[np.is_busday(days) & ~holiday]
    if n_days is not None:
        if end is not None and len(dates) < n_days:
            raise ValueError(f"only {len(dates)} trading dates between {start} and {end}")
        dates = dates[:n_days]
    return dates


def demo_universe() -> tuple[InstrumentSpec, ...]:
    """The twelve invented instruments of the demo fund.

    Returns
    -------
    tuple of InstrumentSpec
        Four EUR equities, three USD equities, an EUR equity-index future,
        a USD base-metal proxy, EUR and USD government-bond price proxies
        and ``FX.USD`` (EUR per USD).
    """
    eq = "equity"
    return (
        InstrumentSpec("EQ.VELMARSK", eq, "EUR", 0.22, {"equity_global": 0.55, "equity_eur": 0.45}, 0.07, 84.0),
        InstrumentSpec("EQ.QUORVENTA", eq, "EUR", 0.19, {"equity_global": 0.45, "equity_eur": 0.45, "rates": 0.15}, 0.05, 21.5),
        InstrumentSpec("EQ.OSTRELLIN", eq, "EUR", 0.3, {"equity_global": 0.6, "equity_eur": 0.45, "rates": -0.15}, 0.06, 12.8),
        InstrumentSpec("EQ.KARVENHOLT", eq, "EUR", 0.24, {"equity_global": 0.55, "equity_eur": 0.4}, 0.07, 146.0),
        InstrumentSpec("EQ.TALLOWMERE", eq, "USD", 0.32, {"equity_global": 0.55, "equity_usd": 0.45}, 0.10, 212.0),
        InstrumentSpec("EQ.SPARROWDYNE", eq, "USD", 0.26, {"equity_global": 0.55, "equity_usd": 0.4, "commodity": 0.1}, 0.07, 57.3),
        InstrumentSpec("EQ.GRISTVALE", eq, "USD", 0.2, {"equity_global": 0.45, "equity_usd": 0.4}, 0.06, 38.9),
        InstrumentSpec("FUT.VALDORIA20", "equity_index_future", "EUR", 0.195, {"equity_global": 0.7, "equity_eur": 0.66}, 0.06, 3400.0),
        InstrumentSpec("CMD.BASEMETAL", "commodity", "USD", 0.3, {"equity_global": 0.3, "fx_usd": -0.1, "commodity": 0.85}, 0.02, 92.0, 0.8),
        InstrumentSpec("BOND.EURGOV10", "bond", "EUR", 0.055, {"equity_global": -0.2, "rates": 0.85}, 0.01, 100.0, 0.5),
        InstrumentSpec("BOND.USDGOV10", "bond", "USD", 0.065, {"equity_global": -0.2, "rates": 0.6}, 0.015, 100.0, 0.5),
        InstrumentSpec("FX.USD", "fx", BASE_CURRENCY, 0.085, {"equity_global": -0.25, "fx_usd": 0.9}, 0.0, 0.834, 0.5),
    )


def synthetic_universe(
    n_instruments: int, *, seed: int | np.random.Generator | None = None
) -> tuple[InstrumentSpec, ...]:
    """A large invented universe in EUR and USD, for benchmarks.

    Parameters
    ----------
    n_instruments : int
        At least 2. The last instrument is always ``FX.USD``; of the rest
        about 80 % are equities (alternating EUR/USD), 10 % bond proxies,
        5 % EUR equity-index futures and 5 % USD commodities.
    seed : int or numpy.random.Generator
        Draws the volatilities, loadings, drifts and start prices.

    Returns
    -------
    tuple of InstrumentSpec
        Names ``EQ.SYN00000``, ``BOND.SYN00001``, ... (index-numbered).
    """
    if n_instruments < 2:
        raise ValueError(f"n_instruments must be at least 2, got {n_instruments}")
    rng = np.random.default_rng(seed)
    n = n_instruments - 1
    u = rng.uniform(size=(n, 5))
    specs = []
    for i in range(n):
        slot = i % 20
        a, b, c, d, e = u[i]
        if slot < 16:
            ccy = "EUR" if slot % 2 == 0 else "USD"
            region = "equity_eur" if ccy == "EUR" else "equity_usd"
            spec = InstrumentSpec(
                f"EQ.SYN{i:05d}", "equity", ccy, 0.15 + 0.17 * a,
                {"equity_global": 0.4 + 0.25 * b, region: 0.3 + 0.2 * c},
                0.03 + 0.06 * d, float(np.round(10 * 30**e, 2)),
            )
        elif slot < 18:
            ccy = "EUR" if slot == 16 else "USD"
            spec = InstrumentSpec(
                f"BOND.SYN{i:05d}", "bond", ccy, 0.04 + 0.04 * a,
                {"equity_global": -0.1 - 0.15 * b, "rates": 0.6 + 0.3 * c},
                0.01, 100.0, 0.5,
            )
        elif slot == 18:
            spec = InstrumentSpec(
                f"FUT.SYN{i:05d}", "equity_index_future", "EUR", 0.15 + 0.05 * a,
                {"equity_global": 0.65 + 0.1 * b, "equity_eur": 0.6}, 0.05, float(np.round(2000 + 3000 * e)),
            )
        else:
            spec = InstrumentSpec(
                f"CMD.SYN{i:05d}", "commodity", "USD", 0.25 + 0.1 * a,
                {"equity_global": 0.2 + 0.15 * b, "commodity": 0.75 + 0.15 * c}, 0.02, float(np.round(20 + 80 * e, 2)), 0.8,
            )
        specs.append(spec)
    specs.append(InstrumentSpec("FX.USD", "fx", BASE_CURRENCY, 0.075, {"equity_global": -0.25, "fx_usd": 0.9}, 0.0, 0.834, 0.5))
    return tuple(specs)


def episode_profile(
    return_dates: np.ndarray, episode: Episode, *, decay_half_life: float = 10.0
) -> tuple[np.ndarray, np.ndarray]:
    """Volatility multiplier and fall schedule of one episode.

    Parameters
    ----------
    return_dates : (T,) datetime64[D]
        Dates on which the returns end.
    episode : Episode
    decay_half_life : float
        Trading days for the spike to halve after the episode ends.

    Returns
    -------
    multiplier : (T,) float
        ``1 + (m - 1) * s_t`` with ``s_t`` rising to 1 over three days,
        held for the first 60 % of the episode, easing to 0.6 at its end,
        then decaying with ``decay_half_life``.
    fall : (T,) float
        Weights summing to 1 over the first 70 % of the episode (where the
        prescribed fall happens), 0 elsewhere; all 0 if the episode lies
        outside the dates.
    """
    inside = _in_window(return_dates, episode.start, episode.end)
    shape = np.zeros(return_dates.shape)
    fall = np.zeros(return_dates.shape)
    idx = np.flatnonzero(inside)
    if idx.size == 0:
        return 1.0 + shape, fall
    n = idx.size
    k = np.arange(n, dtype=float)
    hold = 0.6 * n
    inner = np.minimum(1.0, (k + 1) / 3.0)
    inner = np.where(k > hold, 1.0 - 0.4 * (k - hold) / max(n - 1 - hold, 1.0), inner)
    shape[idx] = inner
    after = np.arange(idx[-1] + 1, return_dates.size)
    shape[after] = inner[-1] * 0.5 ** ((after - idx[-1]) / decay_half_life)
    n_fall = max(1, int(round(0.7 * n)))
    fall[idx[:n_fall]] = 1.0 / n_fall
    return 1.0 + (episode.vol_multiplier - 1.0) * shape, fall


def garch_t_paths(
    n_days: int,
    alpha: np.ndarray,
    beta: np.ndarray,
    nu: np.ndarray,
    *,
    rng: np.random.Generator,
    burn_in: int = _BURN_IN,
) -> np.ndarray:
    """Unit-variance GARCH(1,1) series with Student-t innovations.

    Parameters
    ----------
    n_days : int
    alpha, beta, nu : (S,) float
        Per-series ARCH and GARCH coefficients and degrees of freedom (> 2).
    rng : numpy.random.Generator
    burn_in : int
        Leading days simulated and dropped so the start is near stationarity.

    Returns
    -------
    (n_days, S) float

    Notes
    -----
    ``x_t = sqrt(h_t) z_t``, ``h_t = (1 - alpha - beta) + alpha x_{t-1}^2 +
    beta h_{t-1}``, ``z_t = t_nu * sqrt((nu - 2) / nu)``, so the unconditional
    variance is 1. The recursion runs over days (it is sequential) and is
    vectorised over series.

    References
    ----------
    Bollerslev, T. (1986), "Generalized autoregressive conditional
    heteroskedasticity", Journal of Econometrics 31(3). Bollerslev, T. (1987),
    "A conditionally heteroskedastic time series model for speculative prices
    and rates of return", Review of Economics and Statistics 69(3).
    """
    alpha, beta, nu = (np.asarray(x, dtype=float) for x in (alpha, beta, nu))
    if np.any(alpha + beta >= 1) or np.any(nu <= 2):
        raise ValueError("GARCH needs alpha + beta < 1 and nu > 2")
    total = n_days + burn_in
    z = rng.standard_t(nu, size=(total, nu.size)) * np.sqrt((nu - 2.0) / nu)
    omega = 1.0 - alpha - beta
    h = np.ones(nu.size)
    x = np.empty_like(z)
    for t in range(total):
        x[t] = np.sqrt(h) * z[t]
        h = omega + alpha * x[t] ** 2 + beta * h
    return x[burn_in:]


def _loading_matrix(specs: Sequence[InstrumentSpec]) -> np.ndarray:
    b = np.zeros((len(specs), len(FACTORS)))
    for i, spec in enumerate(specs):
        for factor, value in spec.loadings.items():
            if factor not in FACTORS:
                raise ValueError(f"{spec.name}: unknown factor {factor!r}; known: {FACTORS}")
            b[i, FACTORS.index(factor)] = value
    r2 = (b**2).sum(axis=1)
    bad = np.flatnonzero(r2 >= 1.0)
    if bad.size:
        raise ValueError(f"{specs[bad[0]].name}: squared loadings sum to {r2[bad[0]]:.3f}, must be < 1")
    return b


def max_drawdown(log_returns: np.ndarray) -> float:
    """Largest peak-to-trough fall of ``exp(cumsum(log_returns))``, starting at 1.

    Parameters
    ----------
    log_returns : (T,) float

    Returns
    -------
    float
        ``1 - min_t P_t / max_{s <= t} P_s`` as a fraction.
    """
    level = np.concatenate([[0.0], np.cumsum(log_returns)])
    return float(1.0 - np.exp((level - np.maximum.accumulate(level)).min()))


def _fall_drift(returns: np.ndarray, effect: np.ndarray, drawdown: float) -> float:
    """Multiplier ``delta <= 0`` of ``effect`` giving the equal-weight basket
    of ``returns`` a peak-to-trough fall of ``drawdown`` (bisection; the
    drawdown is monotone in ``delta`` because ``effect >= 0``)."""
    basket, push = returns.mean(axis=1), effect.mean(axis=1)
    if drawdown <= 0 or max_drawdown(basket) >= drawdown or not np.any(push > 0):
        return 0.0
    lo, hi = -1.0, 0.0
    while max_drawdown(basket + lo * push) < drawdown:
        lo *= 2.0
    for _ in range(60):
        mid = 0.5 * (lo + hi)
        lo, hi = (mid, hi) if max_drawdown(basket + mid * push) >= drawdown else (lo, mid)
    return 0.5 * (lo + hi)


def simulate_market(
    universe: int | Sequence[InstrumentSpec],
    n_days: int | None = None,
    *,
    seed: int | np.random.Generator | None,
    start: str = DEMO_START,
    end: str | None = None,
    episodes: Sequence[Episode] = DEMO_EPISODES,
    holidays_mmdd: Sequence[str] = HOLIDAYS_MMDD,
) -> MarketPaths:
    """Simulate daily closes from a fat-tailed factor model.

    Parameters
    ----------
    universe : int or sequence of InstrumentSpec
        An int asks for :func:`synthetic_universe` of that size (drawn from
        the same generator); or give the instruments, e.g.
        :func:`demo_universe`.
    n_days : int, optional
        Number of price dates (returns are one fewer). If omitted, ``end``
        must be given.
    seed : int or numpy.random.Generator
    start, end : str
        First and (optionally) last calendar date, ISO.
    episodes : sequence of Episode
        Stress episodes; those outside the dates have no effect.
    holidays_mmdd : sequence of str
        Fixed-date holidays without prices.

    Returns
    -------
    MarketPaths

    Notes
    -----
    For instrument ``i`` on day ``t``::

        r_it = mu_i / 252 + k_i m_it (B_i(t) . f_t + s_i(t) e_it) + delta m_it sigma_i B_ig(t) u_t

    ``f`` are the :data:`FACTORS` and ``e`` idiosyncratic terms, all
    unit-variance GARCH(1,1)-t series (:func:`garch_t_paths`), hence fat
    tails and volatility clustering. ``m_it = 1 + c_i (M_t - 1)`` with ``M_t``
    the product of the episode multipliers and ``c_i`` the stress
    sensitivity. During an episode the equity rows of ``B`` move towards
    loadings whose global-equity part carries an extra share of the
    idiosyncratic variance (rising equity correlation); ``s_i(t) =
    sqrt(1 - |B_i(t)|^2)`` keeps the variance. Inside each episode every
    instrument's noise is shifted by a constant so that it sums to zero
    there. ``k_i`` rescales the noise so that its realised volatility over
    the sample is ``sigma_i`` (``annual_vol / sqrt(252)``). Last, the drift
    term (``u_t`` the episode's fall weights over its first 70 %, ``delta <=
    0`` found by bisection, ``B_ig`` the global-equity loading) gives the equal-weighted equities a
    peak-to-trough fall of ``equity_drop`` inside the episode, whatever the
    seed (unless the noise alone falls further). Other instruments follow
    through their global-equity loading (bonds and FX.USD rise, commodities
    fall).

    References
    ----------
    Factor models with GARCH-t components are standard simulation tools;
    see e.g. McNeil, Frey & Embrechts, *Quantitative Risk Management*
    (Princeton, 2015), chapters 4 and 6.
    """
    rng = np.random.default_rng(seed)
    specs = synthetic_universe(universe, seed=rng) if isinstance(universe, (int, np.integer)) else tuple(universe)
    if not specs:
        raise ValueError("universe is empty")
    names = [s.name for s in specs]
    if len(set(names)) != len(names):
        raise ValueError("instrument names must be unique")
    dates = business_calendar(start, end, n_days=n_days, holidays_mmdd=holidays_mmdd)
    if n_days is not None and len(dates) != n_days:
        raise ValueError(f"wanted {n_days} dates, calendar gives {len(dates)}")
    if len(dates) < 2:
        raise ValueError("need at least two price dates")
    n_ret, n = len(dates) - 1, len(specs)
    ret_dates = dates[1:]

    b_normal = _loading_matrix(specs)
    r2 = (b_normal**2).sum(axis=1)
    is_equity = np.array([s.asset_class == "equity" for s in specs])
    sigma = np.array([s.annual_vol for s in specs]) / np.sqrt(_TRADING_DAYS)
    drift = np.array([s.drift for s in specs]) / _TRADING_DAYS
    sens = np.array([s.stress_sensitivity for s in specs])

    params = np.array([_FACTOR_GARCH[f] for f in FACTORS])
    factors = garch_t_paths(n_ret, params[:, 0], params[:, 1], params[:, 2], rng=rng)
    idio_params = np.broadcast_to(np.array(_IDIO_GARCH), (n, 3))
    idio = garch_t_paths(n_ret, idio_params[:, 0], idio_params[:, 1], idio_params[:, 2], rng=rng)

    stress = np.ones(n_ret)
    boost = np.zeros(n_ret)  # weight of the crisis loadings, 0..1
    falls = []  # (episode, fall weights, window mask)
    for ep in episodes:
        mult, fall = episode_profile(ret_dates, ep)
        stress *= mult
        if ep.vol_multiplier > 1:
            boost = np.maximum(boost, ep.correlation_boost * (mult - 1) / (ep.vol_multiplier - 1))
        falls.append((ep, fall, _in_window(ret_dates, ep.start, ep.end)))

    # Crisis loadings: move a share of idiosyncratic variance onto the global
    # equity factor, for the equity rows only.
    b_crisis = b_normal.copy()
    b_crisis[:, _G] = np.where(is_equity, np.sqrt(b_normal[:, _G] ** 2 + (1 - r2)), b_normal[:, _G])
    # boost scales the moved share: B(t) = B_n + w_t (B_c* - B_n) with B_c* the
    # full move; the blended row norm stays < 1 by convexity.
    w = boost[:, None]
    sys_n = factors @ b_normal.T
    sys_c = factors @ b_crisis.T
    bn_bc = (b_normal * b_crisis).sum(axis=1)
    r2_c = (b_crisis**2).sum(axis=1)
    r2_t = (1 - w) ** 2 * r2 + 2 * w * (1 - w) * bn_bc + w**2 * r2_c
    idio_w = np.sqrt(np.clip(1.0 - r2_t, 0.0, None))
    m = 1.0 + sens[None, :] * (stress[:, None] - 1.0)
    scale = sigma[None, :] * m
    loading_g = (1 - w) * b_normal[None, :, _G] + w * b_crisis[None, :, _G]

    noise = scale * ((1 - w) * sys_n + w * sys_c + idio_w * idio)
    for _, _, window in falls:
        # Each instrument's noise sums to zero over an episode: its net move
        # there is the prescribed one whatever the seed.
        if window.any():
            noise[window] -= noise[window].mean(axis=0)
    realised = noise.std(axis=0)
    noise *= np.divide(sigma, realised, out=np.ones_like(sigma), where=realised > 0)[None, :]
    returns = drift[None, :] + noise
    for ep, fall, window in falls:
        if window.any() and is_equity.any():
            effect = scale * loading_g * fall[:, None]
            delta = _fall_drift(returns[window][:, is_equity], effect[window][:, is_equity], ep.equity_drop)
            returns += delta * effect

    start_price = np.array([s.start_price for s in specs])
    log_prices = np.log(start_price)[None, :] + np.vstack([np.zeros((1, n)), np.cumsum(returns, axis=0)])
    prices = np.exp(log_prices)
    return MarketPaths(
        dates=dates,
        instruments=tuple(names),
        asset_classes=tuple(s.asset_class for s in specs),
        currencies=tuple(s.currency for s in specs),
        prices=prices,
        log_returns=returns,
        stress=stress,
    )


def format_fixed(values: np.ndarray, decimals: np.ndarray) -> np.ndarray:
    """Format positive numbers as plain decimals, vectorised.

    Parameters
    ----------
    values : (T, N) float
        Positive numbers.
    decimals : (N,) int
        Decimal places per column (0 to 9).

    Returns
    -------
    (T, N) numpy.dtypes.StringDType
        E.g. ``"123.4567"``; never exponent notation.

    Notes
    -----
    Rounds ``values * 10**decimals`` half-to-even to an integer and splits it
    into integer and zero-padded fractional digits, so no per-element Python
    runs.
    """
    values = np.asarray(values, dtype=float)
    decimals = np.broadcast_to(np.asarray(decimals, dtype=np.int64), values.shape[-1:])
    if np.any((decimals < 0) | (decimals > 9)):
        raise ValueError("decimals must be between 0 and 9")
    unit = 10 ** decimals
    scaled = np.rint(values * unit)
    if not np.all(np.isfinite(scaled)) or np.any(scaled <= 0) or np.any(scaled >= 2.0**62):
        raise ValueError("values must be finite, positive and representable at the requested decimals")
    whole, frac = np.divmod(scaled.astype(np.int64), unit)
    text = whole.astype(_STR)
    frac_text = np.strings.add(".", np.strings.zfill(frac.astype(_STR), decimals))
    return np.where(decimals > 0, np.strings.add(text, frac_text), text)


def price_decimals(start_price: np.ndarray) -> np.ndarray:
    """Decimal places for closes: about seven significant digits at the start
    price, at most six decimals (fine enough that chance repeats of a close,
    which would look stale, are rare).

    Parameters
    ----------
    start_price : (N,) float

    Returns
    -------
    (N,) int
    """
    digits = np.floor(np.log10(start_price)).astype(np.int64) + 1
    return np.clip(7 - digits, 0, 6)


def write_price_csv(
    path: Path,
    dates: np.ndarray,
    instruments: Sequence[str],
    closes: np.ndarray,
    present: np.ndarray,
    decimals: np.ndarray,
    *,
    chunk_rows: int = 250_000,
) -> None:
    """Write ``date,instrument,close`` rows sorted by date, then column order.

    Parameters
    ----------
    path : Path
    dates : (T,) datetime64[D]
    instruments : sequence of str, length N
    closes : (T, N) float
    present : (T, N) bool
        Rows to write (False leaves a gap).
    decimals : (N,) int
        Decimal places per instrument.
    chunk_rows : int
        Rows formatted at a time, bounding memory for large universes.
    """
    names = np.strings.add(np.asarray(instruments, dtype=_STR), ",")
    date_text = np.strings.add(dates.astype("datetime64[D]").astype(str).astype(_STR), ",")
    step = max(1, chunk_rows // max(1, len(names)))
    with open(path, "w", encoding="ascii", newline="\n") as fh:
        fh.write("date,instrument,close\n")
        for lo in range(0, len(dates), step):
            hi = min(lo + step, len(dates))
            close_text = format_fixed(closes[lo:hi], decimals)
            head = np.strings.add(date_text[lo:hi, None], names[None, :])
            lines = np.strings.add(head, close_text)[present[lo:hi]]
            if lines.size:
                fh.write("\n".join(lines.tolist()))
                fh.write("\n")


# Target base-currency values per holding on the last date (signed). The
# hedged book's future and FX legs are sized from its equity legs.
_TARGETS = {
    "alder_long_only": {
        "EQ.VELMARSK": 450_000, "EQ.QUORVENTA": 400_000, "EQ.OSTRELLIN": 350_000,
        "EQ.KARVENHOLT": 400_000, "EQ.TALLOWMERE": 500_000, "EQ.SPARROWDYNE": 350_000,
        "EQ.GRISTVALE": 400_000, "BOND.EURGOV10": 1_200_000,
    },
    "birch_long_short": {
        "EQ.VELMARSK": 600_000, "EQ.KARVENHOLT": 500_000, "EQ.TALLOWMERE": 550_000,
        "CMD.BASEMETAL": 300_000, "BOND.USDGOV10": 400_000,
        "EQ.QUORVENTA": -450_000, "EQ.OSTRELLIN": -500_000, "EQ.SPARROWDYNE": -400_000,
    },
    "cedar_hedged": {
        "EQ.VELMARSK": 700_000, "EQ.QUORVENTA": 500_000, "EQ.OSTRELLIN": 400_000,
        "EQ.KARVENHOLT": 600_000, "EQ.TALLOWMERE": 600_000, "EQ.SPARROWDYNE": 500_000,
        "EQ.GRISTVALE": 400_000,
    },
}
_LOTS = {"equity": 10, "equity_index_future": 1, "commodity": 10, "bond": 100, "fx": 1000}
_HEDGE_BOOK = "cedar_hedged"
_HEDGE_FUTURE = "FUT.VALDORIA20"
_CHANGED = ("birch_long_short", "EQ.KARVENHOLT", 0.6)  # book, instrument, earlier share
POSITION_DATES = ("2024-12-30", "2024-12-31")


def _value_in_base(paths: MarketPaths, row: int) -> np.ndarray:
    """Base-currency value of one unit of each instrument on date ``row``."""
    fx = np.ones(len(paths.instruments))
    for i, ccy in enumerate(paths.currencies):
        if ccy != BASE_CURRENCY:
            fx[i] = paths.prices[row, paths.column(f"FX.{ccy}")]
    return paths.prices[row] * fx


def demo_positions(paths: MarketPaths) -> dict[str, dict[str, dict[str, int]]]:
    """Quantities of the three demo books on each position date.

    Parameters
    ----------
    paths : MarketPaths
        The demo market (its last date prices the targets).

    Returns
    -------
    dict
        ``{date: {portfolio: {instrument: quantity}}}``; the last date's
        books are the current ``positions.csv``. The earlier date differs by
        one quantity (``_CHANGED``), for the history feature.
    """
    unit = _value_in_base(paths, -1)
    lots = {name: _LOTS[ac] for name, ac in zip(paths.instruments, paths.asset_classes)}

    def units(name: str, value: float) -> int:
        lot = lots[name]
        return int(round(value / unit[paths.column(name)] / lot)) * lot

    books = {book: {name: units(name, v) for name, v in targets.items()} for book, targets in _TARGETS.items()}
    hedged = books[_HEDGE_BOOK]
    eur_equity = sum(
        q * unit[paths.column(n)] for n, q in hedged.items() if paths.currencies[paths.column(n)] == BASE_CURRENCY
    )
    usd_equity_usd = sum(
        q * paths.prices[-1, paths.column(n)] for n, q in hedged.items() if paths.currencies[paths.column(n)] == "USD"
    )
    hedged[_HEDGE_FUTURE] = units(_HEDGE_FUTURE, -eur_equity)
    hedged["FX.USD"] = -int(round(usd_equity_usd / _LOTS["fx"])) * _LOTS["fx"]
    last = {book: dict(sorted(q.items())) for book, q in books.items()}
    earlier = {book: dict(q) for book, q in last.items()}
    book, name, share = _CHANGED
    earlier[book][name] = int(round(last[book][name] * share / lots[name])) * lots[name]
    return {POSITION_DATES[0]: earlier, POSITION_DATES[1]: last}


OPTION_COLUMNS = ("underlying", "option_type", "strike", "expiry", "implied_vol", "rate", "dividend_yield", "multiplier")
_PUT_BOOK, _PUT_UNDERLYING = "alder_long_only", "EQ.VELMARSK"
_OPTION_EXPIRY = "2025-06-30"


def option_overlay(paths: MarketPaths, books: dict[str, dict[str, int]]) -> list[tuple[tuple, tuple]]:
    """Protective puts for the long-only book: an instrument row and a position row.

    One six-month put per share of the book's largest EUR holding, struck at
    90% of its last close, implied vol = its realised vol plus 3 points.
    """
    col = paths.column(_PUT_UNDERLYING)
    close = float(paths.prices[-1, col])
    vol = float(paths.log_returns[-250:, col].std(ddof=1) * np.sqrt(_TRADING_DAYS)) + 0.03
    name = f"PUT.{_PUT_UNDERLYING[3:]}.2025-06"
    row = (name, "option", BASE_CURRENCY, _PUT_UNDERLYING, "put", f"{round(0.9 * close, 2):.2f}", _OPTION_EXPIRY,
           f"{vol:.4f}", "0.025", "0.02", "1")
    return [(row, (_PUT_BOOK, name, books[_PUT_BOOK][_PUT_UNDERLYING]))]


def _write_rows(path: Path, header: Sequence[str], rows: Iterable[Sequence[object]]) -> None:
    with open(path, "w", encoding="ascii", newline="") as fh:
        writer = csv.writer(fh, lineterminator="\n")
        writer.writerow(header)
        writer.writerows(rows)


def write_market(
    out_dir: Path | str,
    paths: MarketPaths,
    *,
    n_price_files: int = 5,
    n_portfolios: int = 3,
    holdings: int = 50,
    seed: int | np.random.Generator | None = None,
) -> tuple[Path, ...]:
    """Write a complete data folder for any simulated universe (benchmarks).

    Parameters
    ----------
    out_dir : path
        Gets ``instruments.csv``, ``prices/part_00.csv`` ... and
        ``positions.csv``.
    paths : MarketPaths
        E.g. ``simulate_market(5000, 2520, seed=1)``; must contain an
        ``FX.<CCY>`` series for every non-base currency.
    n_price_files : int
        Instruments are split into this many price files (contiguous groups).
    n_portfolios, holdings : int
        Books ``book_000`` ... each hold ``holdings`` instruments drawn at
        random, 70 % long, 20k-200k base currency each.
    seed : int or numpy.random.Generator
        Draws the books.

    Returns
    -------
    tuple of Path
        The files written. Every close is present (no planted quirks).
    """
    out = Path(out_dir)
    (out / "prices").mkdir(parents=True, exist_ok=True)
    rng = np.random.default_rng(seed)
    n = len(paths.instruments)
    files = [out / "instruments.csv"]
    _write_rows(files[0], ("instrument", "asset_class", "currency"), zip(paths.instruments, paths.asset_classes, paths.currencies))
    decimals = price_decimals(paths.prices[0])
    present = np.ones(paths.prices.shape, dtype=bool)
    for k, cols in enumerate(np.array_split(np.arange(n), min(n_price_files, n))):
        cols = cols[np.argsort(np.asarray(paths.instruments)[cols])]
        path = out / "prices" / f"part_{k:02d}.csv"
        write_price_csv(path, paths.dates, [paths.instruments[c] for c in cols], paths.prices[:, cols], present[:, cols], decimals[cols])
        files.append(path)
    unit = _value_in_base(paths, -1)
    rows = []
    for b in range(n_portfolios):
        cols = np.sort(rng.choice(n, size=min(holdings, n), replace=False))
        value = rng.uniform(20_000, 200_000, cols.size) * np.where(rng.uniform(size=cols.size) < 0.7, 1, -1)
        qty = np.rint(value / unit[cols]).astype(np.int64)
        rows += [(f"book_{b:03d}", paths.instruments[c], int(q)) for c, q in zip(cols, qty) if q != 0]
    files.append(out / "positions.csv")
    _write_rows(files[-1], ("portfolio", "instrument", "quantity"), rows)
    return tuple(files)


def _plant_quirks(paths: MarketPaths) -> tuple[np.ndarray, np.ndarray]:
    """Prices and presence mask with the planted gaps and stale stretch."""
    closes = paths.prices.copy()
    present = np.ones(closes.shape, dtype=bool)
    col = paths.column(QUIRK_INSTRUMENT)
    for first, last in QUIRK_GAPS:
        present[_in_window(paths.dates, first, last), col] = False
    rows = np.flatnonzero(_in_window(paths.dates, *QUIRK_STALE))
    closes[rows, col] = closes[rows[0], col]
    return closes, present


def write_demo(out_dir: Path | str, *, seed: int | np.random.Generator = DEFAULT_SEED) -> DemoSummary:
    """Simulate the demo fund and write its CSV files.

    Parameters
    ----------
    out_dir : path
        Folder to write into (created if missing); existing files of the
        same names are replaced.
    seed : int or numpy.random.Generator
        The committed files use :data:`DEFAULT_SEED`.

    Returns
    -------
    DemoSummary
    """
    out = Path(out_dir)
    (out / "prices").mkdir(parents=True, exist_ok=True)
    (out / "positions").mkdir(parents=True, exist_ok=True)
    specs = demo_universe()
    paths = simulate_market(specs, seed=seed, start=DEMO_START, end=DEMO_END)
    closes, present = _plant_quirks(paths)
    decimals = price_decimals(np.array([s.start_price for s in specs]))
    files = []

    books = demo_positions(paths)
    overlay = option_overlay(paths, books[POSITION_DATES[-1]])
    path = out / "instruments.csv"
    blank = ("",) * len(OPTION_COLUMNS)
    rows = [(s.name, s.asset_class, s.currency, *blank) for s in specs] + [row for row, _ in overlay]
    _write_rows(path, ("instrument", "asset_class", "currency", *OPTION_COLUMNS), rows)
    files.append(path)
    listed = [n for group in PRICE_FILES.values() for n in group]
    if sorted(listed) != sorted(paths.instruments):
        raise RuntimeError("PRICE_FILES must list every demo instrument once")
    for file_name, group in PRICE_FILES.items():
        cols = [paths.column(n) for n in group]
        path = out / "prices" / file_name
        write_price_csv(path, paths.dates, group, closes[:, cols], present[:, cols], decimals[cols])
        files.append(path)

    header = ("portfolio", "instrument", "quantity")
    for date, held in books.items():
        rows = [(book, name, q) for book, qs in held.items() for name, q in qs.items()]
        rows += [(book, name, q) for _, (book, name, q) in overlay]
        path = out / "positions" / f"{date}.csv"
        _write_rows(path, header, rows)
        files.append(path)
        if date == POSITION_DATES[-1]:
            _write_rows(out / "positions.csv", header, rows)
            files.append(out / "positions.csv")

    r = paths.log_returns
    vol = dict(zip(paths.instruments, (r.std(axis=0, ddof=1) * np.sqrt(_TRADING_DAYS)).tolist()))
    ret_dates = paths.dates[1:]
    eq = np.array([ac == "equity" for ac in paths.asset_classes])
    eur_eq = eq & np.array([c == BASE_CURRENCY for c in paths.currencies])
    basket = r[:, eur_eq].mean(axis=1)
    drawdown, ratio = {}, {}
    for ep in DEMO_EPISODES:
        inside = _in_window(ret_dates, ep.start, ep.end)
        drawdown[ep.name] = max_drawdown(basket[inside])
        ratio[ep.name] = float((r[inside][:, eq].std(axis=0) / r[~inside][:, eq].std(axis=0)).mean())
    unit = _value_in_base(paths, -1)
    gross = {
        book: float(sum(abs(q) * unit[paths.column(n)] for n, q in qs.items()))
        for book, qs in books[POSITION_DATES[-1]].items()
    }
    seed_label = int(seed) if isinstance(seed, (int, np.integer)) else None
    return DemoSummary(out, seed_label, tuple(files), paths, vol, drawdown, ratio, gross)


def main(argv: Sequence[str] | None = None) -> int:
    """Command line: ``generate_demo.py [--out DIR] [--seed N]``."""
    parser = argparse.ArgumentParser(description="Write the invented tailtrace demo scenario.")
    parser.add_argument("--out", type=Path, default=Path(__file__).resolve().parent, help="output folder (default: this script's folder)")
    parser.add_argument("--seed", type=int, default=DEFAULT_SEED, help=f"random seed (default {DEFAULT_SEED}, the committed files)")
    args = parser.parse_args(argv)
    summary = write_demo(args.out, seed=args.seed)
    print(summary.text())
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
