# Helpers shared by every stage module (file lists, settings from the validated config).
# Only functions and constants live here; the Snakefile includes this module first.
from pathlib import Path

from wavetrail.environment import fingerprint as _environment_fingerprint


# Default cluster resources of every job (config key `resources`).
RUNTIME = config["resources"]["runtime"]
MEM_MB = config["resources"]["mem_mb"]


def data_files():
    """Raw data files listed under `data` in config/config.yaml."""
    return list(config["data"])


def codebook_file():
    return config["codebook"]


def forest_enabled():
    return bool(config["forest"]["enabled"])


def shard_numbers():
    """1..K for K = forest.shards."""
    return list(range(1, int(config["forest"]["shards"]) + 1))


def shard_files(wildcards=None):
    return expand("results/forest/shards/shard-{shard}.json", shard=shard_numbers())


def environment_fingerprint():
    """The environment fingerprint of wavetrail.environment (sha256 of the lock text).

    Given to lock_environment as a parameter, so Snakemake reruns it (and everything
    recorded against the lock) when a package is added, removed or upgraded, or the
    Python version or platform changes. One implementation: the ledger's lock_sha256
    and `wavetrail ledger` use the same function.
    """
    return _environment_fingerprint()


def report_inputs(wildcards=None):
    """Named inputs of render_report: every result table, figure and the environment lock."""
    inputs = {
        "registry": "results/checks/data_registry.csv",
        "findings": "results/checks/findings.csv",
        "descriptives": "results/checks/descriptives.csv",
        "attrition": "results/checks/attrition.csv",
        "scores": "results/scores/scores.csv",
        "reliability": "results/scores/reliability.csv",
        "invariance": "results/scores/invariance.csv",
        "growth_fit": "results/growth/fit.csv",
        "growth_estimates": "results/growth/estimates.csv",
        "growth_comparison": "results/growth/comparison.csv",
        "growth_conditional": "results/growth/conditional.csv",
        "growth_conditional_tests": "results/growth/conditional_tests.csv",
        "growth_figure": "results/growth/trajectories.png",
        "codebook": codebook_file(),
        "lock": "environment/requirements.lock",
    }
    if forest_enabled():
        inputs.update(
            forest="results/forest/forest.json",
            importance="results/forest/importance.csv",
            dependence="results/forest/dependence.csv",
            interactions="results/forest/interactions.csv",
            dependence_pairs="results/forest/dependence_pairs.csv",
            forest_overview="results/forest/overview.csv",
            forest_trees="results/forest/trees.csv",
            differences="results/forest/differences.csv",
            confirmation="results/forest/confirmation.csv",
            confirmation_tests="results/forest/confirmation_tests.csv",
            importance_figure="results/forest/importance_plot.png",
            trajectories_figure="results/forest/trajectories.png",
        )
    notebook = Path("workflow/notebooks/report.ipynb")
    if notebook.is_file():
        inputs["notebook_source"] = str(notebook)
    return inputs


def final_outputs():
    """Everything `rule all` asks for."""
    outputs = ["results/write-up/report.html", "results/write-up/report.ipynb"]
    if forest_enabled():
        outputs.append("results/forest/importance.csv")
    return outputs
