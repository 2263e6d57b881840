"""Workflow step ``check_data``: the codebook checks on the raw data."""

from __future__ import annotations

import logging
from pathlib import Path

import pandas as pd

from wavetrail._io import write_table
from wavetrail.checks import attrition, describe, run_checks
from wavetrail.codebook import load_codebook
from wavetrail.errors import DataError
from wavetrail.panel import load_panel

__all__ = ["check_data", "data_paths", "failed_checks_message", "load_job_panel", "refuse_failed_checks"]

log = logging.getLogger(__name__)


def data_paths(job) -> list[Path]:
    """The job's ``data`` input as absolute paths (one or several files)."""
    value = job.input["data"]
    values = value if isinstance(value, (list, tuple)) else [value]
    return [job.path(v) for v in values]


def load_job_panel(job):
    """Codebook and panel of a job.

    With a ``panel`` input (the stored panel the check step writes, as every rule after the
    checks has) the panel is read from it (:func:`wavetrail.stored_panel.read_stored_panel`,
    which refuses one written with another codebook); otherwise it is built from the ``data``
    input (the raw files).
    """
    codebook_path = job.path(job.input["codebook"])
    codebook = load_codebook(codebook_path)
    if job.input.get("panel"):
        from wavetrail.stored_panel import read_stored_panel

        return codebook, read_stored_panel(job.path(job.input["panel"]), codebook, codebook_path=codebook_path)
    return codebook, load_panel(data_paths(job), codebook)


def failed_checks_message(findings: pd.DataFrame, path: str) -> str | None:
    """The message that stops the build when ``findings`` hold an error (``None`` when none does)."""
    if not len(findings):
        return None
    errors = findings[findings["severity"] == "error"]
    if not len(errors):
        return None
    first = errors.iloc[0]
    wave = first["wave"]
    where = f"{first['variable']}" + (f", wave {wave}" if pd.notna(wave) and str(wave) != "" else "")
    return (f"{len(errors)} check finding(s) with severity error, listed in {path} "
            f"(first: {first['check']} in {where}: {first['message']}); "
            "scores are not computed from data that fail the checks")


def refuse_failed_checks(job) -> None:
    """Raise when the job's ``findings`` input holds an error (the checks did not pass).

    This is where a build with failing checks stops: ``check_data`` itself
    succeeds, so Snakemake keeps its findings table for the user to read.
    """
    path = job.input.get("findings")
    if not path:
        return
    findings = pd.read_csv(job.path(path), keep_default_na=False)
    message = failed_checks_message(findings, path)
    if message:
        raise DataError(message, hint=f"read {path} (or run `wavetrail check`), fix the data or the "
                                      "codebook, then build again")


def check_data(job) -> None:
    """Rule ``check_data``: findings, descriptives and attrition of the raw data.

    Inputs ``data`` (list), ``codebook``, ``registry``; outputs ``findings``,
    ``descriptives``, ``attrition`` and ``panel``, the stored panel every later step
    reads instead of the raw files (:mod:`wavetrail.stored_panel`; written even when a
    finding has severity ``error``, since those steps refuse to run then anyway). The step always succeeds once the tables are
    written, so Snakemake keeps them; when a finding has severity ``error`` the
    steps that read the findings refuse to run (:func:`refuse_failed_checks`),
    which stops the build before scoring with a message naming the findings file.
    """
    codebook, panel = load_job_panel(job)
    derived = {v.name: {"derived_from": v.derived_from, "transform": v.transform}
               for v in codebook.variables.values() if v.derived}
    if derived:  # the declared transformations, visible in the ledger record's params
        job.params = {**job.params, "derived": derived}
    findings = run_checks(panel)
    write_table(job.path(job.output["descriptives"]), describe(panel))
    write_table(job.path(job.output["attrition"]), attrition(panel))
    write_table(job.path(job.output["findings"]), findings)
    if job.output.get("panel"):
        from wavetrail.stored_panel import write_stored_panel

        write_stored_panel(panel, job.path(job.output["panel"]), codebook_path=job.path(job.input["codebook"]))
    message = failed_checks_message(findings, job.output["findings"])
    if message:
        # Not raised here: a failed job loses its outputs, and the user needs this table.
        # The first step that reads the findings (score_scales, ...) stops the build.
        log.warning(message)
