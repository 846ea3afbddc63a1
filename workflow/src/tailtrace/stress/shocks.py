"""Hypothetical shock scenarios: read shocks.yaml and turn it into log shocks per instrument."""

from __future__ import annotations

import warnings

from dataclasses import dataclass
from pathlib import Path
from typing import Sequence

import numpy as np

from ..errors import ModelWarning, InputError
from ..reference import ASSET_CLASSES
from .instruments import InstrumentMeta
from .yamlconfig import load_yaml_document, schema_path

__all__ = [
    "SELECTORS",
    "SELECTOR_LEVEL",
    "Shock",
    "ShockScenario",
    "ResolvedShocks",
    "load_shock_scenarios",
    "selector_mask",
    "resolve_scenarios",
]

SELECTORS = ("instrument", "asset_class", "currency")
# more specific selectors override less specific ones
SELECTOR_LEVEL = {"currency": 1, "asset_class": 2, "instrument": 3}
PRICE_TYPES = ("relative", "absolute")
VOL_TYPE = "vol"


@dataclass(frozen=True)
class Shock:
    """One line of a scenario: which instruments move, how, and by how much.

    Attributes
    ----------
    selector : str
        ``instrument``, ``asset_class`` or ``currency``.
    target : str
        The instrument name, asset class or ISO currency selected.
    type : str
        ``relative`` (price × (1 + size)), ``absolute`` (price + size, in the
        instrument's currency) or ``vol`` (implied vol + size, decimal).
    size : float
    line : int or None
        Line in the YAML file, for error messages.
    """

    selector: str
    target: str
    type: str
    size: float
    line: int | None = None


@dataclass(frozen=True)
class ShockScenario:
    """A named hypothetical scenario.

    Attributes
    ----------
    name, description : str
    horizon_days : int
        Days the book is aged when revalued (0 = instantaneous shock).
    shocks : tuple of Shock
    file : str
    line : int or None
    """

    name: str
    description: str
    horizon_days: int
    shocks: tuple[Shock, ...]
    file: str = ""
    line: int | None = None


def load_shock_scenarios(path: str | Path, *, schema: str | Path | None = None) -> tuple[ShockScenario, ...]:
    """Read and validate ``shocks.yaml``.

    Parameters
    ----------
    path : path
        The scenario file (see ``workflow/schemas/shocks.schema.yaml``).
    schema : path, optional
        Schema file; defaults to the one beside the package.

    Returns
    -------
    tuple of ShockScenario

    Raises
    ------
    InputError
        Schema violation, a shock with none or several selectors, a relative
        shock of −100 % or below, or a repeated scenario name; the message
        names file, line and key.
    """
    doc = load_yaml_document(path, schema or schema_path("shocks.schema.yaml"))
    scenarios: list[ShockScenario] = []
    seen: dict[str, int | None] = {}
    for i, entry in enumerate(doc.data["scenarios"]):
        where: list[str | int] = ["scenarios", i]
        name = entry["name"]
        if name in seen:
            raise doc.error(
                f"scenario name '{name}' repeats the entry at line {seen[name]}", where + ["name"], "name", name
            )
        seen[name] = doc.line_of(where)
        shocks = []
        for k, item in enumerate(entry["shocks"]):
            at = where + ["shocks", k]
            chosen = [s for s in SELECTORS if s in item]
            if len(chosen) != 1:
                raise doc.error(
                    f"scenario '{name}', shock {k + 1}: give exactly one of {', '.join(SELECTORS)}"
                    f" (found {', '.join(chosen) or 'none'})",
                    at,
                )
            size = float(item["size"])
            if item["type"] == "relative" and size <= -1.0:
                raise doc.error(
                    f"scenario '{name}', shock {k + 1}: a relative shock must be above -1 (a fall of 100 % or more)",
                    at + ["size"],
                    "size",
                    size,
                )
            shocks.append(Shock(chosen[0], str(item[chosen[0]]), item["type"], size, doc.line_of(at)))
        scenarios.append(
            ShockScenario(
                name, entry.get("description", ""), int(entry.get("horizon_days", 0)), tuple(shocks), doc.file, seen[name]
            )
        )
    return tuple(scenarios)


def selector_mask(meta: InstrumentMeta, selector: str, target: str) -> np.ndarray:
    """(N,) bool of the instruments a selector picks.

    Notes
    -----
    ``currency: CCY`` picks the non-FX instruments priced in CCY; FX rates
    are picked by ``instrument: FX.<CCY>`` or ``asset_class: fx``.
    """
    if selector == "instrument":
        return np.array([name == target for name in meta.instruments], dtype=bool)
    if selector == "asset_class":
        return np.array([ac == target for ac in meta.asset_class], dtype=bool)
    if selector == "currency":
        return np.array([ccy == target for ccy in meta.currency], dtype=bool) & ~meta.is_fx
    raise ValueError(f"unknown selector {selector!r}; known: {', '.join(SELECTORS)}")


