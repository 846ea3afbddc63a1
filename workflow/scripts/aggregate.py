"""Glue for rule aggregate."""
import json

from tailtrace.provenance import setup_logging

setup_logging(snakemake)  # noqa: F821 (injected by Snakemake)

from tailtrace.aggregate import EXTRA_TABLES, aggregate  # noqa: E402


def _files(named) -> list[str]:
    return [named] if isinstance(named, str) else list(named)


def main(smk) -> None:
    receipt = aggregate(
        smk.params.database,
        figure_files=list(smk.input.figures),
        quality_files=list(smk.input.quality),
        record_files=list(smk.input.records),
        extra_tables={name: _files(smk.input[name]) for name in EXTRA_TABLES if name in smk.input.keys()},
        config_snapshot=json.loads(smk.params.config),
    )
    with open(smk.output.receipt, "w") as fh:
        json.dump(receipt, fh, indent=1, sort_keys=True)


main(snakemake)  # noqa: F821
