"""Glue for rule ingest_prices."""
from tailtrace.provenance import setup_logging, step

setup_logging(snakemake)  # noqa: F821 (injected by Snakemake)

from tailtrace.pipeline import ingest_prices  # noqa: E402


def main(smk) -> None:
    with step(smk):
        ingest_prices(smk.input.prices, smk.input.instruments, smk.output.prices, smk.output.quality,
                      stale_days=int(smk.params.stale_days))


main(snakemake)  # noqa: F821
