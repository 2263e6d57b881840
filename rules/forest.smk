# The moderator forest: K shard jobs grow the trees, one job merges them, one summarises.


wildcard_constraints:
    shard=r"[1-9][0-9]*",


rule grow_forest_shard:
    input:
        scores="results/scores/scores.csv",
        panel="results/checks/panel.parquet",
        codebook=codebook_file(),
    output:
        shard="results/forest/shards/shard-{shard}.json",
    params:
        settings=config["forest"],
        seed=config["seed"],
        n_jobs=lambda wildcards, threads: threads,
    threads: config["forest"]["threads"]
    resources:
        runtime=config["forest"]["runtime"],
        mem_mb=config["forest"]["mem_mb"],
    log:
        "logs/forest/grow_forest_shard-{shard}.log",
    script:
        "scripts/run_step.py"


rule merge_forest:
    input:
        shards=shard_files,
    output:
        forest="results/forest/forest.json",
    log:
        "logs/forest/merge_forest.log",
    resources:
        runtime=RUNTIME,
        mem_mb=MEM_MB,
    script:
        "scripts/run_step.py"


rule summarise_forest:
    input:
        forest="results/forest/forest.json",
        scores="results/scores/scores.csv",
        panel="results/checks/panel.parquet",
        codebook=codebook_file(),
    output:
        importance="results/forest/importance.csv",
        dependence="results/forest/dependence.csv",
        interactions="results/forest/interactions.csv",
        dependence_pairs="results/forest/dependence_pairs.csv",
        overview="results/forest/overview.csv",
        trees="results/forest/trees.csv",
        differences="results/forest/differences.csv",
        confirmation="results/forest/confirmation.csv",
        confirmation_tests="results/forest/confirmation_tests.csv",
        importance_figure="results/forest/importance_plot.png",
        importance_figure_svg="results/forest/importance_plot.svg",
        importance_figure_csv="results/forest/importance_plot.csv",
        trajectories_figure="results/forest/trajectories.png",
        trajectories_figure_svg="results/forest/trajectories.svg",
        trajectories_figure_csv="results/forest/trajectories.csv",
    params:
        settings=config["forest"],
    log:
        "logs/forest/summarise_forest.log",
    resources:
        runtime=RUNTIME,
        mem_mb=MEM_MB,
    script:
        "scripts/run_step.py"
