"""The committed demo scenario and its seeded generator (data_demo/)."""

from __future__ import annotations

import csv
import importlib.util
import re
import sys
from collections import defaultdict
from pathlib import Path

import numpy as np
import pytest
from scipy import stats

DEMO = Path(__file__).resolve().parents[2] / "data_demo"
ASSET_CLASSES = {"equity", "equity_index_future", "commodity", "bond", "fx"}
CRISIS = ("2022-02-14", "2022-05-31")
SELL_OFF = ("2019-08-01", "2019-08-30")


def _load_generator():
    name = "tailtrace_demo_generator"
    if name in sys.modules:
        return sys.modules[name]
    spec = importlib.util.spec_from_file_location(name, DEMO / "generate_demo.py")
    module = importlib.util.module_from_spec(spec)
    sys.modules[name] = module  # dataclasses look the module up while it loads
    spec.loader.exec_module(module)
    return module


gen = _load_generator()


def _rows(path: Path) -> list[dict[str, str]]:
    with open(path, newline="", encoding="ascii") as fh:
        reader = csv.DictReader(fh)
        rows = list(reader)
    return rows


@pytest.fixture(scope="module")
def instruments() -> dict[str, dict[str, str]]:
    """Instruments with price series (the option overlay is tested on its own)."""
    return {r["instrument"]: r for r in _rows(DEMO / "instruments.csv") if r["asset_class"] != "option"}


@pytest.fixture(scope="module")
def prices() -> dict[str, tuple[np.ndarray, np.ndarray]]:
    """instrument -> (dates, closes) from every committed price file."""
    found = defaultdict(list)
    for path in sorted((DEMO / "prices").glob("*.csv")):
        with open(path, newline="", encoding="ascii") as fh:
            reader = csv.reader(fh)
            assert next(reader) == ["date", "instrument", "close"], path.name
            for date, name, close in reader:
                found[name].append((date, float(close)))
    out = {}
    for name, rows in found.items():
        rows.sort()
        out[name] = (np.array([d for d, _ in rows], dtype="datetime64[D]"), np.array([c for _, c in rows]))
    return out


@pytest.fixture(scope="module")
def calendar() -> np.ndarray:
    return gen.business_calendar(gen.DEMO_START, gen.DEMO_END)


@pytest.fixture(scope="module")
def aligned(prices, calendar) -> tuple[list[str], np.ndarray]:
    """Log returns on the full calendar; NaN where a close is missing."""
    names = sorted(prices)
    logp = np.full((calendar.size, len(names)), np.nan)
    for j, name in enumerate(names):
        dates, closes = prices[name]
        logp[np.searchsorted(calendar, dates), j] = np.log(closes)
    return names, np.diff(logp, axis=0)


def _own_returns(prices, name: str) -> tuple[np.ndarray, np.ndarray]:
    """Log returns between an instrument's consecutive closes, with end dates."""
    dates, closes = prices[name]
    return dates[1:], np.diff(np.log(closes))


def _window(dates: np.ndarray, bounds: tuple[str, str]) -> np.ndarray:
    return (dates >= np.datetime64(bounds[0])) & (dates <= np.datetime64(bounds[1]))


def _longest_repeat(closes: np.ndarray) -> int:
    """Most consecutive dates with one close."""
    change = np.flatnonzero(np.diff(closes) != 0)
    bounds = np.concatenate([[-1], change, [closes.size - 1]])
    return int(np.diff(bounds).max())


def _positions(path: Path) -> dict[tuple[str, str], int]:
    return {(r["portfolio"], r["instrument"]): int(r["quantity"]) for r in _rows(path)}


# --- determinism ------------------------------------------------------------


def test_regenerating_gives_the_committed_bytes(tmp_path):
    summary = gen.write_demo(tmp_path, seed=gen.DEFAULT_SEED)
    written = {p.relative_to(tmp_path).as_posix() for p in summary.files}
    committed = {p.relative_to(DEMO).as_posix() for p in DEMO.rglob("*.csv")}
    assert written == committed
    for rel in sorted(written):
        assert (tmp_path / rel).read_bytes() == (DEMO / rel).read_bytes(), rel


