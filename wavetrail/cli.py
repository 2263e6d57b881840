"""The ``wavetrail`` command: parse, call the library, print. No statistics here.

Exit codes: 0 success, 1 a finding that blocks (or a failed job), 2 bad usage.
A :class:`~wavetrail.errors.WavetrailError` is printed as one clean message;
``WAVETRAIL_DEBUG=1`` shows the traceback as well.
"""

from __future__ import annotations

import os
import sys
import warnings
from pathlib import Path
from typing import List, Optional

import typer
from rich.console import Console
from rich.table import Table

from wavetrail import __version__
from wavetrail.errors import WavetrailError

#: Python's own warning printer, for every warning but a renamed setting
_SHOW_WARNING = warnings.showwarning
console = Console(highlight=False)
err_console = Console(stderr=True, highlight=False)

app = typer.Typer(
    name="wavetrail",
    help="Reproducible multi-wave panel analysis, from raw waves to a verifiable reviewer archive.",
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
)
data_app = typer.Typer(help="Register raw data files and compare them with their registered hashes.",
                       no_args_is_help=True)
plan_app = typer.Typer(help="Freeze the analysis plan and list later deviations.", no_args_is_help=True)
app.add_typer(data_app, name="data")
app.add_typer(plan_app, name="plan")

ProjectArg = typer.Argument(Path("."), help="Project folder (default: the current folder).")


def print_table(df, title: str | None = None, max_rows: int = 60) -> None:
    """Print a DataFrame as a plain rich table (cells are text, never rich markup: ``[x]`` stays ``[x]``)."""
    from rich.text import Text

    table = Table(title=Text(title) if title else None, show_lines=False, header_style="bold")
    for col in df.columns:
        table.add_column(Text(str(col)), overflow="fold")
    for _, row in df.head(max_rows).iterrows():
        table.add_row(*[Text("" if _isna(v) else str(v)) for v in row.tolist()])
    console.print(table)
    if len(df) > max_rows:
        console.print(f"... {len(df) - max_rows} more rows")


def _wave_text(w) -> str:
    """A wave label as written (a whole-number float such as 2.0 shows as 2)."""
    if isinstance(w, float) and w.is_integer():
        return str(int(w))
    return str(w)


def _isna(v) -> bool:
    try:
        return v is None or (v != v)  # NaN
    except Exception:
        return False


def version_callback(value: bool):
    if value:
        console.print(f"wavetrail {__version__}")
        raise typer.Exit()


@app.callback()
def _root(
    version: bool = typer.Option(False, "--version", callback=version_callback, is_eager=True,
                                 help="Show the version and exit."),
):
    """wavetrail command line."""


@app.command()
def new(
    path: Path = typer.Argument(..., help="Folder to create (must not exist or be empty)."),
    title: Optional[str] = typer.Option(None, "--title", help="Project title."),
    author: Optional[str] = typer.Option(None, "--author", help="Author for the first commit and the docs."),
    data: Optional[List[Path]] = typer.Option(None, "--data", help="Raw data file(s) to copy in and draft a codebook from."),
    outcome: Optional[List[str]] = typer.Option(
        None, "--outcome",
        help="A scale or numeric repeated variable to model over the waves (repeatable); the first is "
             "also the forest's outcome."),
):
    """Scaffold a new panel-study project."""
    from wavetrail.drafting import GUESS_MARK, unchecked_guesses
    from wavetrail.project import new_project

    root = new_project(path, title=title, author=author, data=list(data or []), outcomes=list(outcome or []))
    console.print(f"created project {root}")
    console.print(_first_commit_note(root, author))
    codebook = root / "config" / "codebook.yaml"
    guesses = unchecked_guesses(codebook.read_text(encoding="utf-8")) if data else []
    if guesses:
        console.print(f"the drafted codebook holds {len(guesses)} guess(es) to check before a build "
                      f"(each marked '# {GUESS_MARK}'; delete the comment once checked):")
        for line, note in guesses:
            console.print(f"  config/codebook.yaml:{line}: {note}")
    console.print("next: review config/codebook.yaml and config/config.yaml, run `wavetrail check`, "
                  "then `wavetrail build`")


