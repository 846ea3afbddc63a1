# Backtesting: rolling 1-day forecasts of every method against realised P&L.


rule backtest:
    input:
        **book_inputs(),
        **pnl_actual_input(),
    output:
        forecasts=result_path("backtest", "forecasts.parquet"),
        summary=result_path("backtest", "summary.parquet"),
        prov=prov_path("backtest"),
    log:
        log_path("backtest"),
    benchmark:
        bench_path("backtest")
    resources:
        mem_mb=4000,
        runtime=60,
    params:
        methods=config["backtest"]["methods"],
        confidences=config["backtest"]["confidences"],
        days=config["backtest"]["days"],
        window_days=config["window_days"],
        options=as_json(config["backtest"]["options"]),
        seed=config["backtest"]["seed"],
        plus_factor_rule=config["backtest"]["plus_factor_rule"],
        **book_params(),
        code=code_version("backtest", "scenarios", "market", "options", "pipeline", "provenance"),
    conda:
        ENV
    script:
        "../scripts/backtest.py"