def test_simulation_is_seeded_and_accepts_a_generator():
    a = gen.simulate_market(30, 260, seed=11)
    b = gen.simulate_market(30, 260, seed=np.random.default_rng(11))
    c = gen.simulate_market(30, 260, seed=12)
    np.testing.assert_array_equal(a.prices, b.prices)
    assert a.instruments == b.instruments
    assert not np.array_equal(a.prices, c.prices)


# --- schema -----------------------------------------------------------------


def test_instruments_schema(instruments):
    with open(DEMO / "instruments.csv", encoding="ascii") as fh:
        header = fh.readline().strip()
    assert header == "instrument,asset_class,currency,underlying,option_type,strike,expiry,implied_vol,rate,dividend_yield,multiplier"
    assert len(instruments) == 12
    for name, row in instruments.items():
        assert row["asset_class"] in ASSET_CLASSES, name
        assert len(row["currency"]) == 3 and row["currency"].isupper(), name
    counts = defaultdict(int)
    for row in instruments.values():
        counts[(row["asset_class"], row["currency"])] += 1
    assert counts[("equity", "EUR")] == 4 and counts[("equity", "USD")] == 3
    assert counts[("equity_index_future", "EUR")] == 1 and counts[("commodity", "USD")] == 1
    assert counts[("bond", "EUR")] == 1 and counts[("bond", "USD")] == 1
    assert instruments["FX.USD"]["asset_class"] == "fx" and instruments["FX.USD"]["currency"] == "EUR"


def test_price_files_are_clean(prices, instruments):
    files = sorted(p.name for p in (DEMO / "prices").glob("*.csv"))
    assert 4 <= len(files) <= 5
    assert set(prices) == set(instruments)
    for name, (dates, closes) in prices.items():
        assert np.all(closes > 0), name
        assert np.all(np.diff(dates) > np.timedelta64(0, "D")), f"{name}: duplicate or unsorted dates"
    line = re.compile(r"^\d{4}-\d{2}-\d{2},[A-Z0-9._]+,\d+(\.\d{1,6})?$")
    for path in (DEMO / "prices").glob("*.csv"):
        body = path.read_text(encoding="ascii").splitlines()[1:]
        bad = [i + 2 for i, text in enumerate(body) if not line.match(text)]
        assert not bad, f"{path.name}: rows {bad[:5]} are not plain date,instrument,decimal"


# --- calendar, FX and positions consistency ---------------------------------


def test_no_holiday_and_no_weekend_dates(prices, calendar):
    all_dates = np.unique(np.concatenate([d for d, _ in prices.values()]))
    mmdd = {str(d)[5:] for d in all_dates}
    assert not mmdd & set(gen.HOLIDAYS_MMDD)
    assert np.all(np.is_busday(all_dates))
    np.testing.assert_array_equal(all_dates, calendar)
    assert str(calendar[0]) == "2018-01-02" and str(calendar[-1]) == "2024-12-31"


def test_every_foreign_currency_has_a_complete_fx_series(instruments, prices, calendar):
    foreign = {r["currency"] for r in instruments.values()} - {gen.BASE_CURRENCY}
    assert foreign == {"USD"}
    for ccy in foreign:
        fx = f"FX.{ccy}"
        assert instruments[fx]["asset_class"] == "fx"
        assert instruments[fx]["currency"] == gen.BASE_CURRENCY
        np.testing.assert_array_equal(prices[fx][0], calendar)


def test_positions_refer_to_known_instruments():
    instruments = {r["instrument"] for r in _rows(DEMO / "instruments.csv")}
    for path in [DEMO / "positions.csv", *sorted((DEMO / "positions").glob("*.csv"))]:
        with open(path, encoding="ascii") as fh:
            assert fh.readline().strip() == "portfolio,instrument,quantity", path.name
        held = _positions(path)
        assert {p for p, _ in held} == {"alder_long_only", "birch_long_short", "cedar_hedged"}
        unknown = {i for _, i in held} - set(instruments)
        assert not unknown, f"{path.name}: {unknown}"
        assert all(q != 0 for q in held.values())


def test_dated_positions_differ_by_one_quantity():
    today = _positions(DEMO / "positions" / "2024-12-31.csv")
    before = _positions(DEMO / "positions" / "2024-12-30.csv")
    assert (DEMO / "positions.csv").read_bytes() == (DEMO / "positions" / "2024-12-31.csv").read_bytes()
    assert today.keys() == before.keys()
    changed = [k for k in today if today[k] != before[k]]
    assert changed == [("birch_long_short", "EQ.KARVENHOLT")]


