# Latent growth curve models of the scale scores (FIML for missing waves).


rule fit_growth:
    input:
        scores="results/scores/scores.csv",
        codebook=codebook_file(),
        panel="results/checks/panel.parquet",
    output:
        fit="results/growth/fit.csv",
        estimates="results/growth/estimates.csv",
        comparison="results/growth/comparison.csv",
        conditional="results/growth/conditional.csv",
        conditional_tests="results/growth/conditional_tests.csv",
        figure="results/growth/trajectories.png",
        figure_svg="results/growth/trajectories.svg",
        figure_csv="results/growth/trajectories.csv",
    params:
        settings=config["growth"],
    log:
        "logs/growth/fit_growth.log",
    resources:
        runtime=RUNTIME,
        mem_mb=MEM_MB,
    script:
        "scripts/run_step.py"