@app.command()
def demo(
    path: Path = typer.Argument(Path("demo-panel"), help="Folder for the demo project."),
    cores: int = typer.Option(2, "--cores", help="Cores for the build."),
):
    """Make the invented demo panel project and build it end to end."""
    from wavetrail.project import make_demo
    from wavetrail.build import build_project

    root = make_demo(path)
    console.print(f"demo project written to {root} (the planted truth: docs/demo-truth.md); building ...")
    result = build_project(root, cores=cores, progress=_progress)
    console.print(result.summary, markup=False)


@app.command()
def check(
    path: Path = ProjectArg,
    findings_to: Optional[Path] = typer.Option(
        None, "--findings-to", help="Also write the full findings table (CSV) to this file."),
):
    """Check the settings and the raw data against the codebook and print the findings."""
    from wavetrail._io import write_table
    from wavetrail.project import check_project

    findings = check_project(path)
    for _, f in findings.iterrows():
        wave = "" if _isna(f["wave"]) or str(f["wave"]) == "" else f", wave {_wave_text(f['wave'])}"
        console.print(f"{f['severity']:<7} {f['check']}: {f['variable']}{wave} ({f['count']})", markup=False)
        console.print(f"        {f['message']}", markup=False, soft_wrap=True)
        if not _isna(f["rows"]) and str(f["rows"]):
            console.print(f"        rows: {f['rows']}", markup=False, soft_wrap=True)
    if findings_to is not None:
        write_table(findings_to, findings)
        console.print(f"findings written to {findings_to}")
    n_err = int((findings["severity"] == "error").sum()) if len(findings) else 0
    console.print(f"{len(findings)} findings, {n_err} errors")
    raise typer.Exit(1 if n_err else 0)


@app.command(context_settings={"allow_extra_args": True, "ignore_unknown_options": True})
def build(
    ctx: typer.Context,
    path: Path = ProjectArg,
    cores: int = typer.Option(1, "--cores", "-c", help="Cores Snakemake may use."),
    profile: Optional[str] = typer.Option(None, "--profile", help="Profile under workflow/profiles/ (e.g. slurm)."),
):
    """Rebuild every out-of-date output with Snakemake (extra arguments after -- go to Snakemake)."""
    from wavetrail.build import build_project

    extra = list(ctx.args)
    if str(path).startswith("-"):
        # `wavetrail build -- --dry-run`: after `--` the first word fills the path argument; it is
        # a Snakemake option, not a folder, so the project is the current folder
        extra = [str(path), *extra]
        path = Path(".")
    result = build_project(path, cores=cores, profile=profile, extra=extra, progress=_progress)
    console.print(result.summary, markup=False)


def _progress(line: str) -> None:
    """Print one progress line of a build."""
    console.print(line, markup=False)


def _first_commit_note(root: Path, author: Optional[str]) -> str:
    """Say who the first commit of a new project was made as."""
    import git

    with git.Repo(root) as repo:
        head = repo.head.commit
        who = f"{head.author.name} <{head.author.email}>"
    if author:
        return f"first commit {head.hexsha[:10]} by {who} (from --author)"
    from wavetrail.project import DEFAULT_AUTHOR

    if (head.author.name, head.author.email) == DEFAULT_AUTHOR:
        return (f"first commit {head.hexsha[:10]} by {who}: no --author was given and git has no "
                "user.name/user.email; set them (git config user.name ...) for later commits")
    return f"first commit {head.hexsha[:10]} by {who} (git's configured identity)"


def _earlier_spelling(old: str, new: str) -> None:
    """Say on stderr that an option or command was used by its earlier name (accepted this version only)."""
    err_console.print(f"note: {old} is now {new}; the earlier spelling is accepted this version only",
                      markup=False)


def _project_option(path: Path, project: Optional[Path], command: str) -> Path:
    """The project folder: the positional PATH, or the earlier ``-p/--project`` option with a note."""
    if project is None:
        return path
    _earlier_spelling("-p/--project", f"the positional PATH of `wavetrail {command}`")
    return project


EarlierProject = typer.Option(None, "--project", "-p", hidden=True)