def test_books_are_sized_and_hedged(prices, instruments):
    held = {k: q for k, q in _positions(DEMO / "positions.csv").items() if k[1] in instruments}
    last = {name: closes[-1] for name, (_, closes) in prices.items()}
    fx = {"EUR": 1.0, "USD": last["FX.USD"]}
    gross = defaultdict(float)
    for (book, name), q in held.items():
        gross[book] += abs(q) * last[name] * fx[instruments[name]["currency"]]
    for book, value in gross.items():
        assert 1e6 < value < 1e7, (book, value)
    hedged = {n: q for (b, n), q in held.items() if b == "cedar_hedged"}
    usd_eq = sum(q * last[n] for n, q in hedged.items() if instruments[n]["currency"] == "USD")
    eur_eq = sum(
        q * last[n] for n, q in hedged.items() if instruments[n]["asset_class"] == "equity" and instruments[n]["currency"] == "EUR"
    )
    assert abs(usd_eq + hedged["FX.USD"]) < 0.01 * usd_eq  # dollar exposure hedged
    assert abs(eur_eq + hedged["FUT.VALDORIA20"] * last["FUT.VALDORIA20"]) < 0.01 * eur_eq
    assert any(q < 0 for (b, _), q in held.items() if b == "birch_long_short")
    assert all(q > 0 for (b, _), q in held.items() if b == "alder_long_only")


def test_hedged_book_is_less_volatile_than_its_long_legs(aligned, instruments, prices):
    names, r = aligned
    ok = ~np.isnan(r).any(axis=1)
    held = _positions(DEMO / "positions.csv")
    last = {n: prices[n][1][-1] for n in names}
    fx_last = last["FX.USD"]
    # Base-currency value per instrument; USD holdings also carry the FX return.
    fx_col = names.index("FX.USD")
    base_r = r[ok] + np.array([instruments[n]["currency"] == "USD" for n in names]) * r[ok][:, [fx_col]]
    hedged = np.array([held.get(("cedar_hedged", n), 0) * last[n] * (fx_last if instruments[n]["currency"] == "USD" else 1.0) for n in names])
    long_legs = np.where(np.array([instruments[n]["asset_class"] == "equity" for n in names]), hedged, 0.0)
    # The future and FX legs take out the EUR equity and dollar risk; the USD
    # equity risk stays, so expect a clear cut, not near zero.
    assert (base_r @ hedged).std() < 0.75 * (base_r @ long_legs).std()


# --- statistical properties -------------------------------------------------


def test_returns_are_fat_tailed(prices):
    for name in prices:
        _, r = _own_returns(prices, name)
        # Fisher (excess) kurtosis, 0 for a normal law (scipy.stats.kurtosis
        # default); the brief asks for clearly fat tails, > 1.
        assert stats.kurtosis(r) > 1.0, name


def test_squared_returns_cluster(prices):
    from statsmodels.stats.diagnostic import acorr_ljungbox

    for name in prices:
        dates, r = _own_returns(prices, name)
        calm = ~((dates >= np.datetime64("2022-01-01")) & (dates <= np.datetime64("2022-12-31")))
        for sample in (r, r[calm]):
            sq = sample**2 - (sample**2).mean()
            assert (sq[1:] * sq[:-1]).sum() / (sq**2).sum() > 0, name
            # McLeod & Li (1983), Journal of Time Series Analysis 4(4):
            # Ljung-Box on squared returns detects ARCH effects; statsmodels
            # is the reference implementation. Clustering must show outside
            # the crisis year too, not only from the episode.
            p = acorr_ljungbox(sq, lags=[10])["lb_pvalue"].iloc[0]
            assert p < 0.01, (name, p)


def test_realised_vols_are_in_the_stated_ranges(prices, instruments):
    ranges = {
        "equity": (0.18, 0.35),
        "equity_index_future": (0.15, 0.30),
        "commodity": (0.25, 0.36),
        "bond": (0.04, 0.08),
        "fx": (0.07, 0.10),
    }
    for name, row in instruments.items():
        if name == gen.QUIRK_INSTRUMENT:
            continue  # gap returns span several days
        _, r = _own_returns(prices, name)
        lo, hi = ranges[row["asset_class"]]
        assert lo <= r.std(ddof=1) * np.sqrt(252) <= hi, name


