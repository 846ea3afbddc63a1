"""The glue script: in-process main(), and under Snakemake with the proposed rule and captions."""

from __future__ import annotations

import importlib.util
import os
import subprocess
import sys
from pathlib import Path

import pytest
import report_dbfixture as fx

ROOT = Path(__file__).resolve().parents[3]
SCRIPT = ROOT / "workflow" / "scripts" / "report.py"
CAPTIONS = ROOT / "workflow" / "report"

# The rule proposed to the lead, with paths made absolute for a temporary workdir.
SNAKEFILE = """
report: "{captions}/workflow.rst"

rule report:
    input:
        db="risk.duckdb",
        limits="limits.csv",
        pnl="pnl.parquet",
    output:
        html=report("results/report/{{as_of}}.html", caption="{captions}/report_page.rst",
                    category="End-of-day report"),
        csv=report("results/report/{{as_of}}.csv", caption="{captions}/report_headline.rst",
                   category="End-of-day report"),
    log:
        "logs/report/{{as_of}}.log",
    params:
        base_currency="EUR",
        headline_method="historical",
        disagreement_ratio=1.5,
        top_n=10,
        near_limit=0.9,
        code_version="0.1.0+test",
    script:
        "{script}"
"""


def _load_script():
    spec = importlib.util.spec_from_file_location("report_script", SCRIPT)
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def test_main_without_snakemake(tmp_path: Path, full_db: Path, pnl_file: Path,
                                capsys: pytest.CaptureFixture[str]) -> None:
    limits = fx.write_limits(tmp_path / "limits.csv", [("balanced_core", "var", 0.99, 1, 1_000_000)])
    code = _load_script().main([
        "--db", str(full_db), "--as-of", "2024-06-28", "--base-currency", "EUR", "--headline-method", "historical",
        "--limits", str(limits), "--pnl", str(pnl_file), "--out-dir", str(tmp_path / "out"), "--top-n", "5",
    ])
    assert code == 0
    html = (tmp_path / "out" / "2024-06-28.html").read_text(encoding="utf-8")
    assert "1 limit breach on 2024-06-28" in html and "top 5 of 15 positions" in html
    assert (tmp_path / "out" / "2024-06-28.csv").exists()
    assert capsys.readouterr().out.strip().endswith("2024-06-28.html")


@pytest.mark.slow  # three Snakemake runs, about 6 s
def test_under_snakemake_with_report_captions(tmp_path: Path, full_db: Path, pnl_file: Path) -> None:
    work = tmp_path / "wf"
    work.mkdir()
    (work / "risk.duckdb").write_bytes(full_db.read_bytes())
    (work / "pnl.parquet").write_bytes(pnl_file.read_bytes())
    fx.write_limits(work / "limits.csv", [("balanced_core", "var", 0.99, 1, 1_000_000)])
    (work / "Snakefile").write_text(SNAKEFILE.format(captions=CAPTIONS, script=SCRIPT))
    env = dict(os.environ, PYTHONPATH=os.pathsep.join([str(ROOT / "workflow" / "src"),
                                                       os.environ.get("PYTHONPATH", "")]))
    target = "results/report/2024-06-28.html"
    smk = [sys.executable, "-m", "snakemake", "--cores", "1"]

    first = subprocess.run([*smk, target], cwd=work, env=env, capture_output=True, text=True, timeout=300)
    assert first.returncode == 0, first.stderr[-3000:]
    log = (work / "logs" / "report" / "2024-06-28.log").read_text()
    assert "48 figures, 1 limit breaches" in log and "limit breach: portfolio 'balanced_core'" in log
    assert (work / "results" / "report" / "2024-06-28.csv").stat().st_mode & 0o044  # readable by others

    again = subprocess.run([*smk, "-n", target], cwd=work, env=env, capture_output=True, text=True, timeout=300)
    assert "Nothing to be done" in again.stdout + again.stderr

    made = subprocess.run([*smk, "--report", "snakemake_report.html", target], cwd=work, env=env,
                          capture_output=True, text=True, timeout=300)
    assert made.returncode == 0, made.stderr[-3000:]
    text = (work / "snakemake_report.html").read_text(encoding="utf-8")
    # Captions are rendered with their Jinja fields filled in.
    assert "End-of-day risk report for 2024-06-28" in text
    assert "headline method historical" in text
