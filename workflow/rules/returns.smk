# Steps 2-3: align calendars and take returns; value today's book under them.


rule build_returns:
    input:
        prices=expand(result_path("prices", "{name}.parquet"), name=price_names()),
        instruments=rules.ingest_instruments.output.instruments,
    output:
        **market_outputs(),
        filled=result_path("quality", "filled.parquet"),
        prov=prov_path("build_returns"),
    log:
        log_path("build_returns"),
    benchmark:
        bench_path("build_returns")
    resources:
        mem_mb=4000,
        runtime=20,
    params:
        base_currency=config["base_currency"],
        max_fill_days=config["returns"]["max_fill_days"],
        instruments_file=data_path("instruments"),
        code=code_version("market", "ingest", "reference", "errors", "pipeline", "provenance"),
    conda:
        ENV
    script:
        "../scripts/build_returns.py"


rule build_scenarios:
    input:
        **market_outputs(),
        positions=rules.ingest_positions.output.positions,
        instruments=rules.ingest_instruments.output.instruments,
    output:
        exposures=result_path("scenarios", "exposures.parquet"),
        pnl=result_path("scenarios", "pnl.parquet"),
        sensitivities=result_path("scenarios", "sensitivities.parquet"),
        prov=prov_path("build_scenarios"),
    log:
        log_path("build_scenarios"),
    benchmark:
        bench_path("build_scenarios")
    resources:
        mem_mb=4000,
        runtime=20,
    params:
        as_of=as_json(config["as_of"]),
        window_days=config["window_days"],
        positions_file=data_path("positions"),
        instruments_file=data_path("instruments"),
        base_currency=config["base_currency"],
        code=code_version("scenarios", "market", "options", "estimators/base", "errors", "pipeline", "provenance"),
    conda:
        ENV
    script:
        "../scripts/build_scenarios.py"
