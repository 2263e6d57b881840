"""Workflow steps of the scales: scores, reliability, longitudinal invariance."""

from __future__ import annotations

import pandas as pd

from wavetrail._io import write_table
from wavetrail.errors import ConfigError
from wavetrail.scoring import reliability_table, score_panel
from wavetrail.stages.checks import load_job_panel, refuse_failed_checks

__all__ = ["score_scales", "assess_reliability", "test_invariance", "invariance_scales"]


def score_scales(job) -> None:
    """Rule ``score_scales``: inputs ``data``, ``codebook``, ``findings``; output ``scores``.

    scores.csv: id, wave, scale, score, n_items: every scale of the codebook and
    every single measure named as a growth or forest outcome (``scale`` = the
    variable name, ``n_items`` = 1 where observed). Refuses to run when the
    findings hold an error.
    """
    refuse_failed_checks(job)
    codebook, panel = load_job_panel(job)
    config = dict(job.config or {})
    settings = job.params.get("settings") or {}
    if settings:  # the outcome settings the rule passes, so a changed outcome reruns this step
        config["growth"] = {**(config.get("growth") or {}), "outcomes": settings.get("outcomes") or []}
        config["forest"] = {**(config.get("forest") or {}), "outcome": settings.get("forest_outcome"),
                            "enabled": settings.get("forest_enabled", True)}
    outcomes, forest_outcome = _checked_outcomes(job, config, codebook)
    measures = [o for o in [*outcomes, forest_outcome] if o and o not in codebook.scales]
    derived = {v.name: {"derived_from": v.derived_from, "transform": v.transform}
               for v in codebook.variables.values() if v.derived}
    if derived:  # visible in the ledger record's params
        job.params = {**job.params, "derived": derived}
    write_table(job.path(job.output["scores"]), score_panel(panel, measures=list(dict.fromkeys(measures))))


def _checked_outcomes(job, config: dict, codebook):
    """The outcomes, with every name of the settings checked against the codebook.

    ``wavetrail build`` checks them before Snakemake starts; this repeats the check for a
    workflow started some other way, naming the settings file and line where it can.
    """
    from wavetrail.config import CONFIG_FILE, check_names, read_yaml

    lines = {}
    settings_file = job.path(CONFIG_FILE)
    if settings_file.is_file():
        try:
            _, lines = read_yaml(settings_file)
        except ConfigError:
            lines = {}
    return check_names(config, codebook, source=CONFIG_FILE, lines=lines)


def assess_reliability(job) -> None:
    """Rule ``assess_reliability``: output ``reliability`` (see :func:`wavetrail.scoring.reliability_table`)."""
    refuse_failed_checks(job)
    _, panel = load_job_panel(job)
    write_table(job.path(job.output["reliability"]), reliability_table(panel))


def invariance_scales(job, codebook) -> list[str]:
    """Scales named by ``invariance.scales`` (``"all"`` or a list) in the config or params."""
    settings = job.params.get("settings") or job.config.get("invariance", {}) or {}
    chosen = settings.get("scales", "all")
    if chosen == "all":
        return list(codebook.scales)
    unknown = [s for s in chosen if s not in codebook.scales]
    if unknown:
        raise ConfigError(f"config.yaml: invariance.scales names {unknown}, which the codebook does not declare",
                          hint=f"scales in the codebook: {sorted(codebook.scales)}")
    return list(chosen)


def test_invariance(job) -> None:
    """Rule ``test_invariance``: output ``invariance`` (see :func:`wavetrail.invariance.invariance_table`)."""
    from wavetrail.invariance import INVARIANCE_COLUMNS, invariance_table

    refuse_failed_checks(job)
    codebook, panel = load_job_panel(job)
    scales = invariance_scales(job, codebook)
    table = invariance_table(panel, scales) if scales else pd.DataFrame(columns=INVARIANCE_COLUMNS)
    write_table(job.path(job.output["invariance"]), table)


test_invariance.__test__ = False  # a workflow step, not a pytest test
