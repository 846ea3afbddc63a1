"""A book of linear and option holdings: full revaluation and sensitivities.

Risk factors are the base-currency daily log returns of the priced
instruments (the columns of ``RiskSample.returns``). An ``FX.<CCY>`` column
holds the log return of one unit of CCY in base currency, so the local log
return of an underlying ``U`` in currency CCY is ``r(U) - r(FX.CCY)`` (just
``r(U)`` when CCY is the base currency).

An option position of ``n`` contracts with multiplier ``m`` on ``U`` is worth
``n m V(S, τ) X`` in base currency, with ``S`` the local underlying price,
``V`` the model price and ``X`` the FX rate. Under shocks ``r``:

``S' = S exp(r_U - r_X)``, ``X' = X exp(r_X)``, ``τ' = max(τ - Δτ(h), 0)``,
P&L ``= n m [V(S', τ', σ + Δσ) X' - V(S, τ, σ) X]``.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from tailtrace.errors import InputError

from .pricing import (
    DAYS_PER_YEAR,
    MODEL_GK,
    Greeks,
    carry_yield,
    horizon_calendar_days,
    option_greeks,
    option_price,
)
from .specs import OptionSpecs, validate_option_rows

__all__ = ["SENSITIVITY_COLUMNS", "MIN_VOL", "HeldOptions", "OptionBook", "build_book"]

# Columns of the per-position table (DuckDB table ``sensitivities``).
SENSITIVITY_COLUMNS = (
    "portfolio", "instrument", "underlying", "model", "currency", "option_type", "strike", "expiry",
    "quantity", "multiplier", "underlying_price", "price", "fx_rate", "value",
    "unit_delta", "unit_gamma", "delta", "fx_delta", "gamma", "vega", "theta",
)
MIN_VOL = 1e-4  # floor for shocked implied vol (0.01 vol point)
_CHUNK_ELEMENTS = 1 << 21  # options x scenarios per revaluation block (~16 MB per array)


@dataclass(frozen=True)
class HeldOptions:
    """Terms and today's state of the M distinct options held in a book.

    Attributes
    ----------
    instrument, underlying, model, currency : tuple of str
    under_col, fx_col : (M,) int
        Risk-factor column of the underlying and of ``FX.<CCY>`` (-1 when
        the option is in the base currency).
    spot, fx : (M,) float
        Local underlying price and FX rate (base value of one unit of CCY).
    strike, tau, vol, rate, carry, multiplier : (M,) float
        ``tau`` in ACT/365 years from as_of, ``carry`` the model's carry
        yield (:func:`~tailtrace.options.pricing.carry_yield`).
    is_call : (M,) bool
    expiry : (M,) datetime64[D]
    greeks : Greeks
        Today's local price and raw Greeks.
    """

    instrument: tuple[str, ...]
    underlying: tuple[str, ...]
    model: tuple[str, ...]
    currency: tuple[str, ...]
    under_col: np.ndarray
    fx_col: np.ndarray
    spot: np.ndarray
    fx: np.ndarray
    strike: np.ndarray
    tau: np.ndarray
    vol: np.ndarray
    rate: np.ndarray
    carry: np.ndarray
    multiplier: np.ndarray
    is_call: np.ndarray
    expiry: np.ndarray
    greeks: Greeks


@dataclass(frozen=True)
class OptionBook:
    """Holdings of several portfolios, ready for revaluation.

    Attributes
    ----------
    portfolios, instruments : tuple of str
        Row labels and risk-factor columns (``RiskSample.instruments`` order).
    linear_values : (P, N) float
        Base-currency value of the linear holdings per column.
    market_values : (P,) float
        Base-currency value of all holdings (linear plus options).
    exposures : (P, N) float
        First-order sensitivity of P&L to the log returns: linear values
        plus option delta-equivalents (``∂P&L/∂r``).
    gammas : (P, N, N) float
        Second-order sensitivity ``∂²P&L/∂r∂r'`` in log-return space
        (linear holdings contribute their value on the diagonal).
    thetas : (P,) float
        Base-currency P&L of one calendar day of ageing, all else fixed.
    sensitivities : pandas.DataFrame
        One row per (portfolio, instrument) position, columns
        :data:`SENSITIVITY_COLUMNS` (see ``docs/methodology-options.md``).
    """

    portfolios: tuple[str, ...]
    instruments: tuple[str, ...]
    linear_values: np.ndarray
    market_values: np.ndarray
    exposures: np.ndarray
    gammas: np.ndarray
    thetas: np.ndarray
    sensitivities: pd.DataFrame = field(repr=False)
    held: HeldOptions = field(repr=False)
    units: np.ndarray = field(repr=False)  # (P, M) contracts x multiplier

    @property
    def n_options(self) -> int:
        return len(self.held.instrument)

    def risk_sample_fields(self, window_returns: np.ndarray) -> dict[str, Any]:
        """Fields of :class:`~tailtrace.estimators.base.RiskSample` this book supplies.

        Parameters
        ----------
        window_returns : (T, N) float
            The estimation-window log returns, columns ``self.instruments``.

        Returns
        -------
        dict
            ``values`` (the exposures: linear values plus option
            delta-equivalents, so linear-parametric methods see the
            first-order book), ``pnl`` (1-day full revaluation of the window,
            options aged 1.4 calendar days), ``revalue``, ``exposures``,
            ``gammas`` and ``thetas``.
        """
        return {
            "values": self.exposures,
            "pnl": self.revalue(window_returns, 1),
            "revalue": self.revalue,
            "exposures": self.exposures,
            "gammas": self.gammas,
            "thetas": self.thetas,
        }

    def revalue(
        self,
        log_shocks: np.ndarray,
        horizon_days: float = 1,
        vol_shocks: np.ndarray | None = None,
    ) -> np.ndarray:
        """Full-revaluation P&L of every portfolio under each scenario.

        Parameters
        ----------
        log_shocks : (S, N) float
            Cumulative base-currency log returns over the horizon.
        horizon_days : float, default 1
            Trading days; options age by ``horizon_days * 7/5`` calendar days
            (0 = instantaneous shock). Options expiring within the horizon
            are settled at the intrinsic value under the shocked price.
        vol_shocks : (S, N) float, optional
            Absolute change of implied vol of the options on each underlying
            column (0.01 = one vol point), floored at :data:`MIN_VOL`.
            Default: implied vols held constant.

        Returns
        -------
        (P, S) float
            Linear part ``linear_values @ expm1(log_shocks).T`` (exactly
            :func:`tailtrace.estimators.base.linear_revalue`) plus option
            P&L ``n m [V(S', τ', σ') X' - V X]``.
        """
        shocks = np.asarray(log_shocks, dtype=np.float64)
        if shocks.ndim != 2 or shocks.shape[1] != len(self.instruments):
            raise ValueError(f"log_shocks must be (S, {len(self.instruments)}), got {shocks.shape}")
        if vol_shocks is not None:
            vol_shocks = np.asarray(vol_shocks, dtype=np.float64)
            if vol_shocks.shape != shocks.shape:
                raise ValueError(f"vol_shocks must have the shape of log_shocks {shocks.shape}")
        pnl = self.linear_values @ np.expm1(shocks).T
        m = self.n_options
        if m == 0:
            return pnl
        if horizon_days < 0:
            raise ValueError("horizon_days must be >= 0")
        o = self.held
        tau_h = np.maximum(o.tau - horizon_calendar_days(horizon_days) / DAYS_PER_YEAR, 0.0)[:, None]
        has_fx = (o.fx_col >= 0)[:, None]
        fx_col = np.where(o.fx_col >= 0, o.fx_col, 0)
        terms = dict(strike=o.strike[:, None], tau=tau_h, rate=o.rate[:, None], carry=o.carry[:, None],
                     is_call=o.is_call[:, None])
        step = max(1, _CHUNK_ELEMENTS // m)
        for start in range(0, shocks.shape[0], step):
            block = shocks[start:start + step].T  # (N, s): one row per risk factor
            r_fx = np.where(has_fx, block[fx_col], 0.0)  # (M, s)
            spot = o.spot[:, None] * np.exp(block[o.under_col] - r_fx)
            vol = o.vol[:, None]
            if vol_shocks is not None:
                vol = np.maximum(vol + vol_shocks[start:start + step].T[o.under_col], MIN_VOL)
            value = option_price(spot, vol=vol, **terms)
            change = o.fx[:, None] * (value * np.exp(r_fx) - o.greeks.price[:, None])
            pnl[:, start:start + step] += self.units @ change
        return pnl


class _Market:
    """Prices and FX rates at as_of, failing with the file that lacks them."""

    def __init__(self, prices, fx_rates, base_currency, *, prices_file, positions_file):
        self.prices, self.fx_rates, self.base = prices, dict(fx_rates or {}), base_currency
        self.prices_file, self.positions_file = prices_file, positions_file

    def price(self, name: str, row: int) -> float:
        value = self.prices.get(name)
        if value is None or not np.isfinite(value) or value <= 0:
            raise InputError(f"no positive base-currency price at as_of for {name!r} "
                             f"(needed by {self.positions_file} row {row})", file=self.prices_file,
                             column="close", value=value)
        return float(value)

    def fx(self, ccy: str, row: int) -> float:
        if ccy == self.base:
            return 1.0
        rate = float(self.fx_rates.get(ccy, self.prices.get(f"FX.{ccy}", np.nan)))
        if not np.isfinite(rate) or rate <= 0:
            raise InputError(f"no FX rate for {ccy!r} at as_of (needed by {self.positions_file} row {row}); "
                             f"expected a price series FX.{ccy}", file=self.prices_file, column="close", value=ccy)
        return rate


def _read_positions(positions: pd.DataFrame, file: str) -> pd.DataFrame:
    missing = [c for c in ("portfolio", "instrument", "quantity") if c not in positions.columns]
    if missing:
        raise InputError(f"missing column(s) {missing}", file=file)
    frame = positions.reset_index(drop=True)
    qty = pd.to_numeric(frame["quantity"], errors="coerce").to_numpy(dtype=np.float64)
    bad = np.flatnonzero(~np.isfinite(qty))
    if bad.size:
        i = int(bad[0])
        raise InputError("quantity must be a finite number", file=file, row=i + 2, column="quantity",
                         value=frame["quantity"].iloc[i])
    out = pd.DataFrame({
        "portfolio": frame["portfolio"].astype(str).str.strip(),
        "instrument": frame["instrument"].astype(str).str.strip(),
        "quantity": qty,
        "row": np.arange(len(frame)) + 2,
    })
    # Several lines for one position add up (the first line is kept for errors).
    return out.groupby(["portfolio", "instrument"], sort=False, as_index=False).agg(
        quantity=("quantity", "sum"), row=("row", "first"))


def _held_options(opt_pos, options, market, col_index, as_of, *, instruments_file) -> HeldOptions:
    names = tuple(dict.fromkeys(opt_pos["instrument"]))
    first_row = opt_pos.groupby("instrument", sort=False)["row"].first()
    spec_index = {name: k for k, name in enumerate(options.instrument)}
    k_of = np.array([spec_index[h] for h in names], dtype=np.int64)
    base = market.base
    currency = tuple(options.currency[k] if options.currency is not None else base for k in k_of)
    under_col, fx_col, spot, fx = [], [], [], []
    for h, k, ccy in zip(names, k_of, currency):
        under, spec_row, row = options.underlying[k], int(options.rows[k]), int(first_row[h])

        def fail(message, column, value):
            raise InputError(message, file=instruments_file, row=spec_row, column=column, value=value)

        if under not in col_index:
            fail("the option's underlying has no returns in the sample", "underlying", under)
        if options.model[k] == MODEL_GK and ccy != base:
            fail(f"an FX option is priced in the base currency {base!r} (FX.<CCY> closes are "
                 "base-currency prices)", "currency", ccy)
        if ccy != base and f"FX.{ccy}" not in col_index:
            fail(f"an option in {ccy} needs the returns of FX.{ccy}", "currency", ccy)
        if options.expiry[k] <= np.datetime64(pd.Timestamp(as_of).date(), "D"):
            fail(f"option has expired: expiry is on or before as_of {pd.Timestamp(as_of).date()}", "expiry",
                 str(options.expiry[k]))
        fx_rate = market.fx(ccy, row)
        under_col.append(col_index[under])
        fx_col.append(col_index[f"FX.{ccy}"] if ccy != base else -1)
        spot.append(market.price(under, row) / fx_rate)
        fx.append(fx_rate)
    model = tuple(options.model[k] for k in k_of)
    spot_a = np.array(spot, dtype=np.float64)
    strike, vol, rate = options.strike[k_of], options.implied_vol[k_of], options.rate[k_of]
    tau = options.time_to_expiry(as_of)[k_of]
    carry = carry_yield(np.array(model, dtype=str), rate, options.dividend_yield[k_of]) if names else rate
    is_call = options.is_call[k_of]
    return HeldOptions(
        instrument=names, underlying=tuple(options.underlying[k] for k in k_of), model=model, currency=currency,
        under_col=np.array(under_col, dtype=np.int64), fx_col=np.array(fx_col, dtype=np.int64), spot=spot_a,
        fx=np.array(fx, dtype=np.float64), strike=strike, tau=tau, vol=vol, rate=rate, carry=carry,
        multiplier=options.multiplier[k_of], is_call=is_call, expiry=options.expiry[k_of],
        greeks=option_greeks(spot_a, strike, tau, vol, rate, carry, is_call),
    )


def _taylor_terms(linear_values: np.ndarray, units: np.ndarray, o: HeldOptions):
    """Exposures (P, N) and log-space gammas (P, N, N); formulas in build_book."""
    n_p, n_c = linear_values.shape
    g = o.greeks.price * o.fx
    g1 = o.greeks.delta * o.spot * o.fx
    g2 = (o.greeks.gamma * o.spot ** 2 + o.greeks.delta * o.spot) * o.fx
    exposures = linear_values.copy()
    gammas = np.zeros((n_p, n_c, n_c))
    diag = np.arange(n_c)
    gammas[:, diag, diag] = linear_values
    every = slice(None)
    np.add.at(exposures, (every, o.under_col), units * g1)
    np.add.at(gammas, (every, o.under_col, o.under_col), units * g2)
    f = o.fx_col >= 0
    if np.any(f):
        u, x, w = o.under_col[f], o.fx_col[f], units[:, f]
        np.add.at(exposures, (every, x), w * (g - g1)[f])
        np.add.at(gammas, (every, u, x), w * (g1 - g2)[f])
        np.add.at(gammas, (every, x, u), w * (g1 - g2)[f])
        np.add.at(gammas, (every, x, x), w * (g2 - 2.0 * g1 + g)[f])
    return exposures, gammas


def _sensitivity_table(linear: pd.DataFrame, lin_price, lin_fx, lin_ccy, opt_pos, o: HeldOptions) -> pd.DataFrame:
    lin_value = linear["quantity"].to_numpy(dtype=np.float64) * lin_price
    n_lin = len(linear)
    lin_table = {
        "portfolio": linear["portfolio"].to_numpy(), "instrument": linear["instrument"].to_numpy(),
        "underlying": linear["instrument"].to_numpy(), "model": np.full(n_lin, "linear", dtype=object),
        "currency": np.array(lin_ccy, dtype=object), "option_type": np.full(n_lin, None, dtype=object),
        "strike": np.full(n_lin, np.nan), "expiry": np.full(n_lin, "NaT", dtype="datetime64[D]"),
        "quantity": linear["quantity"].to_numpy(dtype=np.float64), "multiplier": np.ones(n_lin),
        "underlying_price": lin_price / lin_fx, "price": lin_price / lin_fx, "fx_rate": lin_fx,
        "value": lin_value, "unit_delta": np.ones(n_lin), "unit_gamma": np.zeros(n_lin), "delta": lin_value,
        **{k: np.zeros(n_lin) for k in ("fx_delta", "gamma", "vega", "theta")},
    }
    j = opt_pos["instrument"].map({h: i for i, h in enumerate(o.instrument)}).to_numpy(dtype=np.int64)
    qty = opt_pos["quantity"].to_numpy(dtype=np.float64)
    n = qty * o.multiplier[j]
    gr, s, fx = o.greeks, o.spot[j], o.fx[j]
    opt_table = {
        "portfolio": opt_pos["portfolio"].to_numpy(), "instrument": opt_pos["instrument"].to_numpy(),
        "underlying": np.array(o.underlying, dtype=object)[j], "model": np.array(o.model, dtype=object)[j],
        "currency": np.array(o.currency, dtype=object)[j], "option_type": np.where(o.is_call[j], "call", "put"),
        "strike": o.strike[j], "expiry": o.expiry[j], "quantity": qty, "multiplier": o.multiplier[j],
        "underlying_price": s, "price": gr.price[j], "fx_rate": fx, "value": n * gr.price[j] * fx,
        "unit_delta": gr.delta[j], "unit_gamma": gr.gamma[j], "delta": n * gr.delta[j] * s * fx,
        "fx_delta": np.where(o.fx_col[j] >= 0, n * (gr.price[j] - gr.delta[j] * s) * fx, 0.0),
        "gamma": n * gr.gamma[j] * s * s * fx, "vega": n * gr.vega[j] * fx / 100.0,
        "theta": n * gr.theta[j] * fx / DAYS_PER_YEAR,
    }
    opt_table["option_type"] = opt_table["option_type"].astype(object)
    table = pd.DataFrame({c: np.concatenate([lin_table[c], opt_table[c]]) for c in SENSITIVITY_COLUMNS})
    table["expiry"] = pd.to_datetime(table["expiry"])  # NaT on linear rows
    return table.sort_values(["portfolio", "instrument"], kind="stable").reset_index(drop=True)


def build_book(
    positions: pd.DataFrame,
    instruments: pd.DataFrame,
    prices: Mapping[str, float],
    *,
    as_of: Any,
    columns: Sequence[str],
    base_currency: str,
    fx_rates: Mapping[str, float] | None = None,
    options: OptionSpecs | None = None,
    portfolios: Sequence[str] | None = None,
    positions_file: str = "positions.csv",
    instruments_file: str = "instruments.csv",
    prices_file: str = "prices",
) -> OptionBook:
    """Build the revaluation function and sensitivities of a book.

    Parameters
    ----------
    positions : DataFrame
        ``portfolio, instrument, quantity`` in file order (units of a linear
        instrument, or contracts of an option).
    instruments : DataFrame
        The instruments table: ``instrument, asset_class, currency`` and the
        option columns of :mod:`tailtrace.options.specs`.
    prices : mapping instrument -> float
        Base-currency close at ``as_of`` of every held linear instrument and
        every option underlying (``FX.<CCY>`` closes double as FX rates).
    as_of : date-like
        Valuation date (ACT/365 time to expiry is measured from it).
    columns : sequence of str
        Risk-factor columns, i.e. ``RiskSample.instruments``.
    base_currency : str
        Currency the figures are in.
    fx_rates : mapping currency -> float, optional
        Base value of one unit of each currency; defaults to the
        ``FX.<CCY>`` entries of ``prices``.
    options : OptionSpecs, optional
        Already validated option rows; validated from ``instruments`` if
        omitted (underlyings must be among ``columns``).
    portfolios : sequence of str, optional
        Row order; default: order of first appearance in ``positions``.
    positions_file, instruments_file, prices_file : str
        Names used in error messages.

    Returns
    -------
    OptionBook

    Raises
    ------
    InputError
        Unknown instrument or portfolio in positions, missing price or FX
        rate, a held option expired on or before ``as_of`` (also when
        ``options`` were validated for another date), an FX option not in
        the base currency, an option currency whose ``FX.<CCY>`` has no
        returns column.

    Notes
    -----
    With ``g = V X``, ``g1 = Δ S X``, ``g2 = (Γ S² + Δ S) X`` per contract
    unit, an option adds ``g1`` to the exposure of its underlying and
    ``g - g1`` to that of its currency's FX column; to the log-space gamma it
    adds ``g2`` (UU), ``g1 - g2`` (UX and XU) and ``g2 - 2 g1 + g`` (XX).
    These are the derivatives of ``V(S e^{r_U - r_X}) X e^{r_X}`` at 0.
    A linear holding of value ``v`` adds ``v`` to its exposure and to the
    diagonal of its gamma (derivatives of ``v (e^r - 1)``).
    """
    columns = tuple(columns)
    col_index = {c: j for j, c in enumerate(columns)}
    if options is None:
        options = validate_option_rows(instruments, file=instruments_file, known_instruments=columns, as_of=as_of)
    market = _Market(prices, fx_rates, base_currency, prices_file=prices_file, positions_file=positions_file)
    pos = _read_positions(positions, positions_file)
    order = tuple(portfolios) if portfolios is not None else tuple(dict.fromkeys(pos["portfolio"]))
    p_index = {p: i for i, p in enumerate(order)}
    for column, ok, message in (
        ("portfolio", pos["portfolio"].isin(order), "portfolio not in the list of portfolios"),
        ("instrument", pos["instrument"].isin(options.instrument) | pos["instrument"].isin(col_index),
         "instrument is neither an option nor an instrument with a price series"),
    ):
        if not ok.all():
            bad = pos.loc[~ok].iloc[0]
            raise InputError(message, file=positions_file, row=int(bad["row"]), column=column, value=bad[column])
    is_opt = pos["instrument"].isin(options.instrument).to_numpy()
    linear, opt_pos = pos.loc[~is_opt], pos.loc[is_opt]

    meta = instruments.reset_index(drop=True)
    currency_of = (dict(zip(meta["instrument"].astype(str).str.strip(), meta["currency"].astype(str).str.strip()))
                   if "currency" in meta.columns else {})
    lin_ccy = [currency_of.get(n, base_currency) for n in linear["instrument"]]
    lin_price = np.array([market.price(n, r) for n, r in zip(linear["instrument"], linear["row"])], dtype=np.float64)
    lin_fx = np.array([market.fx(c, r) for c, r in zip(lin_ccy, linear["row"])], dtype=np.float64)
    linear_values = np.zeros((len(order), len(columns)))
    np.add.at(linear_values, (linear["portfolio"].map(p_index).to_numpy(dtype=np.int64),
                              linear["instrument"].map(col_index).to_numpy(dtype=np.int64)),
              linear["quantity"].to_numpy(dtype=np.float64) * lin_price)

    held = _held_options(opt_pos, options, market, col_index, as_of, instruments_file=instruments_file)
    j = opt_pos["instrument"].map({h: i for i, h in enumerate(held.instrument)}).to_numpy(dtype=np.int64)
    units = np.zeros((len(order), len(held.instrument)))
    np.add.at(units, (opt_pos["portfolio"].map(p_index).to_numpy(dtype=np.int64), j),
              opt_pos["quantity"].to_numpy(dtype=np.float64) * held.multiplier[j])
    exposures, gammas = _taylor_terms(linear_values, units, held)
    return OptionBook(
        portfolios=order, instruments=columns, linear_values=linear_values,
        market_values=linear_values.sum(axis=1) + units @ (held.greeks.price * held.fx),
        exposures=exposures, gammas=gammas, thetas=units @ (held.greeks.theta * held.fx) / DAYS_PER_YEAR,
        sensitivities=_sensitivity_table(linear, lin_price, lin_fx, lin_ccy, opt_pos, held),
        held=held, units=units,
    )
