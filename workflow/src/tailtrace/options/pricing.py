"""Vectorised European option prices and Greeks.

All three supported models are the generalised Black–Scholes formula with a
different *carry yield* ``q``:

==============================  ===============  ==========================
model                           underlying ``S``  carry yield ``q``
==============================  ===============  ==========================
Black–Scholes–Merton (``bsm``)  spot price       continuous dividend yield
Black-76 (``black76``)          futures price    the discount rate ``r``
Garman–Kohlhagen (``gk``)       FX spot rate     the foreign interest rate
==============================  ===============  ==========================

Every function broadcasts its arguments with numpy, so one call prices an
``(options, scenarios)`` grid. Units of the raw Greeks returned here:

* ``delta`` = dV/dS, ``gamma`` = d²V/dS² (per unit of the underlying price);
* ``vega`` = dV/dσ per unit of volatility (σ = 0.20 means 20 %): divide by
  100 for one vol point;
* ``theta`` = dV/dt per year (calendar time passing, i.e. -dV/dτ): divide by
  365 for one calendar day.

Time to expiry is a year fraction ACT/365 (:func:`year_fraction`). At or
after expiry (τ <= 0) the price is the intrinsic value and the Greeks are
those of the payoff (delta 0 or ±1, gamma, vega and theta 0).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike
from scipy.special import ndtr

__all__ = [
    "MODEL_BSM",
    "MODEL_BLACK76",
    "MODEL_GK",
    "MODELS",
    "DAYS_PER_YEAR",
    "CALENDAR_DAYS_PER_TRADING_DAY",
    "Greeks",
    "year_fraction",
    "horizon_calendar_days",
    "carry_yield",
    "option_price",
    "option_greeks",
    "bsm_price",
    "black76_price",
    "garman_kohlhagen_price",
]

MODEL_BSM = "bsm"
MODEL_BLACK76 = "black76"
MODEL_GK = "garman_kohlhagen"
MODELS = (MODEL_BSM, MODEL_BLACK76, MODEL_GK)

DAYS_PER_YEAR = 365.0  # ACT/365 fixed
# A horizon of h trading days spans about h * 7/5 calendar days (weekends).
CALENDAR_DAYS_PER_TRADING_DAY = 7.0 / 5.0

_SQRT_2PI = np.sqrt(2.0 * np.pi)


@dataclass(frozen=True)
class Greeks:
    """Model price and first/second-order sensitivities (raw model units).

    Attributes
    ----------
    price : array
        Option value per unit of the underlying, in the option's currency.
    delta, gamma : array
        dV/dS and d²V/dS².
    vega : array
        dV/dσ per unit of volatility (not per vol point).
    theta : array
        dV/dt per year of calendar time (the negative of dV/dτ).
    """

    price: np.ndarray
    delta: np.ndarray
    gamma: np.ndarray
    vega: np.ndarray
    theta: np.ndarray


def year_fraction(start: ArrayLike, end: ArrayLike) -> np.ndarray:
    """ACT/365 year fraction between two dates.

    Parameters
    ----------
    start, end : date-like or arrays of them
        Anything ``numpy.datetime64(..., 'D')`` accepts.

    Returns
    -------
    numpy.ndarray
        ``(end - start) / 365`` in days (negative when ``end`` is earlier).
    """
    days = np.asarray(end, dtype="datetime64[D]") - np.asarray(start, dtype="datetime64[D]")
    return days.astype(np.float64) / DAYS_PER_YEAR


def horizon_calendar_days(horizon_days: ArrayLike) -> np.ndarray:
    """Calendar days an option ages over a horizon of trading days.

    Notes
    -----
    ``calendar_days = horizon_days * 7 / 5``: a week of five trading days is
    seven calendar days, so a 10-day horizon ages options by 14 days, which
    matches ACT/365 time to expiry. Fractional days are kept (no rounding).
    """
    return np.asarray(horizon_days, dtype=np.float64) * CALENDAR_DAYS_PER_TRADING_DAY


def carry_yield(model: ArrayLike, rate: ArrayLike, dividend_yield: ArrayLike) -> np.ndarray:
    """Carry yield ``q`` of the generalised formula for each model.

    Parameters
    ----------
    model : str or array of str
        One of :data:`MODELS`.
    rate : array
        Continuously compounded discount rate of the option's currency
        (the domestic rate for Garman–Kohlhagen).
    dividend_yield : array
        Continuous dividend yield (BSM) or foreign interest rate (GK);
        ignored for Black-76.

    Returns
    -------
    numpy.ndarray
        ``dividend_yield`` for BSM and GK, ``rate`` for Black-76.
    """
    model = np.asarray(model)
    unknown = ~np.isin(model, MODELS)
    if np.any(unknown):
        raise ValueError(f"unknown option model(s): {sorted(set(np.atleast_1d(model[unknown]).tolist()))}")
    return np.where(model == MODEL_BLACK76, rate, dividend_yield).astype(np.float64)


def _d1_d2(spot, strike, tau_pos, vol, rate, carry):
    sqrt_tau = np.sqrt(tau_pos)
    vol_sqrt_tau = vol * sqrt_tau
    d1 = (np.log(spot / strike) + (rate - carry + 0.5 * vol * vol) * tau_pos) / vol_sqrt_tau
    return d1, d1 - vol_sqrt_tau, sqrt_tau


def option_price(
    spot: ArrayLike,
    strike: ArrayLike,
    tau: ArrayLike,
    vol: ArrayLike,
    rate: ArrayLike,
    carry: ArrayLike,
    is_call: ArrayLike,
) -> np.ndarray:
    """Generalised Black–Scholes price of European options (broadcasting).

    Parameters
    ----------
    spot : array
        Underlying price (spot, futures price or FX rate), > 0.
    strike : array
        Strike, > 0.
    tau : array
        Time to expiry in years; values <= 0 give the intrinsic value.
    vol : array
        Implied volatility per year, > 0.
    rate : array
        Discount rate (continuous).
    carry : array
        Carry yield ``q`` (see :func:`carry_yield`).
    is_call : array of bool
        True for calls, False for puts.

    Returns
    -------
    numpy.ndarray
        Broadcast shape of the inputs.

    Notes
    -----
    ``d1 = [ln(S/K) + (r - q + σ²/2)τ] / (σ√τ)``, ``d2 = d1 - σ√τ``;
    call ``S e^{-qτ} N(d1) - K e^{-rτ} N(d2)``, put
    ``K e^{-rτ} N(-d2) - S e^{-qτ} N(-d1)``.

    References
    ----------
    Black & Scholes (1973); Merton (1973); Black (1976), "The pricing of
    commodity contracts"; Garman & Kohlhagen (1983), "Foreign currency option
    values"; Haug, *The Complete Guide to Option Pricing Formulas* (2007), ch. 1.
    """
    return _evaluate(spot, strike, tau, vol, rate, carry, is_call, greeks=False)


def option_greeks(
    spot: ArrayLike,
    strike: ArrayLike,
    tau: ArrayLike,
    vol: ArrayLike,
    rate: ArrayLike,
    carry: ArrayLike,
    is_call: ArrayLike,
) -> Greeks:
    """Price, delta, gamma, vega and theta of European options (broadcasting).

    Parameters
    ----------
    spot, strike, tau, vol, rate, carry, is_call
        As in :func:`option_price`.

    Returns
    -------
    Greeks
        Raw model units (see the module docstring).

    Notes
    -----
    With ``s = ±1`` for calls/puts, ``Dq = e^{-qτ}``, ``Dr = e^{-rτ}``:
    delta ``s Dq N(s d1)``; gamma ``Dq φ(d1) / (S σ √τ)``; vega
    ``S Dq φ(d1) √τ``; theta
    ``-S Dq φ(d1) σ / (2√τ) + s q S Dq N(s d1) - s r K Dr N(s d2)``.
    For Black-76 (q = r) theta holds the futures price fixed.

    References
    ----------
    Hull, *Options, Futures, and Other Derivatives*, chapter on the Greek
    letters; Haug (2007), section 2.1.
    """
    return _evaluate(spot, strike, tau, vol, rate, carry, is_call, greeks=True)


def _evaluate(spot, strike, tau, vol, rate, carry, is_call, *, greeks):
    spot, strike, tau, vol, rate, carry = (
        np.asarray(a, dtype=np.float64) for a in (spot, strike, tau, vol, rate, carry)
    )
    sign = np.where(np.asarray(is_call, dtype=bool), 1.0, -1.0)
    live = tau > 0.0
    # Placeholder τ = 1 where expired keeps the formula finite; np.where then
    # picks the payoff there, so no warning and no silent NaN.
    tau_pos = np.where(live, tau, 1.0)
    d1, d2, sqrt_tau = _d1_d2(spot, strike, tau_pos, vol, rate, carry)
    disc_q = np.exp(-carry * tau_pos)
    disc_r = np.exp(-rate * tau_pos)
    n1 = ndtr(sign * d1)
    n2 = ndtr(sign * d2)
    live_price = sign * (spot * disc_q * n1 - strike * disc_r * n2)
    intrinsic = np.maximum(sign * (spot - strike), 0.0)
    price = np.where(live, live_price, intrinsic)
    if not greeks:
        return price
    pdf1 = np.exp(-0.5 * d1 * d1) / _SQRT_2PI
    in_money = (sign * (spot - strike)) > 0.0
    delta = np.where(live, sign * disc_q * n1, np.where(in_money, sign, 0.0))
    gamma = np.where(live, disc_q * pdf1 / (spot * vol * sqrt_tau), 0.0)
    vega = np.where(live, spot * disc_q * pdf1 * sqrt_tau, 0.0)
    theta_live = (
        -spot * disc_q * pdf1 * vol / (2.0 * sqrt_tau)
        + sign * carry * spot * disc_q * n1
        - sign * rate * strike * disc_r * n2
    )
    theta = np.where(live, theta_live, 0.0)
    return Greeks(price=price, delta=delta, gamma=gamma, vega=vega, theta=theta)


def bsm_price(spot, strike, tau, vol, rate, dividend_yield, is_call) -> np.ndarray:
    """Black–Scholes–Merton price with a continuous dividend yield.

    Parameters
    ----------
    spot, strike, tau, vol, rate, is_call
        As in :func:`option_price`.
    dividend_yield : array
        Continuous dividend yield ``q``.

    Returns
    -------
    numpy.ndarray

    References
    ----------
    Merton (1973), "Theory of rational option pricing".
    """
    return option_price(spot, strike, tau, vol, rate, dividend_yield, is_call)


def black76_price(forward, strike, tau, vol, rate, is_call) -> np.ndarray:
    """Black-76 price of a European option on a futures (or forward) price.

    Parameters
    ----------
    forward : array
        Futures price ``F``.
    strike, tau, vol, rate, is_call
        As in :func:`option_price`.

    Returns
    -------
    numpy.ndarray

    Notes
    -----
    ``e^{-rτ} [F N(d1) - K N(d2)]`` for a call, ``d1 = [ln(F/K) + σ²τ/2]/(σ√τ)``:
    the generalised formula with carry yield ``q = r``.

    References
    ----------
    Black (1976), Journal of Financial Economics 3, 167–179.
    """
    return option_price(forward, strike, tau, vol, rate, rate, is_call)


def garman_kohlhagen_price(spot, strike, tau, vol, domestic_rate, foreign_rate, is_call) -> np.ndarray:
    """Garman–Kohlhagen price of a European FX option.

    Parameters
    ----------
    spot : array
        Price of one unit of foreign currency in domestic currency.
    strike, tau, vol, is_call
        As in :func:`option_price`.
    domestic_rate, foreign_rate : array
        Continuous interest rates of the two currencies.

    Returns
    -------
    numpy.ndarray
        Domestic-currency value per unit of foreign notional.

    References
    ----------
    Garman & Kohlhagen (1983), Journal of International Money and Finance 2,
    231–237.
    """
    return option_price(spot, strike, tau, vol, domestic_rate, foreign_rate, is_call)
