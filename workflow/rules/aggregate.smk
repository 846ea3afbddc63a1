# Step 6: everything into the DuckDB risk database, atomically.


localrules:
    aggregate,


rule aggregate:
    input:
        figures=estimate_files(),
        quality=quality_files(),
        records=record_files(),
        **extra_table_files(),
    output:
        receipt=result_path("aggregate.json"),
    log:
        log_path("aggregate"),
    benchmark:
        bench_path("aggregate")
    resources:
        mem_mb=2000,
        runtime=20,
    params:
        database=result_path("risk.duckdb"),
        config=config_snapshot(),
        code=code_version("aggregate", "database", "figures", "provenance", "ingest"),
    conda:
        ENV
    script:
        "../scripts/aggregate.py"
