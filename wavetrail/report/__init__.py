"""Executed, self-contained report notebooks.

- :func:`~wavetrail.report.execute.execute_notebook`: papermill on a kernel of ``sys.executable``;
  a failed cell raises :class:`~wavetrail.errors.BuildError` naming the cell.
- :func:`~wavetrail.report.normalise.normalise_notebook`: strip run-specific metadata so the
  executed notebook hashes the same for the same inputs.
- :func:`~wavetrail.report.html.notebook_to_html`: one self-contained HTML page.
- :func:`~wavetrail.report.document.open_report`: the report's sections, used by the notebook.
- :func:`render`: all of it for one project.
"""

from __future__ import annotations

from wavetrail.report.build import render
from wavetrail.report.document import Report, open_report

__all__ = ["Report", "open_report", "render"]