def test_crisis_has_higher_vol_higher_correlation_and_a_drawdown(aligned, instruments, calendar):
    names, r = aligned
    dates = calendar[1:]
    crisis = _window(dates, CRISIS)
    equities = [j for j, n in enumerate(names) if instruments[n]["asset_class"] in ("equity", "equity_index_future")]
    for j in equities:
        x = r[:, j]
        inside, outside = x[crisis & ~np.isnan(x)], x[~crisis & ~np.isnan(x)]
        assert inside.std() > 2.5 * outside.std(), names[j]  # spike of 3.5 at its peak

    eq = [j for j, n in enumerate(names) if instruments[n]["asset_class"] == "equity"]
    full = ~np.isnan(r[:, eq]).any(axis=1)
    iu = np.triu_indices(len(eq), 1)
    corr_in = np.corrcoef(r[crisis & full][:, eq].T)[iu].mean()
    corr_out = np.corrcoef(r[~crisis & full][:, eq].T)[iu].mean()
    assert corr_in > corr_out + 0.25

    def drawdown(cols, mask):
        level = np.concatenate([[0.0], np.cumsum(np.nan_to_num(r[mask][:, cols]).mean(axis=1))])
        return 1 - np.exp((level - np.maximum.accumulate(level)).min())

    eur = [j for j in eq if instruments[names[j]]["currency"] == "EUR"]
    usd = [j for j in eq if instruments[names[j]]["currency"] == "USD"]
    assert drawdown(eq, crisis) == pytest.approx(0.30, abs=0.005)  # the generator's target
    assert 0.25 <= drawdown(eur, crisis) <= 0.35
    assert 0.25 <= drawdown(usd, crisis) <= 0.35
    assert 0.03 <= drawdown(eur, _window(dates, SELL_OFF)) < drawdown(eur, crisis)
    basket = np.nan_to_num(r[:, eur]).mean(axis=1)
    # The index future tracks the EUR equities.
    fut = r[:, names.index("FUT.VALDORIA20")]
    assert np.corrcoef(basket[full], fut[full])[0, 1] > 0.8


# --- planted data-quality quirks ---------------------------------------------


def test_planted_gaps_and_stale_stretch(prices, calendar):
    dates, closes = prices[gen.QUIRK_INSTRUMENT]
    missing = np.setdiff1d(calendar, dates)
    expected = np.concatenate([gen.business_calendar(a, b) for a, b in gen.QUIRK_GAPS])
    np.testing.assert_array_equal(missing, expected)
    assert [len(gen.business_calendar(a, b)) for a, b in gen.QUIRK_GAPS] == [2, 3]
    stale = _window(dates, gen.QUIRK_STALE)
    assert stale.sum() == 6 and np.unique(closes[stale]).size == 1
    assert _longest_repeat(closes) == 6
    for name, (d, c) in prices.items():
        if name != gen.QUIRK_INSTRUMENT:
            np.testing.assert_array_equal(d, calendar)
            assert _longest_repeat(c) < 3, f"{name} has an unplanted stale run"


# --- building blocks the benchmark reuses ----------------------------------


def test_synthetic_universe_for_benchmarks():
    paths = gen.simulate_market(120, 400, seed=3)
    assert paths.prices.shape == (400, 120) and paths.log_returns.shape == (399, 120)
    assert paths.instruments[-1] == "FX.USD" and len(set(paths.instruments)) == 120
    assert set(paths.currencies) == {"EUR", "USD"} and np.all(paths.prices > 0)
    np.testing.assert_allclose(np.diff(np.log(paths.prices), axis=0), paths.log_returns, atol=1e-12)
    assert np.all(np.is_busday(paths.dates))
    assert str(paths.dates[0]) == gen.DEMO_START


def test_bad_specs_are_rejected():
    spec = gen.InstrumentSpec("X", "equity", "EUR", 0.2, {"equity_global": 0.9, "equity_eur": 0.5})
    with pytest.raises(ValueError, match="squared loadings sum to 1.060"):
        gen.simulate_market([spec], 10, seed=1)
    spec = gen.InstrumentSpec("X", "equity", "EUR", 0.2, {"equity_mars": 0.5})
    with pytest.raises(ValueError, match="unknown factor 'equity_mars'"):
        gen.simulate_market([spec], 10, seed=1)
    with pytest.raises(ValueError, match="at least 2"):
        gen.synthetic_universe(1, seed=1)
    with pytest.raises(ValueError, match="alpha \\+ beta < 1"):
        gen.garch_t_paths(5, [0.5], [0.5], [5.0], rng=np.random.default_rng(0))


