"""Building a project's report: execute the notebook, normalise it, write it and its HTML."""

from __future__ import annotations

import os
from pathlib import Path
from typing import Any

from wavetrail._io import atomic_write_bytes, atomic_write_text
from wavetrail.report.execute import execute_notebook
from wavetrail.report.html import notebook_to_html
from wavetrail.report.normalise import normalise_notebook, notebook_bytes

DEFAULT_TITLE = "Panel study report"


def render(
    project: str | os.PathLike,
    source: str | os.PathLike,
    notebook: str | os.PathLike,
    html: str | os.PathLike,
    *,
    tables: dict[str, str] | None = None,
    settings: dict[str, Any] | None = None,
    failed_copy: str | os.PathLike | None = None,
) -> tuple[Path, Path]:
    """Execute the report notebook of ``project`` and write the executed notebook and its HTML.

    Parameters
    ----------
    project
        Project root; the notebook runs there and all paths below are relative to it
        (or absolute).
    source
        The report notebook (``workflow/notebooks/report.ipynb``).
    notebook, html
        Where the executed, normalised notebook and the HTML page go.
    tables
        Result table name -> project-relative path, passed to the notebook.
    settings
        Report settings passed to the notebook (``title``, ``min_cell``, ``seed``, ...).
    failed_copy
        Where to keep the executed notebook when a cell fails.

    Returns
    -------
    (notebook path, html path)

    Raises
    ------
    BuildError
        When a notebook cell fails (names the cell); nothing is written then except
        ``failed_copy``.
    """
    project = Path(project)
    settings = dict(settings or {})
    parameters = {"project_root": ".", "tables": dict(tables or {}), "settings": settings}
    executed = execute_notebook(_abs(project, source), parameters, cwd=project,
                                failed_copy=_abs(project, failed_copy) if failed_copy else None)
    clean = normalise_notebook(executed)
    title = settings.get("title") or DEFAULT_TITLE
    from wavetrail import __version__

    page = notebook_to_html(
        clean,
        title=title,
        subtitle="Executed report of the analysis workflow; every number is read from the result tables.",
        footer=f"Written by wavetrail {__version__} from workflow/notebooks/report.ipynb.",
    )
    nb_path = atomic_write_bytes(_abs(project, notebook), notebook_bytes(clean))
    html_path = atomic_write_text(_abs(project, html), page)
    return nb_path, html_path


def _abs(project: Path, path) -> Path:
    path = Path(path)
    return path if path.is_absolute() else project / path
