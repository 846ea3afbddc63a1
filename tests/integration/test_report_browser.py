"""The report renders in a real browser: headless Chromium (Debian package).

Set-up installs ``chromium`` with apt-get when it is missing and we run as
root; the tests skip, saying why, only when it cannot be installed.
"""

from __future__ import annotations

import importlib.util
import os
import re
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

from tailtrace.report import ReportOptions, build_report

_HERE = Path(__file__).resolve().parent
_spec = importlib.util.spec_from_file_location(
    "report_dbfixture", _HERE.parent / "unit" / "report" / "report_dbfixture.py")
fx = importlib.util.module_from_spec(_spec)
sys.modules.setdefault("report_dbfixture", fx)
_spec.loader.exec_module(fx)

_FLAGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
          "--disable-background-networking", "--disable-component-update", "--disable-sync",
          "--disable-dev-shm-usage", "--hide-scrollbars"]
# Console messages Chromium logs to stderr with --enable-logging=stderr.
_CONSOLE = re.compile(r"CONSOLE|Uncaught|Refused to|Content Security Policy|ERR_", re.IGNORECASE)


def _find_chromium() -> str | None:
    for name in ("chromium", "chromium-browser", "google-chrome"):
        path = shutil.which(name)
        if path:
            return path
    return None


def _install_chromium() -> str:
    """Install the Debian package; return why it failed, or "" on success."""
    if not hasattr(os, "geteuid") or os.geteuid() != 0 or shutil.which("apt-get") is None:
        return "chromium is not installed and cannot be: not root or no apt-get"
    env = dict(os.environ, DEBIAN_FRONTEND="noninteractive")
    for cmd in (["apt-get", "update"], ["apt-get", "install", "-y", "chromium"]):
        done = subprocess.run(cmd, env=env, capture_output=True, text=True, timeout=900)
        if done.returncode != 0:
            return f"`{' '.join(cmd)}` failed: {done.stderr.strip()[-400:]}"
    return ""


@pytest.fixture(scope="module")
def chromium() -> str:
    path = _find_chromium()
    if path is None:
        reason = _install_chromium()
        path = _find_chromium()
        if path is None:
            pytest.skip(f"headless Chromium unavailable: {reason or 'installed but not on PATH'}")
    return path


def _run(chromium: str, profile: Path, *args: str, timeout: float = 120) -> subprocess.CompletedProcess[str]:
    cmd = [chromium, *_FLAGS, f"--user-data-dir={profile}", "--enable-logging=stderr", "--v=0", *args]
    return subprocess.run(cmd, capture_output=True, text=True, timeout=timeout,
                          env=dict(os.environ, HOME=str(profile)))


def _console_errors(stderr: str) -> list[str]:
    return [line for line in stderr.splitlines() if _CONSOLE.search(line)]


@pytest.fixture(scope="module")
def built(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Path]:
    root = tmp_path_factory.mktemp("browser")
    db = fx.write_fixture_db(root / "risk.duckdb")
    pnl = fx.write_scenario_pnl(root / "pnl.parquet")
    limits = fx.write_limits(root / "limits.csv", [("balanced_core", "var", 0.99, 1, 1_000_000),
                                                   (fx.EVIL, "es", 0.975, 10, 9_000_000)])
    out = root / "report" / f"{fx.AS_OF}.html"
    build_report(db, fx.AS_OF, out_html=out, out_csv=out.with_suffix(".csv"), limits_csv=limits, pnl_parquet=pnl,
                 options=ReportOptions(base_currency="EUR", headline_method="historical", code_version="test"))
    return {"db": db, "html": out, "root": root}


def test_console_capture_detects_a_script_error(chromium: str, tmp_path: Path) -> None:
    # Control: proves the stderr parsing below really sees page errors.
    page = tmp_path / "broken.html"
    page.write_text("<!DOCTYPE html><html><body><script>undefinedFunction();</script></body></html>")
    done = _run(chromium, tmp_path / "profile", "--dump-dom", page.as_uri())
    assert any("Uncaught" in line for line in _console_errors(done.stderr)), done.stderr[-2000:]


def test_report_renders_without_console_errors_and_screenshot(chromium: str, built: dict[str, Path],
                                                              tmp_path: Path) -> None:
    shot = tmp_path / "report.png"
    done = _run(chromium, tmp_path / "profile", f"--screenshot={shot}", "--window-size=1280,2400",
                built["html"].as_uri())
    assert done.returncode == 0, done.stderr[-2000:]
    assert _console_errors(done.stderr) == [], done.stderr[-2000:]
    data = shot.read_bytes()
    assert data[:8] == b"\x89PNG\r\n\x1a\n"
    assert len(data) > 50_000  # a blank 1280x2400 page compresses to a few kB
    keep = os.environ.get("TAILTRACE_KEEP_SCREENSHOT")
    if keep:
        shutil.copy(shot, keep)


def test_dom_headline_numbers_equal_database(chromium: str, built: dict[str, Path], tmp_path: Path) -> None:
    done = _run(chromium, tmp_path / "profile", "--dump-dom", built["html"].as_uri())
    assert done.returncode == 0, done.stderr[-2000:]
    assert _console_errors(done.stderr) == [], done.stderr[-2000:]
    dom = done.stdout
    parser = fx.HeadlineCells()
    parser.feed(dom)
    assert parser.scripts == 0
    assert fx.EVIL not in dom and "&lt;script&gt;alert(1)&lt;/script&gt;" in dom
    expected = fx.db_headline(built["db"])
    seen = parser.by_key()
    assert len(parser.cells) == len(expected) and set(seen) == set(expected)
    for key, value in expected.items():
        assert float(seen[key]["data-value"]) == value
        assert seen[key]["text"] == f"{value:,.0f}"
    # The breach banner comes before the headline tables in the rendered page too.
    assert 0 < dom.index('class="banner banner-breach"') < dom.index('id="headline"')


def test_prints_to_pdf(chromium: str, built: dict[str, Path], tmp_path: Path) -> None:
    pdf = tmp_path / "report.pdf"
    done = _run(chromium, tmp_path / "profile", f"--print-to-pdf={pdf}", "--no-pdf-header-footer",
                built["html"].as_uri())
    assert done.returncode == 0, done.stderr[-2000:]
    data = pdf.read_bytes()
    assert data[:5] == b"%PDF-" and data.count(b"/Type /Page") >= 3
