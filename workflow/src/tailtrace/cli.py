"""The ``tailtrace`` command line."""

from __future__ import annotations

import argparse
import sys
from typing import Sequence

from .errors import TailtraceError

__all__ = ["main", "build_parser"]

DEFAULT_DB = "results/risk.duckdb"


def _cmd_run(args: argparse.Namespace) -> int:
    from .runner import run_pipeline

    extra = [a for a in args.snakemake_args if a != "--"]
    return run_pipeline(results_dir=args.results_dir, data_dir=args.data_dir, cores=args.cores, extra=extra,
                        config=args.config or [])


def _key(args: argparse.Namespace, as_of: str):
    from .recorded import FigureKey

    return FigureKey(as_of=as_of, portfolio=args.portfolio, method=args.method, confidence=args.confidence,
                     horizon=args.horizon)


def _cmd_trace(args: argparse.Namespace) -> int:
    from .lineage import format_trace, to_json, trace_figure

    lineage = trace_figure(args.db, _key(args, args.as_of), run_id=args.run_id)
    print(to_json(lineage) if args.json else format_trace(lineage))
    return 0


def _cmd_verify(args: argparse.Namespace) -> int:
    from .lineage import to_json
    from .verify import format_verify, verify_run

    report = verify_run(args.db, args.run_id)
    print(to_json(report.as_dict()) if args.json else format_verify(report))
    return 1 if report.differs else 0


def _cmd_reproduce(args: argparse.Namespace) -> int:
    from .lineage import to_json
    from .reproduce import format_reproduce, reproduce_run

    report = reproduce_run(args.db, args.run_id, inputs=args.inputs, cores=args.cores, keep=args.keep,
                           workdir=args.workdir)
    print(to_json(report.as_dict()) if args.json else format_reproduce(report))
    return 0 if report.identical else 1


def _cmd_explain(args: argparse.Namespace) -> int:
    from .explain import explain_change, format_explain
    from .lineage import to_json

    result = explain_change(args.db, _key(args, args.as_of_from), _key(args, args.as_of_to), run_from=args.run_from,
                            run_to=args.run_to)
    print(to_json(result) if args.json else format_explain(result))
    return 0


def _cmd_runs(args: argparse.Namespace) -> int:
    from .database import open_read_only
    from .lineage import to_json
    from .recorded import list_runs

    with open_read_only(args.db) as con:
        runs = list_runs(con)
    if args.json:
        print(to_json(runs))
    else:
        for r in runs:
            dates = r["as_of_dates"]
            span = f"{dates[0]} .. {dates[-1]} ({len(dates)})" if len(dates) > 1 else (dates[0] if dates else "-")
            print(f"{r['run_id']}  {r['recorded_at']}  as_of {span}  git {r['git_commit'] or 'unknown'}"
                  f"{' (dirty)' if r['git_dirty'] else ''}")
    return 0


def _figure_options(p: argparse.ArgumentParser) -> None:
    p.add_argument("--portfolio", required=True)
    p.add_argument("--method", required=True, help="estimator name, e.g. historical")
    p.add_argument("--confidence", required=True, type=float, help="e.g. 0.99")
    p.add_argument("--horizon", required=True, type=int, help="horizon in days, e.g. 10")


def _reader(sub: argparse._SubParsersAction, name: str, func, help: str) -> argparse.ArgumentParser:
    """A subcommand reading the risk database: --db and --json."""
    p = sub.add_parser(name, help=help)
    p.add_argument("--db", default=DEFAULT_DB, help=f"risk database (default: {DEFAULT_DB})")
    p.add_argument("--json", action="store_true", help="machine-readable output")
    p.set_defaults(func=func)
    return p


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(prog="tailtrace", description="End-of-day VaR and ES with provenance.")
    sub = parser.add_subparsers(dest="command", required=True)
    run = sub.add_parser("run", help="run the pipeline (under a lock on the results folder)")
    run.add_argument("--results-dir", default="results", help="output folder (default: results)")
    run.add_argument("--data-dir", default=None, help="input folder (default: the config's data_dir)")
    run.add_argument("--cores", type=int, default=2, help="cores for Snakemake (default: 2)")
    run.add_argument("--config", nargs="*", metavar="KEY=VALUE", help="extra config overrides")
    run.add_argument("snakemake_args", nargs=argparse.REMAINDER, help="after --: passed to Snakemake unchanged")
    run.set_defaults(func=_cmd_run)

    trace = _reader(sub, "trace", _cmd_trace, "lineage of one figure: steps, input files and rows, parameters, code")
    trace.add_argument("--as-of", required=True, help="YYYY-MM-DD")
    _figure_options(trace)
    trace.add_argument("--run-id", default=None, help="trace the figure as this run made it (default: the stored one)")

    verify = _reader(sub, "verify", _cmd_verify, "re-hash a run's files: changed, missing, new (exit 1 if any)")
    verify.add_argument("--run-id", default=None, help="run to check (default: the latest)")

    repro = _reader(sub, "reproduce", _cmd_reproduce,
                    "rebuild a run in a temporary folder; compare figures bit for bit (exit 1 if any differs)")
    repro.add_argument("--run-id", default=None, help="run to rebuild (default: the latest)")
    repro.add_argument("--inputs", choices=("archive", "live"), default="archive",
                       help="archive: the recorded input bytes (default); live: the input files as they are now")
    repro.add_argument("--cores", type=int, default=2, help="cores for Snakemake (default: 2)")
    repro.add_argument("--keep", action="store_true", help="keep the rebuild folder")
    repro.add_argument("--workdir", default=None, help="rebuild in this folder (default: a new temporary one)")

    explain = _reader(sub, "explain", _cmd_explain, "attribute a figure's change between two as_of dates to "
                                                    "positions, market window, parameters and code")
    explain.add_argument("--as-of-from", required=True, help="earlier as_of, YYYY-MM-DD")
    explain.add_argument("--as-of-to", required=True, help="later as_of, YYYY-MM-DD")
    _figure_options(explain)
    explain.add_argument("--run-from", default=None, help="run of the earlier figure (default: the stored one)")
    explain.add_argument("--run-to", default=None, help="run of the later figure (default: the stored one)")

    _reader(sub, "runs", _cmd_runs, "list the recorded runs")
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    args = build_parser().parse_args(argv)
    try:
        return int(args.func(args) or 0)
    except TailtraceError as exc:
        print(f"tailtrace: error: {exc}", file=sys.stderr)
        return 2


if __name__ == "__main__":
    sys.exit(main())
