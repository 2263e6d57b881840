# Scale scores per wave, their reliability and their invariance over the waves.


rule score_scales:
    input:
        panel="results/checks/panel.parquet",
        codebook=codebook_file(),
        findings="results/checks/findings.csv",
    output:
        scores="results/scores/scores.csv",
    params:
        settings={
            "outcomes": config["growth"]["outcomes"],
            "forest_outcome": config["forest"]["outcome"],
            "forest_enabled": config["forest"]["enabled"],
        },
    log:
        "logs/scores/score_scales.log",
    resources:
        runtime=RUNTIME,
        mem_mb=MEM_MB,
    script:
        "scripts/run_step.py"


rule assess_reliability:
    input:
        panel="results/checks/panel.parquet",
        codebook=codebook_file(),
        findings="results/checks/findings.csv",
    output:
        reliability="results/scores/reliability.csv",
    log:
        "logs/scores/assess_reliability.log",
    resources:
        runtime=RUNTIME,
        mem_mb=MEM_MB,
    script:
        "scripts/run_step.py"


rule test_invariance:
    input:
        panel="results/checks/panel.parquet",
        codebook=codebook_file(),
        findings="results/checks/findings.csv",
    output:
        invariance="results/scores/invariance.csv",
    params:
        settings=config["invariance"],
    log:
        "logs/scores/test_invariance.log",
    resources:
        runtime=RUNTIME,
        mem_mb=MEM_MB,
    script:
        "scripts/run_step.py"
