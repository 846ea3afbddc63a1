"""Step records read back: labels, outputs, raw inputs."""

from __future__ import annotations

import pytest

from tailtrace.errors import TailtraceError
from tailtrace.recorded import FigureKey, StepRecord, raw_inputs


def _record(rule, inputs, outputs, wildcards=None):
    files = lambda role, items: [{"role": role, "name": n, "path": p, "sha256": f"h-{p}"} for n, p in items]  # noqa: E731
    return StepRecord.from_dict({"rule": rule, "wildcards": wildcards or {}, "params": {"code": "c"}, "notes": {},
                                 "started_at": "t0", "finished_at": "t1", "packages": {},
                                 "inputs": files("input", inputs), "outputs": files("output", outputs)})


def test_raw_inputs_are_the_inputs_no_step_produced():
    steps = [
        _record("ingest_instruments", [("instruments", "d/instruments.csv")], [("instruments", "r/i.parquet")]),
        _record("ingest_prices", [("prices", "d/prices/a.csv"), ("instruments", "r/i.parquet")],
                [("prices", "r/a.parquet")], {"name": "a"}),
        _record("build_returns", [("prices", "r/a.parquet")], [("returns", "r/returns.parquet")]),
    ]
    assert [(s.rule, e.path) for s, e in raw_inputs(steps)] == [("ingest_instruments", "d/instruments.csv"),
                                                                 ("ingest_prices", "d/prices/a.csv")]
    assert steps[1].label == "ingest_prices[name=a]" and steps[0].label == "ingest_instruments"
    assert steps[2].output("returns").sha256 == "h-r/returns.parquet"
    with pytest.raises(TailtraceError, match="recorded no output 'base'"):
        steps[2].output("base")


def test_figure_key_describes_itself():
    key = FigureKey("2024-08-09", "LONG", "historical", 0.99, 10)
    assert key.describe() == "as_of 2024-08-09, portfolio LONG, method historical, confidence 0.99, horizon 10 day(s)"
