"""Glue of the ``report`` rule: the day's HTML report and headline CSV.

Under Snakemake (``script:``) it reads ``snakemake.input`` (``db``, optional
``limits`` and ``pnl``), ``snakemake.params`` and writes
``snakemake.output.html`` / ``.csv``, logging to ``snakemake.log[0]``.
Without Snakemake, ``main()`` takes the same settings as options::

    python workflow/scripts/report.py --db results/risk.duckdb --as-of 2024-06-28 \\
        --base-currency EUR --headline-method historical --limits config/limits.csv \\
        --pnl results/pnl/2024-06-28.parquet --out-dir results/report
"""

# No "from __future__" import: Snakemake puts its preamble above this file's code.
import argparse
import logging
import sys
from pathlib import Path
from typing import Any, Mapping, Sequence

from tailtrace.report import ReportOptions, ReportResult, build_report

__all__ = ["run", "main"]

log = logging.getLogger("tailtrace.report")
_OPTION_PARAMS = ("disagreement_ratio", "top_n", "near_limit", "max_chart_portfolios", "chart_confidence",
                  "code_version", "decimals")


def run(
    db: str, as_of: str, *, out_html: str, out_csv: str, base_currency: str, headline_method: str,
    limits: str | None = None, pnl: str | None = None, **settings: Any,
) -> ReportResult:
    """Build the report and log what it found.

    Parameters
    ----------
    db : str
        Results DuckDB file.
    as_of : str
        ISO date of the report.
    out_html, out_csv : str
    base_currency, headline_method : str
    limits, pnl : str or None
        Limits CSV and scenario P&L Parquet, when the run has them.
    **settings
        Further :class:`tailtrace.report.ReportOptions` fields; ``None``
        values keep the default.

    Returns
    -------
    tailtrace.report.ReportResult
    """
    extra = {k: v for k, v in settings.items() if v is not None}
    options = ReportOptions(base_currency=base_currency, headline_method=headline_method, **extra)
    result = build_report(db, as_of, out_html=out_html, out_csv=out_csv, options=options, limits_csv=limits or None,
                          pnl_parquet=pnl or None)
    log.info("report %s: %d figures, %d limit breaches, %d limits without a figure", as_of, result.n_figures,
             result.n_breaches, result.n_unchecked)
    util = result.content.utilisation
    if util is not None:
        for r in util[util["status"] == "breach"].itertuples(index=False):
            log.warning("limit breach: portfolio %r %s %.4g %dd (%s): %.2f > limit %.2f", r.portfolio, r.metric,
                        r.confidence, r.horizon_days, r.method, r.figure, r.limit)
    return result


def _snakemake_main(smk: Any) -> None:
    """One report per as_of of the run (``<as_of>.html/.csv``); the last one also as ``latest``.

    The dated files are kept from earlier runs (Snakemake would delete a
    declared output folder before rerunning), so the folder is the archive.
    """
    import json
    import shutil

    from tailtrace.provenance import step

    logging.basicConfig(filename=smk.log[0], level=logging.INFO, format="%(asctime)s %(levelname)s %(message)s",
                        force=True)
    logging.captureWarnings(True)
    inputs: Mapping[str, Any] = dict(smk.input.items())
    params: Mapping[str, Any] = dict(smk.params.items())
    receipt = json.loads(Path(inputs["receipt"]).read_text())
    out_dir = Path(smk.output.html).parent
    with step(smk) as notes:
        written = []
        for as_of in receipt["as_of"]:
            html, csv = out_dir / f"{as_of}.html", out_dir / f"{as_of}.csv"
            try:
                run(
                    str(params["database"]), str(as_of), out_html=str(html), out_csv=str(csv),
                    base_currency=params["base_currency"], headline_method=params["headline_method"],
                    limits=str(inputs["limits"]) if inputs.get("limits") else None,
                    pnl=str(inputs["pnl"]) if inputs.get("pnl") else None,
                    **{k: params.get(k) for k in _OPTION_PARAMS},
                )
            except Exception:
                log.exception("report failed")
                raise
            written += [str(html), str(csv)]
        shutil.copyfile(html, smk.output.html)
        shutil.copyfile(csv, smk.output.csv)
        notes["reports"] = written


def main(argv: Sequence[str] | None = None) -> int:
    """Command-line entry for debugging the report outside Snakemake."""
    parser = argparse.ArgumentParser(description="Build the end-of-day report of one as_of date.")
    parser.add_argument("--db", required=True, help="results DuckDB file")
    parser.add_argument("--as-of", required=True, help="ISO date, e.g. 2024-06-28")
    parser.add_argument("--base-currency", required=True)
    parser.add_argument("--headline-method", required=True)
    parser.add_argument("--limits", help="limits CSV (optional)")
    parser.add_argument("--pnl", help="scenario P&L Parquet (optional)")
    parser.add_argument("--out-dir", default="results/report", help="folder of <as_of>.html and <as_of>.csv")
    parser.add_argument("--disagreement-ratio", type=float)
    parser.add_argument("--top-n", type=int)
    parser.add_argument("--near-limit", type=float)
    parser.add_argument("--code-version")
    args = parser.parse_args(argv)
    logging.basicConfig(level=logging.INFO, format="%(levelname)s %(message)s")
    out = Path(args.out_dir)
    result = run(args.db, args.as_of, out_html=str(out / f"{args.as_of}.html"), out_csv=str(out / f"{args.as_of}.csv"),
                 base_currency=args.base_currency, headline_method=args.headline_method, limits=args.limits,
                 pnl=args.pnl, disagreement_ratio=args.disagreement_ratio, top_n=args.top_n,
                 near_limit=args.near_limit, code_version=args.code_version)
    print(result.html_path)
    return 0


if __name__ == "__main__":
    if "snakemake" in globals():
        _snakemake_main(globals()["snakemake"])
    else:
        sys.exit(main())
