# Audit trail: the raw data must match data/SHA256SUMS; the installed packages are locked.


rule confirm_raw_hashes:
    input:
        data=data_files(),
        registry="data/SHA256SUMS",
    output:
        registry="results/checks/data_registry.csv",
    log:
        "logs/provenance/confirm_raw_hashes.log",
    resources:
        runtime=RUNTIME,
        mem_mb=MEM_MB,
    script:
        "scripts/run_step.py"


rule lock_environment:
    output:
        lock="environment/requirements.lock",
    params:
        fingerprint=environment_fingerprint(),
    log:
        "logs/provenance/lock_environment.log",
    resources:
        runtime=RUNTIME,
        mem_mb=MEM_MB,
    script:
        "scripts/run_step.py"