@data_app.command("register")
def data_register(
    files: List[Path] = typer.Argument(..., help="Raw data file(s) under data/ of a project; the project is "
                                                 "the folder that holds that data/."),
    project: Optional[Path] = EarlierProject,
):
    """Register (or re-register) the current bytes of raw data files in data/SHA256SUMS."""
    from wavetrail.registry import project_of, register_files

    root = project_of(files[0]) if project is None else _project_option(Path("."), project, "data register")
    for line in register_files(root, files):
        console.print(line, markup=False)


@data_app.command("compare")
def data_compare(path: Path = ProjectArg, project: Optional[Path] = EarlierProject):
    """Compare the raw data files present with their registered hashes (exit 1 if any differs)."""
    from wavetrail.registry import registry_status

    status = registry_status(_project_option(path, project, "data compare"))
    print_table(status, title="Raw data")
    raise typer.Exit(1 if (status["state"] != "ok").any() else 0)


@data_app.command("add", hidden=True)
def data_add_earlier(files: List[Path] = typer.Argument(...), project: Optional[Path] = EarlierProject):
    _earlier_spelling("`wavetrail data add`", "`wavetrail data register`")
    data_register(files, project)


@data_app.command("status", hidden=True)
def data_status_earlier(path: Path = ProjectArg, project: Optional[Path] = EarlierProject):
    _earlier_spelling("`wavetrail data status`", "`wavetrail data compare`")
    data_compare(path, project)


@app.command()
def ledger(
    path: Path = ProjectArg,
    drift: bool = typer.Option(False, "--drift", help="List files whose bytes or inputs changed since recorded; exit 1 if any."),
    as_json: bool = typer.Option(False, "--json", help="Print JSON instead of a table."),
):
    """List every output with its step, inputs, seed, versions and revision."""
    from wavetrail import ledger as ledger_mod

    if drift:
        table = ledger_mod.drift_table(path)
        if as_json:
            console.print_json(table.to_json(orient="records"))
        elif len(table):
            print_table(table[["file", "problem", "step", "detail"]], title="Drift", max_rows=500)
            console.print(f"{len(table)} file(s) no longer match the ledger; `wavetrail build` reruns what is "
                          "stale (a hand-edited output is rebuilt only when its job reruns)")
        else:
            console.print("no drift: every output matches its ledger record")
        raise typer.Exit(1 if len(table) else 0)
    table = ledger_mod.ledger_table(path)
    if as_json:
        console.print_json(table.to_json(orient="records"))
    elif not len(table):
        console.print("no ledger records yet (results/ledger/ is empty); run `wavetrail build`")
    else:
        shown = table.copy()
        wild = shown["wildcards"].fillna("").astype(str)
        shown["step"] = shown["step"].astype(str) + wild.map(lambda w: f" [{w}]" if w else "")
        shown["inputs"] = shown["inputs"].fillna("").astype(str).str.replace("; ", "\n", regex=False)
        shown["finished"] = shown["finished"].astype(str).str.replace("T", " ", regex=False).str.slice(0, 16)
        print_table(shown.drop(columns=["wildcards"]), title="Ledger", max_rows=500)


@plan_app.command("freeze")
def plan_freeze(
    path: Path = ProjectArg,
    replace: bool = typer.Option(False, "--replace", help="Freeze again over an existing plan (the old one stays in git history)."),
    project: Optional[Path] = EarlierProject,
):
    """Record the hashes of config and codebook as the analysis plan."""
    from wavetrail.plan import freeze_plan

    console.print(freeze_plan(_project_option(path, project, "plan freeze"), replace=replace), markup=False)


@plan_app.command("diff")
def plan_diff(path: Path = ProjectArg, project: Optional[Path] = EarlierProject):
    """List every change to config and codebook since the plan was frozen."""
    from wavetrail.plan import plan_changes

    changes = plan_changes(_project_option(path, project, "plan diff"))
    if len(changes):
        print_table(changes, title="Deviations from the frozen plan")
    else:
        console.print("no deviations from the frozen plan")


