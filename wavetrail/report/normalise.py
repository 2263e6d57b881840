"""Normalising executed notebooks so that the same inputs give the same bytes.

An executed notebook carries things that change from run to run although the
results do not: execution timestamps and durations, the input and output paths
papermill saw, random cell ids, the papermill version. :func:`normalise_notebook`
removes or fixes them; :func:`notebook_bytes` writes the result the same way
every time. What stays is the source, the outputs and the kernel's language
information (the Python version is part of the environment and belongs there).
"""

from __future__ import annotations

import copy

import nbformat

from wavetrail.report.kernel import KERNEL_DISPLAY, KERNEL_NAME

#: notebook-level metadata keys that record a run rather than its result
VOLATILE_NOTEBOOK_KEYS = ("papermill", "widgets", "toc", "vscode", "colab")
#: cell-level metadata keys that record a run rather than its result
VOLATILE_CELL_KEYS = ("papermill", "execution", "collapsed", "scrolled", "jupyter", "ExecuteTime")


def normalise_notebook(nb: nbformat.NotebookNode) -> nbformat.NotebookNode:
    """A copy of ``nb`` without run-specific metadata and with stable cell ids.

    - notebook metadata: drops :data:`VOLATILE_NOTEBOOK_KEYS`; sets the kernelspec to
      wavetrail's kernel;
    - each cell: drops :data:`VOLATILE_CELL_KEYS` from its metadata, sets its id to
      ``cell-NN`` (position, 1-based), drops papermill's ``injected-parameters`` tag
      styling aside from the tag itself;
    - outputs: drops ``execution_count`` noise from display data (kept on results)
      and the transient ``display_id``.
    """
    nb = copy.deepcopy(nb)
    for key in VOLATILE_NOTEBOOK_KEYS:
        nb.metadata.pop(key, None)
    nb.metadata["kernelspec"] = {"name": KERNEL_NAME, "display_name": KERNEL_DISPLAY, "language": "python"}
    nb.nbformat_minor = max(int(nb.get("nbformat_minor", 5)), 5)
    width = max(2, len(str(len(nb.cells))))
    for index, cell in enumerate(nb.cells, start=1):
        for key in VOLATILE_CELL_KEYS:
            cell.metadata.pop(key, None)
        cell["id"] = f"cell-{index:0{width}d}"
        if cell.cell_type == "code":
            for output in cell.get("outputs", []):
                output.get("transient", {}).pop("display_id", None)
                if "transient" in output and not output["transient"]:
                    output.pop("transient")
    return nb


def notebook_bytes(nb: nbformat.NotebookNode) -> bytes:
    """The notebook as UTF-8 JSON, written the same way every time (LF, trailing newline)."""
    text = nbformat.writes(nb, version=4)
    if not text.endswith("\n"):
        text += "\n"
    return text.encode("utf-8")
