# tailtrace: price files -> validated Parquet -> returns -> estimators -> DuckDB.
from pathlib import Path

from snakemake.utils import min_version, validate

min_version("9.0")


configfile: str(Path(workflow.basedir) / "config" / "config.yaml")


validate(config, str(Path(workflow.basedir) / "workflow" / "schemas" / "config.schema.yaml"))


include: "workflow/rules/common.smk"
include: "workflow/rules/ingest.smk"
include: "workflow/rules/returns.smk"
include: "workflow/rules/estimate.smk"
include: "workflow/rules/aggregate.smk"


rule all:
    default_target: True
    input:
        rules.aggregate.output.receipt,