@app.command()
def pack(
    path: Path = ProjectArg,
    raw: str = typer.Option("exclude", "--raw", help="Raw data in the archive: include (the files), exclude "
                                                    "(hashes only) or stand-in (synthetic rows in their place)."),
    output: Optional[Path] = typer.Option(None, "-o", "--output", help="Archive file (.zip or .tar.gz)."),
    allow_dirty: bool = typer.Option(False, "--allow-dirty", help="Pack even if the git tree has uncommitted changes."),
    allow_disclosure: bool = typer.Option(False, "--allow-disclosure", help="Pack even if the disclosure check finds something."),
    min_cell: Optional[int] = typer.Option(None, "--min-cell", help="Smallest count of people a packed file may show (default: report.min_cell of the project, else 5)."),
    data: Optional[str] = typer.Option(None, "--data", hidden=True),
):
    """Write the reviewer archive (BagIt bag with an RO-Crate)."""
    from wavetrail.archive import pack_project

    if data is not None:
        _earlier_spelling("`wavetrail pack --data`", "`--raw`")
        raw = data
    if raw not in ("include", "exclude", "stand-in"):
        raise typer.BadParameter("--raw must be include, exclude or stand-in")
    notes: list = []
    try:
        out = pack_project(path, raw=raw, output=output, allow_dirty=allow_dirty,
                           allow_disclosure=allow_disclosure, min_cell=min_cell, notes=notes)
    finally:
        for line in notes:
            console.print(line, markup=False)
    console.print(f"archive written: {out}", markup=False)


@app.command()
def verify(
    archive: Path = typer.Argument(..., help="Archive made by `wavetrail pack`."),
    rebuild: bool = typer.Option(False, "--rebuild", help="Also rerun the workflow in a temporary copy (runs the authors' code)."),
    as_json: bool = typer.Option(False, "--json", help="Print the full report as JSON instead of a table."),
    json_to: Optional[Path] = typer.Option(None, "--json-to", help="Also write the full report as JSON to this file."),
    rtol: float = typer.Option(1e-6, "--rtol", help="Relative tolerance for numeric tables in --rebuild."),
):
    """Verify a reviewer archive: integrity, provenance closure, optionally a rebuild."""
    from wavetrail.archive import REBUILD_WARNING, verify_archive

    if rebuild:
        err_console.print(f"warning: {REBUILD_WARNING}")
    report = verify_archive(archive, rebuild=rebuild, json_path=json_to, rtol=rtol,
                            progress=(lambda line: err_console.print(line, markup=False)) if as_json else
                            (lambda line: console.print(line, markup=False)))
    if as_json:
        import json

        console.print_json(json.dumps(report.to_dict()))
    else:
        print_table(report.table, title="Verification")
        console.print(report.summary, markup=False)
    raise typer.Exit(0 if report.ok else 1)


def _show_renamed(message, category, filename, lineno, file=None, line=None):
    """Print a renamed-setting warning as one plain note (no source line of wavetrail's code)."""
    from wavetrail.config import SettingRenamed

    if issubclass(category, SettingRenamed):
        err_console.print(f"note: {message}", markup=False, soft_wrap=True)
    else:
        _SHOW_WARNING(message, category, filename, lineno, file, line)


def main(argv: list[str] | None = None) -> int:
    """Console entry point: run the app, turn WavetrailError into a message and exit code."""
    global console, err_console
    # fresh consoles per call, so the width (terminal or COLUMNS) is the one in force now
    console, err_console = Console(highlight=False), Console(stderr=True, highlight=False)
    with warnings.catch_warnings():
        warnings.showwarning = _show_renamed
        return _main(argv)


def _main(argv: list[str] | None) -> int:
    try:
        code = app(args=argv, standalone_mode=False)
    except WavetrailError as err:
        from rich.text import Text

        err_console.print(Text.assemble(("error: ", "bold red"), str(err)), soft_wrap=True)
        if os.environ.get("WAVETRAIL_DEBUG"):
            raise
        return err.exit_code
    except typer.Exit as ex:
        return ex.exit_code
    except typer.Abort:
        err_console.print("aborted")
        return 1
    except Exception as ex:  # click usage errors (typer may ship its own copy of click)
        kinds = {c.__name__ for c in type(ex).__mro__}
        if "ClickException" in kinds and hasattr(ex, "show"):
            ex.show()
            return 2
        if "Exit" in kinds and hasattr(ex, "exit_code"):
            return ex.exit_code
        raise
    return code if isinstance(code, int) else 0


if __name__ == "__main__":
    sys.exit(main())
