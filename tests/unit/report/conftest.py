from __future__ import annotations

from pathlib import Path

import pytest
import report_dbfixture as fx

from tailtrace.report import ReportOptions


@pytest.fixture(scope="session")
def full_db(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """The fixture database with every table (read-only use only)."""
    return fx.write_fixture_db(tmp_path_factory.mktemp("db") / "risk.duckdb")


@pytest.fixture(scope="session")
def figures_db(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """Only risk_figures: enough for limit and headline tests, and quick to render (one chart)."""
    return fx.write_fixture_db(tmp_path_factory.mktemp("db") / "figures.duckdb", tables=["risk_figures"])


@pytest.fixture(scope="session")
def pnl_file(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return fx.write_scenario_pnl(tmp_path_factory.mktemp("pnl") / "pnl.parquet")


@pytest.fixture
def options() -> ReportOptions:
    return ReportOptions(base_currency="EUR", headline_method="historical", code_version="test-1")
