"""Workflow steps: one library function per Snakemake rule.

Each rule in ``rules/*.smk`` runs ``rules/scripts/run_step.py``, which hands the
Snakemake job to :func:`wavetrail.stages.runner.run_from_snakemake`. That looks
the rule name up in :data:`STEPS`, builds a :class:`~wavetrail.stages.runner.Job`,
calls the step function and writes the job's ledger record. Step functions take
one ``Job`` and write exactly the outputs it names; they never import Snakemake.
"""

#: rule name -> "module:function" of the step that implements it
STEPS: dict[str, str] = {
    "confirm_raw_hashes": "wavetrail.stages.provenance:confirm_raw_hashes",
    "lock_environment": "wavetrail.stages.provenance:lock_environment",
    "check_data": "wavetrail.stages.checks:check_data",
    "score_scales": "wavetrail.stages.scores:score_scales",
    "assess_reliability": "wavetrail.stages.scores:assess_reliability",
    "test_invariance": "wavetrail.stages.scores:test_invariance",
    "fit_growth": "wavetrail.stages.growth:fit_growth",
    "grow_forest_shard": "wavetrail.stages.forest:grow_forest_shard",
    "merge_forest": "wavetrail.stages.forest:merge_forest",
    "summarise_forest": "wavetrail.stages.forest:summarise_forest",
    "render_report": "wavetrail.stages.report:render_report",
}
