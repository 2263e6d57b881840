# Codebook checks on the raw data: findings, descriptives, attrition.


rule check_data:
    input:
        data=data_files(),
        codebook=codebook_file(),
        registry="results/checks/data_registry.csv",
    output:
        findings="results/checks/findings.csv",
        descriptives="results/checks/descriptives.csv",
        attrition="results/checks/attrition.csv",
    log:
        "logs/checks/check_data.log",
    resources:
        runtime=RUNTIME,
        mem_mb=MEM_MB,
    script:
        "scripts/run_step.py"