@dataclass(frozen=True)
class ResolvedShocks:
    """Scenarios as arrays over instruments.

    Attributes
    ----------
    scenarios : tuple of ShockScenario
    instruments : tuple of str
    horizon_days : (S,) int
    local_log_shocks : (S, N) float
        Log change of each price in its own currency (FX columns: of the rate).
    log_shocks : (S, N) float
        Base-currency log shocks for ``revalue``: local shock plus the shock
        of the instrument's FX rate.
    vol_shocks : (S, N) float
        Absolute implied-vol change per instrument (decimal).
    price_level, vol_level : (S, N) int8
        Selector level that set each shock: 0 none, 1 currency,
        2 asset class, 3 instrument.
    """

    scenarios: tuple[ShockScenario, ...]
    instruments: tuple[str, ...]
    horizon_days: np.ndarray
    local_log_shocks: np.ndarray
    log_shocks: np.ndarray
    vol_shocks: np.ndarray
    price_level: np.ndarray
    vol_level: np.ndarray


def _error(scen: ShockScenario, shock: Shock, message: str, column: str | None = None, value: object = None):
    return InputError(f"scenario '{scen.name}': {message}", file=scen.file, row=shock.line, column=column, value=value)


def resolve_scenarios(
    scenarios: Sequence[ShockScenario], meta: InstrumentMeta, *, prices: np.ndarray | None = None
) -> ResolvedShocks:
    """Turn scenarios into per-instrument log shocks and vol shocks.

    Parameters
    ----------
    scenarios : sequence of ShockScenario
    meta : InstrumentMeta
        Columns in the order of ``revalue``'s shocks.
    prices : (N,) array, optional
        Today's prices in each instrument's own currency; needed only for
        ``absolute`` shocks.

    Returns
    -------
    ResolvedShocks

    Raises
    ------
    InputError
        A selector that picks no instrument, two shocks of the same kind and
        level on one instrument, an absolute shock without prices or one that
        takes a price to zero or below; located at the shock's line.

    Notes
    -----
    Per instrument, price shocks (relative and absolute) and vol shocks are
    resolved separately; the most specific selector wins:
    instrument > asset_class > currency. Relative ``r`` becomes
    ``log(1 + r)``, absolute ``a`` on price ``p`` becomes ``log(1 + a / p)``.
    An instrument priced in a foreign currency then takes its currency's FX
    log shock too (:meth:`InstrumentMeta.translate_to_base`).
    """
    S, N = len(scenarios), meta.n
    local = np.zeros((S, N))
    vol = np.zeros((S, N))
    price_level = np.zeros((S, N), dtype=np.int8)
    vol_level = np.zeros((S, N), dtype=np.int8)
    price_line = np.zeros((S, N), dtype=int)
    vol_line = np.zeros((S, N), dtype=int)
    px = None if prices is None else np.asarray(prices, dtype=float)
    if px is not None and px.shape != (N,):
        raise ValueError(f"prices must have shape ({N},), got {px.shape}")
    for s, scen in enumerate(scenarios):  # a handful of scenarios and shocks, not days
        for shock in scen.shocks:
            mask = selector_mask(meta, shock.selector, shock.target)
            if not mask.any() and shock.selector == "asset_class" and shock.target not in ASSET_CLASSES:
                raise _error(scen, shock, f"{shock.selector} '{shock.target}' matches no instrument and is not a "
                             "known asset class", shock.selector, shock.target)
            if not mask.any():  # today's book holds nothing it selects: a no-op, but say so
                warnings.warn(f"shock scenario '{scen.name}': {shock.selector} '{shock.target}' matches no "
                              "instrument of today's books; that shock is skipped", ModelWarning, stacklevel=2)
                continue
            is_vol = shock.type == VOL_TYPE
            level, lines = (vol_level, vol_line) if is_vol else (price_level, price_line)
            lvl = SELECTOR_LEVEL[shock.selector]
            clash = mask & (level[s] == lvl)
            if clash.any():
                first = meta.instruments[int(np.argmax(clash))]
                raise _error(
                    scen,
                    shock,
                    f"{shock.selector} '{shock.target}' shocks {first} again at the same level as line {lines[s][clash][0]}",
                    shock.selector,
                    shock.target,
                )
            take = mask & (level[s] < lvl)
            if is_vol:
                vol[s, take] = shock.size
            elif shock.type == "relative":
                local[s, take] = np.log1p(shock.size)
            else:
                if px is None:
                    raise _error(scen, shock, "absolute shocks need today's prices (prices=...)", "type", shock.type)
                moved = px[take] + shock.size
                if np.any(moved <= 0):
                    bad = meta.instruments[int(np.flatnonzero(take)[np.argmax(moved <= 0)])]
                    raise _error(scen, shock, f"absolute shock takes the price of {bad} to zero or below", "size", shock.size)
                local[s, take] = np.log(moved / px[take])
            level[s, take] = lvl
            lines[s, take] = shock.line or 0
    return ResolvedShocks(
        scenarios=tuple(scenarios),
        instruments=meta.instruments,
        horizon_days=np.array([sc.horizon_days for sc in scenarios], dtype=int),
        local_log_shocks=local,
        log_shocks=meta.translate_to_base(local),
        vol_shocks=vol,
        price_level=price_level,
        vol_level=vol_level,
    )
