"""Glue for rule ingest_positions."""
from tailtrace.provenance import setup_logging, step

setup_logging(snakemake)  # noqa: F821 (injected by Snakemake)

from tailtrace.pipeline import ingest_positions  # noqa: E402


def main(smk) -> None:
    with step(smk):
        ingest_positions(list(smk.input.positions), smk.input.instruments, smk.output.positions)


main(snakemake)  # noqa: F821
