"""Glue for rule backtest."""
from tailtrace.provenance import setup_logging, step

setup_logging(snakemake)  # noqa: F821 (injected by Snakemake)

from tailtrace.pipeline import parse_json_param, run_backtest_step  # noqa: E402


def main(smk) -> None:
    with step(smk) as notes:
        notes["backtest"] = run_backtest_step(
            dict(smk.input.items()), smk.input.exposures, smk.input.positions, smk.input.instruments,
            dict(smk.output.items()), methods=list(smk.params.methods),
            confidences=[float(c) for c in smk.params.confidences], days=int(smk.params.days),
            window_days=int(smk.params.window_days), options=parse_json_param(smk.params.options),
            seed=int(smk.params.seed), plus_factor_rule=smk.params.plus_factor_rule,
            pnl_actual=smk.input.get("pnl_actual"), currency=smk.params.currency,
            positions_file=smk.params.positions_file, instruments_file=smk.params.instruments_file)


main(snakemake)  # noqa: F821
