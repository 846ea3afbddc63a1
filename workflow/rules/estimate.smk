# Step 4: one cached rule per configured method, all sharing one glue script.

for _method in config["methods"]:

    rule:
        name:
            f"estimate_{_method}"
        input:
            returns=market_outputs()["returns"],
            exposures=rules.build_scenarios.output.exposures,
        output:
            figures=result_path("estimates", f"{_method}.parquet"),
            prov=prov_path(f"estimate_{_method}"),
        log:
            log_path(f"estimate_{_method}"),
        benchmark:
            bench_path(f"estimate_{_method}")
        resources:
            mem_mb=4000,
            runtime=30,
        params:
            method=_method,
            confidences=config["confidences"],
            horizons=config["horizons_days"],
            window_days=config["window_days"],
            currency=config["base_currency"],
            options=method_options(_method),
            seed=method_seed(_method),
            code=code_version(*estimator_modules(_method), "scenarios", "figures", "pipeline", "provenance"),
            libs=lib_versions("numpy", "scipy"),
        conda:
            ENV
        script:
            "../scripts/estimate.py"
