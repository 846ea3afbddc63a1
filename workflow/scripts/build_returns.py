"""Glue for rule build_returns."""
from tailtrace.provenance import setup_logging, step

setup_logging(snakemake)  # noqa: F821 (injected by Snakemake)

from tailtrace.pipeline import build_returns  # noqa: E402


def main(smk) -> None:
    with step(smk):
        build_returns(list(smk.input.prices), smk.input.instruments, dict(smk.output.items()),
                      base_currency=smk.params.base_currency, max_fill_days=int(smk.params.max_fill_days),
                      instruments_file=smk.params.instruments_file)


main(snakemake)  # noqa: F821
