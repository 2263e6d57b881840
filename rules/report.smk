# The executed report notebook and its self-contained HTML.


rule render_report:
    input:
        unpack(report_inputs),
    output:
        notebook="results/write-up/report.ipynb",
        html="results/write-up/report.html",
        # the report's own figures (PNG, SVG and data CSV each): recorded in the ledger, carried by archives
        figures=directory("results/write-up/figures"),
    params:
        settings=config["report"],
    log:
        "logs/report/render_report.log",
    resources:
        runtime=RUNTIME,
        mem_mb=MEM_MB,
    script:
        "scripts/run_step.py"
