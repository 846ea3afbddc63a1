"""The ``tailtrace`` command line."""

from __future__ import annotations

import argparse
import sys
from typing import Sequence

from .errors import TailtraceError

__all__ = ["main", "build_parser"]


def _cmd_run(args: argparse.Namespace) -> int:
    from .runner import run_pipeline

    extra = [a for a in args.snakemake_args if a != "--"]
    return run_pipeline(results_dir=args.results_dir, data_dir=args.data_dir, cores=args.cores, extra=extra,
                        config=args.config or [])


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
