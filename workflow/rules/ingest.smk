# Step 1: validate reference data and each price file into Parquet.


rule ingest_instruments:
    input:
        instruments=data_path("instruments"),
    output:
        instruments=result_path("reference", "instruments.parquet"),
        prov=prov_path("ingest_instruments"),
    log:
        log_path("ingest_instruments"),
    benchmark:
        bench_path("ingest_instruments")
    resources:
        mem_mb=1000,
        runtime=10,
    params:
        code=code_version("csvread", "reference", "errors", "pipeline", "provenance"),
    conda:
        ENV
    script:
        "../scripts/ingest_instruments.py"


rule ingest_positions:
    input:
        positions=positions_files(),
        instruments=data_path("instruments"),
    output:
        positions=result_path("reference", "positions.parquet"),
        prov=prov_path("ingest_positions"),
    log:
        log_path("ingest_positions"),
    benchmark:
        bench_path("ingest_positions")
    resources:
        mem_mb=1000,
        runtime=10,
    params:
        code=code_version("csvread", "reference", "errors", "pipeline", "provenance"),
    conda:
        ENV
    script:
        "../scripts/ingest_positions.py"


rule ingest_prices:
    input:
        prices=str(Path(data_path("prices_dir")) / "{name}.csv"),
        instruments=data_path("instruments"),
    output:
        prices=result_path("prices", "{name}.parquet"),
        quality=result_path("quality", "{name}.parquet"),
        prov=prov_path("ingest_prices", "{name}.json"),
    log:
        log_path("ingest_prices", "{name}.log"),
    benchmark:
        bench_path("ingest_prices", "{name}.tsv")
    resources:
        mem_mb=1000,
        runtime=10,
    params:
        stale_days=config["data_quality"]["stale_days"],
        code=code_version("csvread", "ingest", "reference", "errors", "pipeline", "provenance"),
    conda:
        ENV
    script:
        "../scripts/ingest_prices.py"
