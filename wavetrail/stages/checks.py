"""Workflow step ``check_data``: the codebook checks on the raw data."""

from __future__ import annotations

from pathlib import Path

import pandas as pd

from wavetrail._io import write_table
from wavetrail.checks import attrition, describe, has_errors, run_checks
from wavetrail.codebook import load_codebook
from wavetrail.errors import DataError
from wavetrail.panel import load_panel

__all__ = ["check_data", "data_paths", "load_job_panel", "refuse_failed_checks"]


def data_paths(job) -> list[Path]:
    """The job's ``data`` input as absolute paths (one or several files)."""
    value = job.input["data"]
    values = value if isinstance(value, (list, tuple)) else [value]
    return [job.path(v) for v in values]


def load_job_panel(job):
    """Codebook and panel of a job (inputs ``codebook`` and ``data``)."""
    codebook = load_codebook(job.path(job.input["codebook"]))
    return codebook, load_panel(data_paths(job), codebook)


def refuse_failed_checks(job) -> None:
    """Raise when the job's ``findings`` input holds an error (the checks did not pass)."""
    path = job.input.get("findings")
    if not path:
        return
    findings = pd.read_csv(job.path(path), keep_default_na=False)
    if len(findings) and (findings["severity"] == "error").any():
        n = int((findings["severity"] == "error").sum())
        raise DataError(f"{n} check finding(s) with severity error in {path}; "
                        "scores are not computed from data that fail the checks",
                        hint="fix the data or the codebook, then build again")


def check_data(job) -> None:
    """Rule ``check_data``: findings, descriptives and attrition of the raw data.

    Inputs ``data`` (list), ``codebook``, ``registry``; outputs ``findings``,
    ``descriptives``, ``attrition``. All three tables are written first; then,
    when any finding has severity ``error``, a :class:`DataError` naming the
    findings file stops the build before scoring.
    """
    codebook, panel = load_job_panel(job)
    findings = run_checks(panel)
    write_table(job.path(job.output["descriptives"]), describe(panel))
    write_table(job.path(job.output["attrition"]), attrition(panel))
    write_table(job.path(job.output["findings"]), findings)
    if has_errors(findings):
        errors = findings[findings["severity"] == "error"]
        first = errors.iloc[0]
        where = f"{first['variable']}" + (f", wave {first['wave']}" if pd.notna(first["wave"]) else "")
        raise DataError(
            f"{len(errors)} check finding(s) with severity error, listed in {job.output['findings']} "
            f"(first: {first['check']} in {where}: {first['message']})",
            hint="fix the data or the codebook, then run `wavetrail check` again")
