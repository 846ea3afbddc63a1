"""Glue for rule contributions."""
from tailtrace.provenance import setup_logging, step

setup_logging(snakemake)  # noqa: F821 (injected by Snakemake)

from tailtrace.pipeline import parse_json_param, run_contributions_step  # noqa: E402


def main(smk) -> None:
    with step(smk) as notes:
        notes["contributions"] = run_contributions_step(
            dict(smk.input.items()), smk.input.exposures, smk.input.positions, smk.input.instruments,
            smk.output.contributions, methods=list(smk.params.methods),
            method_options=parse_json_param(smk.params.method_options),
            confidences=[float(c) for c in smk.params.confidences], horizons=[int(h) for h in smk.params.horizons],
            window_days=int(smk.params.window_days), currency=smk.params.currency,
            positions_file=smk.params.positions_file, instruments_file=smk.params.instruments_file)


main(snakemake)  # noqa: F821
