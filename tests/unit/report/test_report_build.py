from __future__ import annotations

import csv
import datetime as dt
import io
import re
import subprocess
import sys
import textwrap
import time
from html import unescape
from pathlib import Path

import duckdb
import pandas as pd
import pytest
import report_dbfixture as fx

from tailtrace.errors import ConfigError, InputError
from tailtrace.report import ReportOptions, build_report
from tailtrace.report.render import NOT_COMPUTED


def _build(tmp_path: Path, db: Path, options: ReportOptions, **kw: object) -> tuple[str, str]:
    out = tmp_path / "out"
    build_report(db, kw.pop("as_of", fx.AS_OF), out_html=out / "r.html", out_csv=out / "r.csv", options=options,
                 **kw)
    return (out / "r.html").read_text(encoding="utf-8"), (out / "r.csv").read_text(encoding="utf-8")


@pytest.fixture(scope="module")
def limits_with_breach(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return fx.write_limits(tmp_path_factory.mktemp("lim") / "limits.csv", [
        ("balanced_core", "var", 0.99, 1, 1_000_000),  # fixture VaR ~1.48m: breach
        (fx.EVIL, "es", 0.975, 10, 9_000_000),
        ("overlay_hedged", "var", 0.99, 10, 2_000_000),
    ])


@pytest.fixture(scope="module")
def page(tmp_path_factory: pytest.TempPathFactory, full_db: Path, pnl_file: Path,
         limits_with_breach: Path) -> tuple[str, str]:
    opts = ReportOptions(base_currency="EUR", headline_method="historical", code_version="test-1")
    return _build(tmp_path_factory.mktemp("page"), full_db, opts, limits_csv=limits_with_breach,
                  pnl_parquet=pnl_file)


def test_headline_numbers_equal_database_rows(page: tuple[str, str], full_db: Path) -> None:
    parser = fx.HeadlineCells()
    parser.feed(page[0])
    expected = fx.db_headline(full_db)
    seen = parser.by_key()
    assert len(parser.cells) == len(expected) == 3 * 4 * 2 * 2 * 2
    assert set(seen) == set(expected)
    for key, value in expected.items():
        assert float(seen[key]["data-value"]) == value  # exact: repr round-trips a double
        assert seen[key]["text"] == f"{value:,.0f}"


def test_other_days_never_leak_in(page: tuple[str, str]) -> None:
    # The fixture stores decoy figures of 9.99e9 for the day before.
    assert "9,990,000,000" not in page[0] and "9990000000" not in page[1]


def test_headline_csv_equals_database_rows(page: tuple[str, str], full_db: Path) -> None:
    # Parsed with the csv module and float(): checks the file holds round-trip text, whatever reads it.
    rows = list(csv.DictReader(io.StringIO(page[1])))
    assert list(rows[0])[:8] == ["as_of", "portfolio", "method", "headline_method", "confidence", "horizon_days",
                                 "var", "es"]
    got = {}
    for r in rows:
        key = (r["portfolio"], r["method"], repr(float(r["confidence"])), r["horizon_days"])
        got[(*key, "var")] = float(r["var"])
        got[(*key, "es")] = float(r["es"])
    assert got == fx.db_headline(full_db)
    assert {r["as_of"] for r in rows} == {fx.AS_OF.isoformat()}
    assert {r["method"] for r in rows if r["headline_method"] == "True"} == {"historical"}


def test_names_from_data_are_escaped(page: tuple[str, str]) -> None:
    html = page[0]
    assert fx.EVIL not in html
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in html
    assert "<script" not in html.lower()
    assert "<b>bold</b>" not in html and "&lt;b&gt;bold&lt;/b&gt; &amp; co" in html
    assert "<img src=x" not in html and "&lt;img src=x onerror=alert(2)&gt;" in html
    # Attribute values are escaped too (data-portfolio).
    assert 'data-portfolio="&lt;script&gt;alert(1)&lt;/script&gt;"' in html


def test_breach_banner_comes_before_headline(page: tuple[str, str]) -> None:
    html = page[0]
    banner = html.index('class="banner banner-breach"')
    assert banner < html.index('id="headline"') < html.index('id="backtest"')
    assert "1 limit breach on 2024-06-28" in html
    breaches = html[html.index('class="breaches"'):html.index('class="utilisation"')]
    assert "balanced_core" in breaches and "BREACH" in breaches
    assert "overlay_hedged" not in breaches


def test_sections_in_order_and_cautions_present(page: tuple[str, str]) -> None:
    html = page[0]
    ids = ["limits", "headline", "disagreement", "backtest", "contributors", "quality", "charts", "cautions"]
    positions = [html.index(f'<section id="{i}"') for i in ids]
    assert positions == sorted(positions)
    for phrase in ("Model risk.", "Fat tails.", "Square-root-of-time scaling.", "independent, identically "
                   "distributed", "understates", "Not investment advice.", "risk policy", "regulator"):
        assert phrase in html
    assert "run-20240628-a1" in html and "test-1" in html and "code_version=0.1.0+g1234abc" in html


def test_disagreement_flag_for_the_hedged_book(page: tuple[str, str]) -> None:
    section = page[0][page[0].index('id="disagreement"'):page[0].index('id="backtest"')]
    assert "8 of 24 figures" in section  # the fixture puts ewma_normal at 1.9x for overlay_hedged only
    assert "overlay_hedged" in section and "balanced_core" not in section


def test_page_is_self_contained(page: tuple[str, str]) -> None:
    html = page[0]
    assert 'http-equiv="Content-Security-Policy"' in html and "default-src 'none'" in unescape(html)
    refs = re.findall(r'(?:src|href)="([^"]*)"', html)
    assert refs and all(r.startswith(("data:image/svg+xml;base64,", "#")) for r in refs)
    assert html.count("data:image/svg+xml;base64,") == 4
    assert "@media print" in html
    assert '<th scope="col"' in html and '<th scope="row"' in html and "<caption>" in html


def test_same_database_gives_same_bytes(tmp_path: Path, full_db: Path, pnl_file: Path, options: ReportOptions,
                                        limits_with_breach: Path) -> None:
    first = _build(tmp_path / "a", full_db, options, limits_csv=limits_with_breach, pnl_parquet=pnl_file)
    second = _build(tmp_path / "b", full_db, options, limits_csv=limits_with_breach, pnl_parquet=pnl_file)
    assert first == second


def test_no_breach_says_so(tmp_path: Path, figures_db: Path, options: ReportOptions) -> None:
    limits = fx.write_limits(tmp_path / "l.csv", [("balanced_core", "var", 0.99, 1, 50_000_000)])
    html, _ = _build(tmp_path, figures_db, options, limits_csv=limits)
    assert "No limit breached" in html and "class=\"banner banner-breach\"" not in html


def test_without_limits_file(tmp_path: Path, figures_db: Path, options: ReportOptions) -> None:
    html, _ = _build(tmp_path, figures_db, options)
    assert "No limits file was given" in html


def test_missing_tables_say_not_computed(tmp_path: Path, options: ReportOptions) -> None:
    db = fx.write_fixture_db(tmp_path / "only_figures.duckdb", tables=["risk_figures"])
    html, csv_text = _build(tmp_path, db, options)
    for what in ("Backtest", "Risk decomposition", "Data-quality checks", "Scenario P&amp;L"):
        assert f"{what} {NOT_COMPUTED}." in html
    assert "historical" in html and len(csv_text.splitlines()) == 1 + 48


def test_no_tables_at_all(tmp_path: Path, options: ReportOptions) -> None:
    db = tmp_path / "empty.duckdb"
    duckdb.connect(str(db)).close()
    html, csv_text = _build(tmp_path, db, options)
    assert f"Risk figures {NOT_COMPUTED}." in html
    assert csv_text.startswith("as_of,portfolio,method,") and len(csv_text.splitlines()) == 1


def test_as_of_without_rows(tmp_path: Path, full_db: Path, options: ReportOptions) -> None:
    html, _ = _build(tmp_path, full_db, options, as_of="2020-01-02")
    assert "No risk figures for 2020-01-02" in html
    assert "No backtest results for 2020-01-02" in html


def test_missing_database(tmp_path: Path, options: ReportOptions) -> None:
    with pytest.raises(InputError, match=r"nope\.duckdb: results database not found"):
        _build(tmp_path, tmp_path / "nope.duckdb", options)


def test_table_lacking_a_column(tmp_path: Path, options: ReportOptions) -> None:
    db = tmp_path / "bad.duckdb"
    with duckdb.connect(str(db)) as con:
        con.execute("CREATE TABLE risk_figures (as_of DATE, portfolio VARCHAR, method VARCHAR, var DOUBLE)")
    with pytest.raises(InputError, match=r"column 'confidence': table risk_figures lacks a required column"):
        _build(tmp_path, db, options)


def test_pnl_file_lacking_a_column(tmp_path: Path, full_db: Path, options: ReportOptions) -> None:
    bad = tmp_path / "pnl.parquet"
    pd.DataFrame({"as_of": [fx.AS_OF], "portfolio": ["x"], "pnl": [1.0]}).to_parquet(bad)
    with pytest.raises(InputError, match=r"column 'date': scenario P&L file lacks a required column"):
        _build(tmp_path, full_db, options, pnl_parquet=bad)


def test_locked_database_gives_a_clear_error(tmp_path: Path) -> None:
    db = fx.write_fixture_db(tmp_path / "locked.duckdb", tables=["risk_figures"])
    holder = subprocess.Popen(
        [sys.executable, "-c", textwrap.dedent(f"""
            import duckdb, sys, time
            con = duckdb.connect({str(db)!r})
            print("held", flush=True)
            sys.stdin.read()
        """)],
        stdin=subprocess.PIPE, stdout=subprocess.PIPE, text=True,
    )
    try:
        assert holder.stdout is not None and holder.stdout.readline().strip() == "held"
        opts = ReportOptions(base_currency="EUR", headline_method="historical", db_attempts=3, db_retry_seconds=0.05)
        start = time.monotonic()
        with pytest.raises(InputError, match=r"locked\.duckdb: results database is locked by another process.*"
                                             r"gave up after 3 attempts"):
            _build(tmp_path, db, opts)
        assert time.monotonic() - start < 5
    finally:
        holder.communicate("", timeout=30)


def test_currency_mismatch_is_shown(tmp_path: Path) -> None:
    db = fx.write_fixture_db(tmp_path / "r.duckdb", tables=["risk_figures"])
    opts = ReportOptions(base_currency="CHF", headline_method="historical")
    html, _ = _build(tmp_path, db, opts)
    assert "Some figures are stated in EUR, not in the base currency CHF" in html


def test_formula_like_names_are_defused_in_csv(tmp_path: Path, options: ReportOptions) -> None:
    db = tmp_path / "f.duckdb"
    with duckdb.connect(str(db)) as con:
        con.execute("CREATE TABLE risk_figures (as_of DATE, portfolio VARCHAR, method VARCHAR, confidence DOUBLE, "
                    "horizon_days INTEGER, var DOUBLE, es DOUBLE)")
        con.execute("INSERT INTO risk_figures VALUES (?, ?, ?, ?, ?, ?, ?)",
                    [fx.AS_OF, "=HYPERLINK(1)", "historical", 0.99, 1, 10.0, 12.0])
    html, csv_text = _build(tmp_path, db, options)
    assert "'=HYPERLINK(1)" in csv_text and "=HYPERLINK(1)" in html


def test_headline_method_without_figures_still_renders(tmp_path: Path, full_db: Path) -> None:
    opts = ReportOptions(base_currency="EUR", headline_method="filtered_historical")
    html, _ = _build(tmp_path, full_db, opts)
    assert "The headline method filtered_historical has no decomposition; showing ewma_normal." in html
    assert "no 1-day figure to mark" not in html  # chart labels live inside the SVG, not the page text


@pytest.mark.parametrize(
    ("kwargs", "message"),
    [
        (dict(disagreement_ratio=1.0), "disagreement_ratio"),
        (dict(top_n=0), "top_n"),
        (dict(near_limit=1.5), "near_limit"),
        (dict(headline_method=" "), "headline_method"),
        (dict(chart_confidence=99.0), "chart_confidence"),
        (dict(decimals=9), "decimals"),
    ],
)
def test_bad_options(kwargs: dict[str, object], message: str) -> None:
    base: dict[str, object] = dict(base_currency="EUR", headline_method="historical")
    base.update(kwargs)
    with pytest.raises(ConfigError, match=message):
        ReportOptions(**base)  # type: ignore[arg-type]


def test_as_of_accepts_date_objects(tmp_path: Path, figures_db: Path, options: ReportOptions) -> None:
    by_text = _build(tmp_path / "a", figures_db, options, as_of="2024-06-28")
    by_date = _build(tmp_path / "b", figures_db, options, as_of=dt.datetime(2024, 6, 28, 17, 0))
    assert by_text == by_date


def test_near_limit_and_unchecked_limits_are_called_out(tmp_path: Path, figures_db: Path,
                                                        options: ReportOptions) -> None:
    limits = fx.write_limits(tmp_path / "l.csv", [
        ("balanced_core", "var", 0.99, 1, 1_600_000),  # VaR ~1.48m: about 92%, near
        ("no_such_book", "var", 0.99, 1, 1_000),
    ])
    html, _ = _build(tmp_path, figures_db, options, limits_csv=limits)
    assert 'class="banner banner-near"' in html and "No limit breached" in html
    assert "1 limit at or above 90% utilisation" in html
    assert "1 limit could not be checked: no matching figure" in html


def test_charts_capped_and_pnl_from_several_files(tmp_path: Path, full_db: Path, pnl_file: Path) -> None:
    opts = ReportOptions(base_currency="EUR", headline_method="historical", max_chart_portfolios=1)
    html, _ = _build(tmp_path, full_db, opts, pnl_parquet=[pnl_file, pnl_file])
    assert "Charts show the first 1 of 3 portfolios in name order" in html
    assert html.count("data:image/svg+xml;base64,") == 4


def test_headline_method_without_figures_is_noted(tmp_path: Path, full_db: Path) -> None:
    opts = ReportOptions(base_currency="EUR", headline_method="cornish_fisher")
    html, _ = _build(tmp_path, full_db, opts)
    assert "The headline method cornish_fisher has no figures for 2024-06-28" in html


def test_nulls_everywhere_render_as_not_available(tmp_path: Path, pnl_file: Path, options: ReportOptions) -> None:
    db = fx.write_fixture_db(tmp_path / "nulls.duckdb")
    with duckdb.connect(str(db)) as con:
        con.execute("UPDATE risk_figures SET var = NULL, scaling = NULL, n_obs = NULL "
                    "WHERE method = ? AND horizon_days = ?", ["monte_carlo", 10])
        con.execute("UPDATE backtest_forecasts SET exception = NULL, es = NULL WHERE method = ?", ["historical"])
        con.execute("UPDATE backtest_summary SET zone = NULL, kupiec_p = NULL, n = NULL, es_zone = NULL")
        con.execute("UPDATE data_quality SET severity = NULL, detail = NULL, n = NULL")
        con.execute("UPDATE risk_contributions SET position_value = NULL, diversification_benefit = NULL")
    limits = fx.write_limits(tmp_path / "l.csv", [("balanced_core", "var", 0.99, 10, 1.0, "monte_carlo")],
                             method_column=True)
    html, csv_text = _build(tmp_path, db, options, limits_csv=limits, pnl_parquet=pnl_file)
    parser = fx.HeadlineCells()
    parser.feed(html)
    assert len(parser.cells) == 96 - 6  # the six nulled VaR figures show n/a, not a number
    assert 'data-method="monte_carlo" data-metric="var" data-confidence="0.99" data-horizon="10">n/a</td>' in html
    assert "1 limit could not be checked" in html
    assert html.count("data:image/svg+xml;base64,") == 4
