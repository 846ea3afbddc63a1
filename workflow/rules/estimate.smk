# Step 4: one cached rule per configured method, all sharing one glue script.

for _method in config["methods"]:

    rule:
        name:
            f"estimate_{_method}"
        input:
            **market_outputs(),
            exposures=rules.build_scenarios.output.exposures,
            positions=rules.ingest_positions.output.positions,
            instruments=rules.ingest_instruments.output.instruments,
        output:
            figures=result_path("estimates", f"{_method}.parquet"),
            prov=prov_path(f"estimate_{_method}"),
        log:
            log_path(f"estimate_{_method}"),
        benchmark:
            bench_path(f"estimate_{_method}")
        priority: slow_method_priority(_method)
        resources:
            mem_mb=4000,
            runtime=30,
        params:
            method=_method,
            confidences=config["confidences"],
            horizons=config["horizons_days"],
            window_days=config["window_days"],
            currency=config["base_currency"],
            positions_file=data_path("positions"),
            instruments_file=data_path("instruments"),
            options=method_options(_method),
            seed=method_seed(_method),
            code=code_version(*estimator_modules(_method), "scenarios", "market", "options", "figures", "pipeline",
                              "provenance"),
            libs=lib_versions("numpy", "scipy"),
        conda:
            ENV
        script:
            "../scripts/estimate.py"


rule contributions:
    input:
        **market_outputs(),
        exposures=rules.build_scenarios.output.exposures,
        positions=rules.ingest_positions.output.positions,
        instruments=rules.ingest_instruments.output.instruments,
    output:
        contributions=result_path("contributions", "risk_contributions.parquet"),
        prov=prov_path("contributions"),
    log:
        log_path("contributions"),
    benchmark:
        bench_path("contributions")
    resources:
        mem_mb=4000,
        runtime=30,
    params:
        methods=config["contributions"]["methods"],
        method_options=as_json({m: config.get(m, {}) for m in config["contributions"]["methods"]}),
        confidences=config["confidences"],
        horizons=config["horizons_days"],
        window_days=config["window_days"],
        currency=config["base_currency"],
        positions_file=data_path("positions"),
        instruments_file=data_path("instruments"),
        code=code_version("decomposition", "estimators", "scenarios", "market", "options", "pipeline",
                          "provenance"),
    conda:
        ENV
    script:
        "../scripts/contributions.py"
