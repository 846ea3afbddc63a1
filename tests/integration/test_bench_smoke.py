"""Smoke test of the benchmark script on the tiny universe (timings are printed, never asserted)."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[2]


@pytest.mark.slow  # five pipeline runs and two reference runs on 24 instruments, about 40 s
def test_bench_prints_every_section(tmp_path):
    proc = subprocess.run([sys.executable, str(REPO / "bench" / "run_bench.py"), "--universe", "tiny", "--sizes",
                           "--out", str(tmp_path)], capture_output=True, text=True, timeout=300)
    assert proc.returncode == 0, proc.stdout[-3000:] + proc.stderr[-3000:]
    out = proc.stdout
    for phase in ("cold", "noop", "next_day", "reference_cold", "reference_next_day"):
        assert f"\n  {phase} " in out
    assert "pipeline with every configured method" in out
    assert out.count("per-rule breakdown") == 3
    assert "ingest_prices" in out and "estimate_historical" in out
    assert "heavy modules loaded:" in out
    # the figures must agree with the straightforward reference
    assert "0 missing in the pipeline" in out
    assert "(agree at 1e-9)" in out
    targets = [line for line in out.splitlines() if line.strip().startswith("target:")]
    assert len(targets) == 6
    assert all(("met" in t) or ("MISSED" in t) or ("n/a" in t) for t in targets)
    assert (tmp_path / "results.json").is_file()