def test_format_fixed_and_price_writer(tmp_path):
    text = gen.format_fixed(np.array([[1.5, 0.0001234], [123456.0, 2.0]]), np.array([2, 6]))
    assert text.tolist() == [["1.50", "0.000123"], ["123456.00", "2.000000"]]
    assert gen.format_fixed(np.array([[7.4]]), np.array([0])).tolist() == [["7"]]
    with pytest.raises(ValueError, match="positive"):
        gen.format_fixed(np.array([[0.0000001]]), np.array([3]))

    dates = gen.business_calendar("2024-01-01", n_days=4)
    closes = np.array([[1.0, 10.0], [1.1, 11.0], [1.2, 12.0], [1.3, 13.0]])
    present = np.array([[True, True], [False, True], [True, True], [True, False]])
    out = tmp_path / "p.csv"
    gen.write_price_csv(out, dates, ["A", "B"], closes, present, np.array([1, 0]), chunk_rows=3)
    assert out.read_text().splitlines() == [
        "date,instrument,close",
        "2024-01-02,A,1.0", "2024-01-02,B,10",
        "2024-01-03,B,11",
        "2024-01-04,A,1.2", "2024-01-04,B,12",
        "2024-01-05,A,1.3",
    ]


def test_write_market_gives_a_complete_data_folder(tmp_path):
    paths = gen.simulate_market(23, 40, seed=5)
    files = gen.write_market(tmp_path / "a", paths, n_price_files=4, n_portfolios=2, holdings=10, seed=9)
    again = gen.write_market(tmp_path / "b", paths, n_price_files=4, n_portfolios=2, holdings=10, seed=9)
    for x, y in zip(files, again):
        assert x.read_bytes() == y.read_bytes()
    listed = {r["instrument"] for r in _rows(tmp_path / "a" / "instruments.csv")}
    assert listed == set(paths.instruments)
    priced = defaultdict(int)
    for path in sorted((tmp_path / "a" / "prices").glob("part_*.csv")):
        for row in _rows(path):
            priced[row["instrument"]] += 1
    assert len(list((tmp_path / "a" / "prices").glob("*.csv"))) == 4
    assert dict(priced) == {name: 40 for name in paths.instruments}
    held = _positions(tmp_path / "a" / "positions.csv")
    assert {b for b, _ in held} == {"book_000", "book_001"}
    assert {i for _, i in held} <= listed and len(held) <= 20


def test_garch_settings_have_a_finite_fourth_moment():
    # GARCH(1,1) with innovation kurtosis k has a finite fourth moment iff
    # beta^2 + 2 alpha beta + k alpha^2 < 1 (Bollerslev 1986, Journal of
    # Econometrics 31(3), theorem 2, stated there for normal innovations,
    # k = 3; the same moment recursion holds for any k). Student-t with nu
    # dof standardised to unit variance has k = 3 + 6 / (nu - 4).
    for alpha, beta, nu in [*gen._FACTOR_GARCH.values(), gen._IDIO_GARCH]:
        k = stats.t(nu).stats(moments="k") + 3.0  # scipy gives excess kurtosis
        assert k == pytest.approx(3 + 6 / (nu - 4))
        assert beta**2 + 2 * alpha * beta + k * alpha**2 < 1, (alpha, beta, nu)


def test_option_overlay_is_a_protective_put_on_a_held_share():
    rows = [r for r in _rows(DEMO / "instruments.csv") if r["asset_class"] == "option"]
    assert len(rows) == 1
    put = rows[0]
    assert put["option_type"] == "put" and put["expiry"] == "2025-06-30"
    held = _positions(DEMO / "positions.csv")
    assert held[("alder_long_only", put["instrument"])] == held[("alder_long_only", put["underlying"])]
    closes = [float(r["close"]) for r in _rows(DEMO / "prices" / "equities_eur.csv") if r["instrument"] == put["underlying"]]
    assert float(put["strike"]) == pytest.approx(0.9 * closes[-1], abs=0.01)
