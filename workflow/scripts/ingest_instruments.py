"""Glue for rule ingest_instruments."""
from tailtrace.provenance import setup_logging, step

setup_logging(snakemake)  # noqa: F821 (injected by Snakemake)

from tailtrace.pipeline import ingest_instruments  # noqa: E402


def main(smk) -> None:
    with step(smk):
        ingest_instruments(smk.input.instruments, smk.output.instruments)


main(snakemake)  # noqa: F821
