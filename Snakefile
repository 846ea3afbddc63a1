# tailtrace: price files -> validated Parquet -> returns -> estimators -> DuckDB.
from pathlib import Path

import yaml
from snakemake.utils import min_version, validate

from tailtrace.configuration import coerce_cli_values

min_version("9.0")


report: "workflow/report/workflow.rst"


configfile: str(Path(workflow.basedir) / "config" / "config.yaml")


CONFIG_SCHEMA = Path(workflow.basedir) / "workflow" / "schemas" / "config.schema.yaml"
coerce_cli_values(config, yaml.safe_load(CONFIG_SCHEMA.read_text()))
validate(config, str(CONFIG_SCHEMA))


include: "workflow/rules/common.smk"
include: "workflow/rules/ingest.smk"
include: "workflow/rules/returns.smk"
include: "workflow/rules/estimate.smk"
include: "workflow/rules/stress.smk"
include: "workflow/rules/aggregate.smk"
include: "workflow/rules/report.smk"


rule all:
    default_target: True
    input:
        rules.aggregate.output.receipt,
        rules.report.output.html,
