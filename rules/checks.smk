# Codebook checks on the raw data: findings, descriptives, attrition, and the stored panel.
# The check step is the only one that reads the raw files: it writes the tidy panel it built
# for the checks once, typed (results/checks/panel.parquet, no identifier column), and every
# later step reads that instead of the raw files. A changed raw file or codebook reruns it
# (both are its inputs), after confirm_raw_hashes has refused raw files that differ from
# data/SHA256SUMS (the registry is its input too).


rule check_data:
    input:
        data=data_files(),
        codebook=codebook_file(),
        registry="results/checks/data_registry.csv",
    output:
        findings="results/checks/findings.csv",
        descriptives="results/checks/descriptives.csv",
        attrition="results/checks/attrition.csv",
        panel="results/checks/panel.parquet",
    log:
        "logs/checks/check_data.log",
    resources:
        runtime=RUNTIME,
        mem_mb=MEM_MB,
    script:
        "scripts/run_step.py"
