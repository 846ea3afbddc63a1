# Step 4: one cached rule per configured method, all sharing one glue script.

for _method in config["methods"]:

    rule:
        name:
            f"estimate_{_method}"
        input:
            **book_inputs(local=False),
        output:
            figures=result_path("estimates", f"{_method}.parquet"),
            notes=result_path("estimates", "notes", f"{_method}.parquet"),
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
            **book_params(),
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
        **book_inputs(),
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
        **book_params(),
        code=code_version("decomposition", "estimators", "scenarios", "market", "options", "pipeline",
                          "provenance"),
    conda:
        ENV
    script:
        "../scripts/contributions.py"
