"""Instrument metadata the stress functions select on."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Sequence

import numpy as np

__all__ = ["InstrumentMeta", "FX_PREFIX", "FX_ASSET_CLASS"]

FX_PREFIX = "FX."  # FX rates are instruments FX.<CCY>, priced in base currency
FX_ASSET_CLASS = "fx"


@dataclass(frozen=True)
class InstrumentMeta:
    """Asset class and currency of each instrument, in the column order of the returns.

    Attributes
    ----------
    instruments : tuple of str
        Instrument names, the column labels of ``RiskSample.returns``.
    asset_class : tuple of str
        Asset class per instrument (``fx`` for the FX rates).
    currency : tuple of str
        ISO 4217 currency in which each instrument is priced.
    base_currency : str
        Currency of all P&L figures.
    """

    instruments: tuple[str, ...]
    asset_class: tuple[str, ...]
    currency: tuple[str, ...]
    base_currency: str

    def __post_init__(self) -> None:
        n = len(self.instruments)
        if len(self.asset_class) != n or len(self.currency) != n:
            raise ValueError(
                f"instruments, asset_class and currency need the same length, got "
                f"{n}, {len(self.asset_class)} and {len(self.currency)}"
            )
        if len(set(self.instruments)) != n:
            raise ValueError("instrument names must be unique")

    @classmethod
    def from_columns(
        cls,
        instruments: Sequence[str],
        asset_class: Sequence[str],
        currency: Sequence[str],
        base_currency: str,
    ) -> "InstrumentMeta":
        """Build from three parallel columns (e.g. those of instruments.csv)."""
        return cls(
            tuple(str(x) for x in instruments),
            tuple(str(x) for x in asset_class),
            tuple(str(x) for x in currency),
            str(base_currency),
        )

    @property
    def n(self) -> int:
        return len(self.instruments)

    @property
    def is_fx(self) -> np.ndarray:
        """(N,) bool: the instrument is an FX rate."""
        return np.array(
            [ac == FX_ASSET_CLASS or name.startswith(FX_PREFIX) for name, ac in zip(self.instruments, self.asset_class)],
            dtype=bool,
        )

    def fx_column(self) -> np.ndarray:
        """(N,) int: column of the FX rate translating each instrument to base, or -1.

        Non-FX instruments priced in a foreign currency ``CCY`` map to the
        column of ``FX.<CCY>``; base-currency instruments, FX rates themselves
        and currencies without an FX instrument map to -1.
        """
        is_fx = self.is_fx
        column = {name: j for j, name in enumerate(self.instruments)}
        out = np.full(self.n, -1, dtype=int)
        for i, ccy in enumerate(self.currency):
            if not is_fx[i] and ccy != self.base_currency:
                out[i] = column.get(FX_PREFIX + ccy, -1)
        return out

    def translate_to_base(self, local_log_shocks: np.ndarray) -> np.ndarray:
        """Base-currency log shocks from local-price and FX log shocks.

        Parameters
        ----------
        local_log_shocks : (S, N) array
            Log change of each instrument's price in its own currency (FX rate
            columns: log change of the rate).

        Returns
        -------
        (S, N) array
            ``x_i + x_fx(i)``: the base value of a foreign instrument is its
            local price times the FX rate, so the log changes add.
        """
        shocks = np.asarray(local_log_shocks, dtype=float)
        fx = self.fx_column()
        has_fx = fx >= 0
        out = shocks.copy()
        out[:, has_fx] += shocks[:, fx[has_fx]]
        return out
