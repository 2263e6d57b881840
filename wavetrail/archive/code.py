"""The code a rebuild would run, compared with the workflow wavetrail ships.

A rebuild (``wavetrail verify --rebuild``) runs whatever ``workflow/`` of the
archive holds: the Snakefile, the rule modules, the scripts they call, the
report notebook and the profiles. A new project gets these files from
wavetrail itself (``workflow/rules/`` from the bundled rule modules, the rest
from the project template), so anything else in ``workflow/`` was written or
changed by the authors. :func:`compare_workflow` lists each added or changed
file with a short summary of its difference, so that a reviewer can read
exactly that code before running it. Files that could run as code outside
``workflow/`` (Python, shell, Snakemake modules, notebooks) are listed too,
since a changed Snakefile could include them.

The comparison is against the wavetrail installed on the reviewer's machine
(the reference the reviewer trusts); when the archive was packed by another
version, the report says so, because stock files of two versions may differ.
"""

from __future__ import annotations

import difflib
import hashlib
from dataclasses import dataclass, field
from pathlib import Path, PurePosixPath

#: file endings that can run as code when a workflow includes or calls them
CODE_SUFFIXES = (".py", ".smk", ".ipynb", ".sh", ".bash", ".r", ".R", ".pl", ".js")
#: folders never searched for code outside workflow/ (outputs and tool bookkeeping)
_NOT_CODE = ("results/", "workflow/")


@dataclass
class CodeChange:
    """One file of ``workflow/`` that is not stock: ``added`` or ``changed`` (or ``removed``)."""

    path: str
    change: str
    summary: str


@dataclass
class CodeReport:
    """What differs from the stock workflow."""

    changes: list = field(default_factory=list)
    outside: list = field(default_factory=list)
    stock_files: int = 0

    @property
    def stock(self) -> bool:
        return not [c for c in self.changes if c.change != "removed"] and not self.outside

    def headline(self) -> str:
        """One line for the verify summary."""
        if self.stock:
            return (f"code a rebuild would run: stock (workflow/ matches the {self.stock_files} files "
                    "wavetrail ships)")
        names = [c.path for c in self.changes if c.change != "removed"] + self.outside
        shown = ", ".join(names[:6]) + (f", ... ({len(names)} in all)" if len(names) > 6 else "")
        return (f"code a rebuild would run: {len(names)} file(s) added or changed by the authors ({shown}); "
                "read them before --rebuild")


def stock_workflow() -> dict[str, bytes]:
    """``{workflow/... path: bytes}`` of the workflow files the installed wavetrail writes into a project."""
    from wavetrail.resources import rules_dir, template_dir

    out: dict[str, bytes] = {}
    templates = [p for p in template_dir().iterdir() if p.is_dir() and p.name.startswith("{{")]
    for tpl in templates:
        base = tpl / "workflow"
        for f in sorted(base.rglob("*")) if base.is_dir() else []:
            if f.is_file() and "__pycache__" not in f.parts:
                out["workflow/" + f.relative_to(base).as_posix()] = f.read_bytes()
    rules = rules_dir()
    for f in sorted(rules.rglob("*")):
        rel = f.relative_to(rules).as_posix()
        if f.is_file() and "__pycache__" not in f.parts and not f.name.startswith(".") and not rel.endswith(".pyc"):
            out["workflow/rules/" + rel] = f.read_bytes()
    return out


def _summary(old: bytes | None, new: bytes) -> str:
    """"+A -B lines; first changes: ..." for text, size and sha256 for binary."""
    try:
        new_text = new.decode("utf-8").splitlines()
        old_text = old.decode("utf-8").splitlines() if old is not None else []
    except UnicodeDecodeError:
        return f"binary, {len(new)} bytes, sha256 {hashlib.sha256(new).hexdigest()[:12]}"
    diff = list(difflib.unified_diff(old_text, new_text, lineterm="", n=0))
    plus = [d[1:] for d in diff if d.startswith("+") and not d.startswith("+++")]
    minus = [d[1:] for d in diff if d.startswith("-") and not d.startswith("---")]
    shown = []
    for sign, lines in (("+", plus), ("-", minus)):
        for line in lines:
            if line.strip():
                shown.append(f"{sign} {line.strip()[:80]}")
            if len(shown) >= 3:
                break
    if old is None:
        return f"new file, {len(new_text)} lines; first: " + " | ".join(shown[:3])
    return f"+{len(plus)} -{len(minus)} lines; " + " | ".join(shown[:3])


def compare_workflow(payload: Path, files: list[str] | None = None) -> CodeReport:
    """Compare the archive's ``workflow/`` with the stock workflow of the installed wavetrail.

    Parameters
    ----------
    payload : Path
        The extracted payload (the project).
    files : list of str, optional
        Project-relative paths of every payload file (default: walk ``payload``).
        Only regular files are read.
    """
    from wavetrail.archive.schema import payload_file

    payload = Path(payload)
    if files is None:
        files = sorted(p.relative_to(payload).as_posix() for p in payload.rglob("*")
                       if p.is_file() and not p.is_symlink())
    stock = stock_workflow()
    report = CodeReport(stock_files=len(stock))
    present = set()
    for rel in files:
        if rel.startswith("workflow/"):
            present.add(rel)
            f = payload_file(payload, rel)
            if f is None:
                continue
            data = f.read_bytes()
            if rel not in stock:
                report.changes.append(CodeChange(rel, "added", _summary(None, data)))
            elif data != stock[rel]:
                report.changes.append(CodeChange(rel, "changed", _summary(stock[rel], data)))
        elif not rel.startswith(_NOT_CODE) and (PurePosixPath(rel).suffix in CODE_SUFFIXES
                                                or PurePosixPath(rel).name == "Snakefile"):
            report.outside.append(rel)
    for rel in sorted(set(stock) - present):
        report.changes.append(CodeChange(rel, "removed", "a stock file the archive does not hold"))
    return report
