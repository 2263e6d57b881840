"""The ``render_report`` step: the executed report notebook and its HTML page."""

from __future__ import annotations

from pathlib import Path

from wavetrail.errors import BuildError
from wavetrail.report.inputs import OTHER_PATHS, TABLE_PATHS
from wavetrail.stages.runner import Job

#: the report notebook of a project, relative to its root
NOTEBOOK_SOURCE = "workflow/notebooks/report.ipynb"
#: where the report keeps its own figures when the rule does not name a ``figures`` output
FIGURES = "results/write-up/figures"


def render_report(job: Job) -> None:
    """Execute ``workflow/notebooks/report.ipynb`` on the result tables and write notebook + HTML.

    Named inputs: any of the result tables (``findings``, ``descriptives``, ``attrition``,
    ``scores``, ``reliability``, ``invariance``, ``growth_fit``, ``growth_estimates``,
    ``growth_comparison``, ``importance``, ``dependence``, ``interactions``) and ``lock``;
    a name the rule leaves out is a stage the project does not run, and the report says
    so. Named outputs: ``notebook`` and ``html`` (and optionally ``figures``, a folder).
    """
    from wavetrail.report import render

    for name in ("notebook", "html"):
        if name not in job.output:
            raise BuildError(f"rule {job.step} names no output {name!r}",
                             hint="restore workflow/rules/report.smk from the template")
    known = set(TABLE_PATHS) | set(OTHER_PATHS)
    tables = {name: _rel(job, path) for name, path in job.input.items() if name in known}
    config = job.config or {}
    settings = {
        "title": (config.get("report") or {}).get("title") or config.get("title"),
        "seed": config.get("seed"),
        "codebook": _rel(job, job.input.get("codebook", config.get("codebook", "config/codebook.yaml"))),
        "min_cell": int((config.get("report") or {}).get("min_cell", 5)),
        "forest": _forest_settings(job, config),
        "figures": _rel(job, job.output.get("figures", FIGURES)),
    }
    failed = Path(job.log).with_suffix(".failed.ipynb") if job.log else Path("logs/report/render_report.failed.ipynb")
    render(job.project, NOTEBOOK_SOURCE, job.output["notebook"], job.output["html"],
           tables=tables, settings=settings, failed_copy=failed)


def _forest_settings(job: Job, config: dict):
    """The forest settings with ``outcome`` resolved (null = the first growth outcome)."""
    forest = config.get("forest")
    if not isinstance(forest, dict) or forest.get("outcome") or not forest.get("enabled", True):
        return forest
    codebook_path = job.input.get("codebook")
    if not codebook_path:
        return forest
    from wavetrail.codebook import load_codebook
    from wavetrail.config import resolve_outcomes
    from wavetrail.errors import WavetrailError

    try:
        _, outcome = resolve_outcomes(config, load_codebook(job.path(codebook_path)))
    except WavetrailError:
        return forest
    return {**forest, "outcome": outcome}


def _rel(job: Job, path) -> str:
    """A project-relative POSIX path (the executed notebook must not hold machine paths)."""
    if isinstance(path, (list, tuple)):
        if len(path) != 1:
            raise BuildError(f"rule {job.step}: input {path!r} must be one file")
        path = path[0]
    p = Path(path)
    if p.is_absolute():
        try:
            p = p.relative_to(job.project)
        except ValueError:
            pass
    return p.as_posix()
