"""The fast paths give what the straightforward computations they replaced give.

Each test recomputes a result the plain way (Python objects per row, a
day-by-day sum, a dense eigen-decomposition) and compares. These are checks
of our own rewrites, not external references; the external checks of the
same quantities live beside each module's own tests.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pyarrow as pa
import pytest

from tailtrace.errors import InputError
from tailtrace.estimators import delta_gamma
from tailtrace.estimators.base import RiskSample, linear_revalue
from tailtrace.estimators.delta_gamma import _support_cumulants, delta_gamma_cumulants
from tailtrace.estimators.delta_normal import gamma_blocks, parametric_inputs
from tailtrace.estimators.monte_carlo import simulate_log_paths
from tailtrace.ingest import quality_checks, read_price_file, runs_of_true
from tailtrace.market import forward_fill_limited, wide_matrix

TODAY = np.datetime64("2025-01-01")


def _write(path: Path, rows: list[str], header: str = "date,instrument,close") -> Path:
    path.write_text("\n".join([header, *rows]) + "\n")
    return path


def _messy_file(tmp_path: Path) -> tuple[Path, list[tuple[str, str, float]]]:
    """Unsorted rows, padded values, gaps and a stale stretch."""
    rng = np.random.default_rng(3)
    days = np.arange(np.datetime64("2024-01-01"), np.datetime64("2024-03-01"))
    rows = []
    for k, name in enumerate(["EQ.B", "EQ.A", "FX.USD", "EQ.C"]):
        close = np.round(50 * np.exp(np.cumsum(rng.normal(0, 0.01, days.size))), 4)
        if name == "EQ.C":
            close[10:17] = close[10]  # stale: 7 rows
        for i, d in enumerate(days):
            if name == "EQ.A" and i in (5, 6, 30):
                continue  # gaps
            rows.append((str(d), name, float(close[i])))
    order = rng.permutation(len(rows))
    shuffled = [rows[i] for i in order]
    text = [f" {d} ,{n}  ,{c}" if j % 7 == 0 else f"{d},{n},{c}" for j, (d, n, c) in enumerate(shuffled)]
    return _write(tmp_path / "prices.csv", text), rows


def test_price_file_sorted_and_parsed_like_row_by_row(tmp_path):
    path, rows = _messy_file(tmp_path)
    table, extra = read_price_file(path, ["EQ.A", "EQ.B", "EQ.C", "FX.USD"], today=TODAY)
    expected = sorted(rows, key=lambda r: (r[1], r[0]))
    assert extra == []
    assert table.column("instrument").to_pylist() == [r[1] for r in expected]
    assert [str(d) for d in table.column("date").to_pylist()] == [r[0] for r in expected]
    assert table.column("close").to_pylist() == [r[2] for r in expected]
    assert table.schema.field("instrument").type == pa.string()


def _quality_plain(table: pa.Table, stale_days: int) -> set[tuple]:
    inst = table.column("instrument").to_pylist()
    date = [str(d) for d in table.column("date").to_pylist()]
    close = table.column("close").to_pylist()
    calendar = sorted(set(date))
    out = set()
    for name in sorted(set(inst)):
        have = {d for i, d in zip(inst, date) if i == name}
        first, last = calendar.index(min(have)), calendar.index(max(have))
        missing = np.array([calendar[t] not in have for t in range(first, last + 1)])
        for s, e in zip(*runs_of_true(missing)):
            out.add(("gap", name, calendar[first + s], calendar[first + e], int(e - s + 1)))
    run = 1
    for j in range(1, len(close) + 1):
        if j < len(close) and inst[j] == inst[j - 1] and close[j] == close[j - 1]:
            run += 1
            continue
        if run >= stale_days:
            out.add(("stale", inst[j - 1], date[j - run], date[j - 1], run))
        run = 1
    return out


def test_quality_checks_match_a_row_by_row_scan(tmp_path):
    path, _ = _messy_file(tmp_path)
    table, _ = read_price_file(path, ["EQ.A", "EQ.B", "EQ.C", "FX.USD"], today=TODAY)
    q = quality_checks(table, str(path), stale_days=5)
    got = {(c, i, str(a), str(b), n) for c, i, a, b, n in zip(
        q.column("check").to_pylist(), q.column("instrument").to_pylist(), q.column("first_date").to_pylist(),
        q.column("last_date").to_pylist(), q.column("n").to_pylist())}
    assert got == _quality_plain(table, 5)
    assert ("gap", "EQ.A", "2024-01-06", "2024-01-07", 2) in got and ("stale", "EQ.C", "2024-01-11", "2024-01-17", 7) in got


@pytest.mark.parametrize(
    ("rows", "row", "column", "message"),
    [
        (["2024-01-02,EQ.A,10", "2024-01-03, ,11", "2024-01-04,EQ.A,12"], 3, "instrument", "empty value"),
        (["2024-01-02,EQ.A,10", "2024-01-02,EQ.Z,11", "2024-01-03,EQ.Z,12"], 3, "instrument", "unknown instrument"),
        (["2024-01-02,EQ.A,10", "2024-01-03,EQ.A,11", "2024-13-03,EQ.A,12", "2024-01-03,EQ.A,13"], 4, "date",
         "not a valid ISO"),
        (["2024-01-03,EQ.A,10", "2024-01-02,EQ.A,11", "2024-01-03,EQ.A,10"], 4, "date", "duplicate row"),
        (["2024-01-03,EQ.A,10", "2024-01-02,EQ.A,11", "2024-01-03,EQ.A,12"], 4, "date", "conflicting prices"),
    ],
)
def test_errors_still_name_the_first_bad_row(tmp_path, rows, row, column, message):
    path = _write(tmp_path / "p.csv", rows)
    with pytest.raises(InputError, match=message) as info:
        read_price_file(path, ["EQ.A"], today=TODAY)
    assert (info.value.row, info.value.column) == (row, column)


def test_forward_fill_of_gappy_columns_only_matches_the_full_fill():
    rng = np.random.default_rng(1)
    x = rng.normal(size=(40, 12))
    x[rng.uniform(size=x.shape) < 0.15] = np.nan
    x[:, [0, 4, 7]] = rng.normal(size=(40, 3))  # columns without gaps
    x[:3, 5] = np.nan  # leading gap
    valid = ~np.isnan(x)
    rows = np.arange(x.shape[0])[:, None]
    last = np.maximum.accumulate(np.where(valid, rows, -1), axis=0)
    full = np.where((last >= 0) & (rows - last <= 2), np.take_along_axis(x, np.clip(last, 0, None), axis=0), np.nan)
    np.testing.assert_array_equal(forward_fill_limited(x, 2), full)


def test_wide_matrix_equals_column_stack():
    m = np.random.default_rng(2).normal(size=(7, 5))
    table = pa.table({"date": pa.array(np.arange(7).astype("datetime64[D]"), pa.date32()),
                      **{f"I{j}": pa.array(m[:, j]) for j in range(5)}})
    np.testing.assert_array_equal(wide_matrix(table), m)


@pytest.mark.parametrize("dof", [None, 5.0])
def test_monte_carlo_paths_equal_the_day_by_day_sum(dof):
    rng_f = np.random.default_rng(4)
    factor, drift = rng_f.normal(size=(6, 9)) * 0.01, rng_f.normal(size=9) * 1e-4
    got = simulate_log_paths(drift, factor, [1, 3, 10], 500, np.random.default_rng(9), dof=dof)
    rng = np.random.default_rng(9)
    cumulative, want = np.zeros((500, 9)), {}
    for day in range(1, 11):
        step = rng.standard_normal((500, 6)) @ factor
        if dof is not None:
            step *= np.sqrt((dof - 2.0) / rng.chisquare(dof, size=500))[:, None]
        cumulative += drift + step
        if day in (1, 3, 10):
            want[day] = cumulative.copy()
    for h in want:
        np.testing.assert_allclose(got[h], want[h], rtol=1e-12, atol=1e-15)


def _sample(values: np.ndarray, returns: np.ndarray, **extra) -> RiskSample:
    n = returns.shape[1]
    return RiskSample(as_of=np.datetime64("2024-06-28"), portfolios=tuple(f"P{i}" for i in range(len(values))),
                      instruments=tuple(f"I{j}" for j in range(n)), dates=np.arange(returns.shape[0]).astype("datetime64[D]"),
                      returns=returns, history=returns, values=values, pnl=values @ np.expm1(returns).T,
                      revalue=linear_revalue(values), **extra)


def test_support_cumulants_equal_the_dense_eigen_route():
    rng = np.random.default_rng(5)
    n, p = 8, 4
    a = rng.normal(size=(60, n)) * 0.01
    e = rng.normal(size=(p, n)) * 1e4
    g = rng.normal(size=(p, n, n)) * 1e5
    g = g + np.swapaxes(g, 1, 2)
    for k, zero in enumerate([[0, 3], [], [1, 2, 5, 6, 7], [4]]):  # supports of different sizes
        g[k][zero, :] = 0.0
        g[k][:, zero] = 0.0
    x = parametric_inputs(_sample(e, a, exposures=e, gammas=g), [0.99], [1])
    constant = np.arange(p, dtype=float)
    for h in (1.0, 10.0):
        np.testing.assert_allclose(_support_cumulants(gamma_blocks(x), e, h * x.cov, constant),
                                   delta_gamma_cumulants(e, g, h * x.cov, constant=constant), rtol=1e-9)


@pytest.mark.parametrize("include_mean", [False, True])
def test_linear_book_delta_gamma_equals_explicit_diagonal_gammas(include_mean):
    rng = np.random.default_rng(6)
    values = rng.normal(size=(3, 7)) * 1e5
    values[0, [1, 4]] = 0.0  # a book that does not hold every instrument
    returns = rng.normal(size=(120, 7)) * 0.012 + 0.0004
    dense = np.zeros((3, 7, 7))
    dense[:, np.arange(7), np.arange(7)] = values
    opts = {"include_mean": include_mean, "include_theta": False}
    linear = delta_gamma.estimate(_sample(values, returns), [0.95, 0.99], [1, 10], options=opts)
    explicit = delta_gamma.estimate(_sample(values, returns, exposures=values, gammas=dense), [0.95, 0.99], [1, 10],
                                    options=opts)
    np.testing.assert_allclose(linear.var, explicit.var, rtol=1e-12)
    np.testing.assert_allclose(linear.es, explicit.es, rtol=1e-12)
    # and the moments agree with the dense eigen route of delta_gamma_cumulants
    cov = np.cov(returns, rowvar=False, ddof=1)
    for i, h in enumerate((1, 10)):
        mu = h * returns.mean(axis=0) if include_mean else np.zeros(7)
        slopes = values + values * mu
        constant = values @ mu + 0.5 * (values * mu) @ mu
        kappa = delta_gamma_cumulants(slopes, dense, h * cov, constant=constant)
        np.testing.assert_allclose(np.asarray(linear.diagnostics["mean"])[:, i], kappa[:, 0], rtol=1e-9)
        np.testing.assert_allclose(np.asarray(linear.diagnostics["sd"])[:, i], np.sqrt(kappa[:, 1]), rtol=1e-9)


def test_plain_price_file_takes_the_typed_path_and_reads_like_the_strict_reader(tmp_path, monkeypatch):
    from tailtrace import ingest

    rng = np.random.default_rng(5)
    days = np.arange(np.datetime64("2024-01-01"), np.datetime64("2024-04-01"))
    rows = [f"{d},{n},{float(c)!r}" for n in ("EQ.B", "EQ.A") for d, c in zip(days, rng.uniform(1, 200, days.size))]
    path = _write(tmp_path / "plain.csv", list(rng.permutation(rows)))
    assert ingest._read_plain_prices(path) is not None
    fast, _ = read_price_file(path, ["EQ.A", "EQ.B"], today=TODAY)
    monkeypatch.setattr(ingest, "_read_plain_prices", lambda p: None)
    strict, _ = read_price_file(path, ["EQ.A", "EQ.B"], today=TODAY)
    assert fast.equals(strict)


def test_derived_books_of_the_decomposition_equal_their_dense_construction():
    from tailtrace.decomposition import _derived_losses, _derived_values

    rng = np.random.default_rng(11)
    values = rng.normal(0, 1e5, (3, 6)) * (rng.random((3, 6)) < 0.6)
    simple = rng.normal(0, 0.01, (40, 6))
    pp, nn = np.nonzero(values)
    K = len(pp)
    alone = np.zeros((K, 6))
    alone[np.arange(K), nn] = values[pp, nn]
    without = values[pp].copy()
    without[np.arange(K), nn] = 0.0
    dense = np.vstack([values, alone, without])  # the plain way: every derived book in full
    for rows in (slice(0, 3 + 2 * K), slice(2, 5), slice(3 + K - 1, 3 + 2 * K + 7)):
        np.testing.assert_array_equal(_derived_values(values, pp, nn, rows), dense[rows])
        losses = _derived_losses(-(values @ simple.T), np.ascontiguousarray(simple.T), pp, nn, values[pp, nn], rows)
        np.testing.assert_allclose(losses, -(dense[rows] @ simple.T), rtol=1e-12, atol=1e-9)
