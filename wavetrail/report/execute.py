"""Executing a report notebook with papermill, failing loudly on a failed cell."""

from __future__ import annotations

import logging
import os
import tempfile
from pathlib import Path
from typing import Any

import nbformat

from wavetrail.errors import BuildError
from wavetrail.report.kernel import KERNEL_NAME, InterpreterKernelManager

log = logging.getLogger("wavetrail.report")

#: seconds a single report cell may run before the build fails
CELL_TIMEOUT = 600


def execute_notebook(
    source: str | os.PathLike,
    parameters: dict[str, Any],
    *,
    cwd: str | os.PathLike,
    failed_copy: str | os.PathLike | None = None,
    timeout: int = CELL_TIMEOUT,
) -> nbformat.NotebookNode:
    """Run the notebook ``source`` with ``parameters`` injected and return the executed notebook.

    Parameters
    ----------
    source
        The notebook file. It needs a cell tagged ``parameters``; papermill puts the
        values given here in a new cell right after it.
    parameters
        Values for the notebook (plain JSON-like values; paths relative to ``cwd``
        keep the executed notebook free of machine-specific paths).
    cwd
        Working folder of the kernel (the project root).
    failed_copy
        Where to keep the executed notebook when a cell fails, for inspection.
    timeout
        Seconds one cell may take.

    Raises
    ------
    BuildError
        When the notebook cannot be read or a cell raises; the message names the cell
        (its position and first line) and the error it raised.
    """
    import papermill
    from papermill.exceptions import PapermillExecutionError

    source = Path(source)
    if not source.is_file():
        raise BuildError(
            f"report notebook {source} is missing",
            hint="restore workflow/notebooks/report.ipynb from the project template (wavetrail new)",
        )
    try:
        nbformat.read(source, as_version=4)
    except Exception as err:  # nbformat raises several unrelated types for bad JSON
        raise BuildError(f"report notebook {source} cannot be read: {err}",
                         hint="restore it from the project template or fix its JSON") from None

    with tempfile.TemporaryDirectory(prefix="wavetrail-report-") as tmp:
        out = Path(tmp) / "executed.ipynb"
        try:
            nb = papermill.execute_notebook(
                str(source),
                str(out),
                parameters=parameters,
                kernel_name=KERNEL_NAME,
                language="python",
                progress_bar=False,
                request_save_on_cell_execute=False,
                cwd=str(cwd),
                kernel_manager_class=InterpreterKernelManager,
                record_timing=False,
                execution_timeout=timeout,
            )
        except PapermillExecutionError as err:
            executed = nbformat.read(out, as_version=4) if out.exists() else None
            kept = None
            if failed_copy is not None and executed is not None:
                from wavetrail._io import atomic_write_bytes
                from wavetrail.report.normalise import normalise_notebook, notebook_bytes

                kept = atomic_write_bytes(failed_copy, notebook_bytes(normalise_notebook(executed)))
            raise BuildError(
                f"report cell {_cell_name(executed, err)} failed: {err.ename}: {err.evalue}",
                hint=(f"the executed notebook with the error is at {kept}; " if kept else "")
                + "fix the result table or the notebook cell and run the build again",
            ) from None
    return nb


def _cell_name(nb, err) -> str:
    """``9 ("section-growth: report.growth()")``: the failed cell's position and what it runs.

    The position counts the cells of the executed notebook without the markers
    papermill adds on failure; the name is the cell's ``section-...`` tag, if any,
    and its first non-empty line.
    """
    src = getattr(err, "source", "") or ""
    first = next((line.strip() for line in src.splitlines() if line.strip()), "")
    position: int | str = "?"
    if nb is not None:
        cells = [c for c in nb.cells if not any(t.startswith("papermill-error") for t in c.metadata.get("tags", []))]
        for k, cell in enumerate(cells, start=1):
            failed = any(o.get("output_type") == "error" for o in cell.get("outputs", []))
            if cell.cell_type == "code" and failed:
                position = k
                named = [t for t in cell.metadata.get("tags", []) if t.startswith("section-")]
                if named:
                    first = f"{named[0]}: {first}"
                break
    if len(first) > 80:
        first = first[:77] + "..."
    return f'{position} ("{first}")'
