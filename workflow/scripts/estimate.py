"""Glue for the estimate_<method> rules (one per method, same script)."""
from tailtrace.provenance import setup_logging, step

setup_logging(snakemake)  # noqa: F821 (injected by Snakemake)

from tailtrace.pipeline import parse_json_param, run_estimator  # noqa: E402


def main(smk) -> None:
    with step(smk) as notes:
        notes["windows"] = run_estimator(
            dict(smk.input.items()), smk.input.exposures, smk.input.positions, smk.input.instruments,
            smk.output.figures, method=smk.params.method,
            confidences=[float(c) for c in smk.params.confidences], horizons=[int(h) for h in smk.params.horizons],
            window_days=int(smk.params.window_days), options=parse_json_param(smk.params.options),
            seed=int(smk.params.seed), currency=smk.params.currency, positions_file=smk.params.positions_file,
            instruments_file=smk.params.instruments_file, out_notes=smk.output.notes)


main(snakemake)  # noqa: F821
