"""Glue for rule build_scenarios."""
from tailtrace.provenance import setup_logging, step

setup_logging(snakemake)  # noqa: F821 (injected by Snakemake)

from tailtrace.pipeline import build_scenarios, parse_json_param  # noqa: E402


def main(smk) -> None:
    with step(smk) as notes:
        notes["as_of"] = build_scenarios(
            dict(smk.input.items()), smk.input.positions, smk.input.instruments, dict(smk.output.items()),
            as_of=parse_json_param(smk.params.as_of), window_days=int(smk.params.window_days),
            positions_file=smk.params.positions_file, instruments_file=smk.params.instruments_file,
            base_currency=smk.params.base_currency)


main(snakemake)  # noqa: F821
