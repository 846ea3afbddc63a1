# Stress testing: historical, hypothetical and reverse stress, stressed
# calibration and the liquidity-horizon ES, one job for every as_of.


rule stress:
    input:
        **book_inputs(),
        windows=repo_path(config["stress"]["windows_file"]),
        shocks=repo_path(config["stress"]["shocks_file"]),
    output:
        results=result_path("stress", "stress_results.parquet"),
        liquidity=result_path("stress", "liquidity_es.parquet"),
        windows=result_path("stress", "stressed_windows.parquet"),
        figures=result_path("stress", "stressed_figures.parquet"),
        prov=prov_path("stress"),
    log:
        log_path("stress"),
    benchmark:
        bench_path("stress")
    resources:
        mem_mb=4000,
        runtime=30,
    params:
        settings=as_json(stress_settings()),
        stressed_methods=config["stress"]["stressed_methods"],
        method_options=as_json({m: config.get(m, {}) for m in config["stress"]["stressed_methods"]}),
        confidences=config["confidences"],
        horizons=config["horizons_days"],
        window_days=config["window_days"],
        seed=config["seed"],
        **book_params(),
        code=code_version("stress", "estimators", "scenarios", "market", "options", "figures", "pipeline",
                          "provenance"),
    conda:
        ENV
    script:
        "../scripts/stress.py"
