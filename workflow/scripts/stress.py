"""Glue for rule stress."""
from tailtrace.provenance import setup_logging, step

setup_logging(snakemake)  # noqa: F821 (injected by Snakemake)

from tailtrace.pipeline import parse_json_param, run_stress_step  # noqa: E402


def main(smk) -> None:
    with step(smk) as notes:
        notes["stressed_windows"] = run_stress_step(
            dict(smk.input.items()), smk.input.exposures, smk.input.positions, smk.input.instruments,
            smk.input.windows, smk.input.shocks, dict(smk.output.items()),
            settings=parse_json_param(smk.params.settings), stressed_methods=list(smk.params.stressed_methods),
            method_options=parse_json_param(smk.params.method_options),
            confidences=[float(c) for c in smk.params.confidences], horizons=[int(h) for h in smk.params.horizons],
            window_days=int(smk.params.window_days), seed=int(smk.params.seed), currency=smk.params.currency,
            positions_file=smk.params.positions_file, instruments_file=smk.params.instruments_file)


main(snakemake)  # noqa: F821
