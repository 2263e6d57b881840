# Thin script shared by every rule: hand the job to the library.
from wavetrail.stages.runner import run_from_snakemake

run_from_snakemake(snakemake)  # noqa: F821  (injected by Snakemake)
