# The end-of-day report of every as_of of the run, from the risk database.


localrules:
    report,


rule report:
    input:
        receipt=rules.aggregate.output.receipt,
        pnl=rules.build_scenarios.output.pnl,
        **limits_input(),
    output:
        html=report(
            result_path("report", "latest.html"),
            caption="../report/report_page.rst",
            category="End-of-day report",
        ),
        csv=report(
            result_path("report", "latest.csv"),
            caption="../report/report_headline.rst",
            category="End-of-day report",
        ),
        prov=prov_path("report"),
    log:
        log_path("report"),
    benchmark:
        bench_path("report")
    resources:
        mem_mb=2000,
        runtime=10,
    params:
        database=result_path("risk.duckdb"),
        base_currency=config["base_currency"],
        headline_method=config["headline_method"],
        disagreement_ratio=config["report"]["disagreement_ratio"],
        top_n=config["report"]["top_n"],
        near_limit=config["report"]["near_limit"],
        max_chart_portfolios=config["report"]["max_chart_portfolios"],
        chart_confidence=config["report"]["chart_confidence"],
        code_version=code_version("report"),
    conda:
        ENV
    script:
        "../scripts/report.py"
