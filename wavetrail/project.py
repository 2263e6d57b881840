"""Projects: scaffold a new one, make the demo, run the quick checks, find the root.

A wavetrail project is a folder holding ``config/config.yaml`` and
``workflow/Snakefile`` (the layout is described in ``docs/project-layout.md``).
:func:`new_project` renders the bundled cookiecutter template without prompts,
copies the rule modules into ``workflow/rules/``, writes ``.gitignore``, copies and
registers raw data, drafts a codebook from it, and makes the first git commit.
"""

from __future__ import annotations

import datetime as _dt
import json
import os
import shutil
import tempfile
from pathlib import Path
from typing import Callable, Iterable

from wavetrail._io import atomic_write_text
from wavetrail.errors import DataError, ProjectError

__all__ = [
    "DEFAULT_AUTHOR",
    "GITIGNORE",
    "ProjectError",
    "check_project",
    "find_project",
    "is_project",
    "make_demo",
    "new_project",
    "outcome_choices",
]

#: name and e-mail used for the first commit when neither --author nor git gives one
DEFAULT_AUTHOR = ("wavetrail", "wavetrail@localhost")

#: the files whose presence makes a folder a wavetrail project
MARKERS = ("config/config.yaml", "workflow/Snakefile")

GITIGNORE = """\
# What git leaves out of this wavetrail project.

# Raw data are kept private by default: git tracks only their hashes (data/SHA256SUMS).
# When the data are shareable, delete the next line (or add a line
# "!data/raw/<file>" after it) and commit the files.
data/raw/

# Snakemake's own bookkeeping and the job logs (rebuilt by every run).
.snakemake/
logs/

# Intermediate forest shards; the merged results/forest/forest.json is kept.
results/forest/shards/

# The stored panel: the check step's typed copy of the raw rows, read by the later steps.
# It is row-level data like data/raw/, so it stays out of git with them (its hash is in
# the ledger; `wavetrail build` writes it again from the raw files).
results/checks/panel.parquet

# Python and notebook leftovers.
__pycache__/
*.pyc
.ipynb_checkpoints/
"""


# --------------------------------------------------------------------------- finding


def is_project(path: str | Path) -> bool:
    """True when ``path`` holds a wavetrail project (config and Snakefile)."""
    path = Path(path)
    return all((path / marker).is_file() for marker in MARKERS)


def find_project(path: str | Path = ".") -> Path:
    """The root of the project that holds ``path`` (the folder itself or a parent).

    Raises
    ------
    ProjectError
        When neither ``path`` nor any parent is a wavetrail project.
    """
    start = Path(path).expanduser()
    if not start.exists():
        raise ProjectError(f"{start} does not exist",
                           hint="pass the folder of a wavetrail project, or create one with `wavetrail new PATH`")
    start = start.resolve()
    if start.is_file():
        start = start.parent
    for folder in (start, *start.parents):
        if is_project(folder):
            return folder
    missing = [m for m in MARKERS if not (start / m).is_file()]
    raise ProjectError(
        f"{start} is not a wavetrail project (no {' or '.join(missing)} here or in a parent folder)",
        hint="run the command inside a project, pass its folder, or create one with `wavetrail new PATH`",
    )


# --------------------------------------------------------------------------- new


def new_project(
    path: str | Path,
    title: str | None = None,
    author: str | None = None,
    data: Iterable[str | Path] = (),
    *,
    seed: int = 20261202,
    outcomes: Iterable[str] = (),
    populate: Callable[[Path], None] | None = None,
    commit_message: str = "New wavetrail project",
) -> Path:
    """Scaffold a project at ``path`` and make its first git commit.

    Parameters
    ----------
    path
        Folder to create; it must not exist or be empty.
    title, author
        Written into the project's README and settings. ``author`` ("Name <email>" or
        "Name") is also the author of the first commit; without it the commit uses
        git's configured identity if there is one, else :data:`DEFAULT_AUTHOR`.
    data
        Raw data files to copy into ``data/raw/``, register in ``data/SHA256SUMS`` and
        draft ``config/codebook.yaml`` from.
    seed
        Master seed written into ``config/config.yaml``.
    outcomes
        Growth outcomes: names of scales or of numeric variables measured at
        several waves in the drafted codebook. They become ``growth.outcomes``
        and the first becomes ``forest.outcome``. Without them the settings name
        every scale (the forest splits the first); when the codebook has no
        scale, growth fits nothing and the forest is off, and a comment in
        ``config/config.yaml`` lists the numeric repeated variables to choose
        from. Either way the settings never stop a build half way.
    populate
        Called with the project root after scaffolding and before the commit (the demo
        uses it to write its data and settings).

    Returns
    -------
    Path
        The project root (absolute).

    Raises
    ------
    ProjectError
        The target is not empty or cannot be created, or an outcome is not a
        scale or numeric repeated variable of the drafted codebook.
    DataError
        A data file is missing or two have the same name.
    """
    target = Path(path).expanduser().resolve()
    if target.exists() and not target.is_dir():
        raise ProjectError(f"{target} exists and is a file", hint="choose a new folder name")
    if target.is_dir() and any(target.iterdir()):
        raise ProjectError(
            f"{target} is not empty; wavetrail new only writes into a new or empty folder",
            hint="choose a new folder name, or empty that folder first",
        )
    sources = [Path(p).expanduser() for p in data]
    names = set()
    for src in sources:
        if not src.is_file():
            raise DataError(f"data file {src} does not exist", hint="check the path given to --data")
        if src.name in names:
            raise DataError(f"two data files are called {src.name}", hint="rename one of them before adding it")
        names.add(src.name)

    # draft first: a wrong --outcome is refused before anything is written
    draft, codebook = None, None
    if sources:
        from wavetrail.codebook import draft_codebook, parse_codebook

        draft = draft_codebook([str(src) for src in sources])
        codebook = parse_codebook(draft, source="config/codebook.yaml (drafted)", allow_guesses=True)
    outcome_context = _outcome_settings(codebook, list(outcomes))

    title = title or target.name.replace("-", " ").replace("_", " ").strip().capitalize() or "Panel study"
    name, email = _parse_author(author)
    data_list = [f"data/raw/{src.name}" for src in sources] or ["data/raw/panel.csv"]
    context = {
        "project_slug": target.name,
        "title": title,
        "author": name if author else "the authors",
        "year": str(_dt.date.today().year),
        "seed": str(int(seed)),
        "data": json.dumps(data_list),
        **outcome_context,
    }
    created_folder = not target.exists()
    target.parent.mkdir(parents=True, exist_ok=True)
    try:
        _render_template(target, context)
        _install_rules(target)
        (target / ".gitignore").write_text(GITIGNORE, encoding="utf-8")
        for sub in ("data/raw", "results", "logs"):
            (target / sub).mkdir(parents=True, exist_ok=True)
        if sources:
            copied = []
            for src in sources:
                dest = target / "data" / "raw" / src.name
                shutil.copy2(src, dest)
                copied.append(dest)
            _register(target, copied)
            atomic_write_text(target / "config" / "codebook.yaml", draft)
        if populate is not None:
            populate(target)
        _first_commit(target, author=(name, email) if author else None, message=commit_message)
    except BaseException:
        if created_folder:
            shutil.rmtree(target, ignore_errors=True)
        else:  # the folder was empty before: empty it again
            for child in target.iterdir():
                shutil.rmtree(child, ignore_errors=True) if child.is_dir() else child.unlink()
        raise
    return target


def _parse_author(author: str | None) -> tuple[str, str]:
    if not author:
        return DEFAULT_AUTHOR
    author = author.strip()
    if "<" in author and author.endswith(">"):
        name, email = author[:-1].split("<", 1)
        return name.strip() or DEFAULT_AUTHOR[0], email.strip() or DEFAULT_AUTHOR[1]
    return author, DEFAULT_AUTHOR[1]


def _render_template(target: Path, context: dict) -> None:
    """Render the cookiecutter template into ``target`` without prompts or a replay file."""
    from cookiecutter.main import cookiecutter

    from wavetrail.resources import template_dir

    with tempfile.TemporaryDirectory(prefix=".wavetrail-new-", dir=target.parent) as tmp:
        tmp = Path(tmp)
        settings = tmp / "cookiecutter-settings.yaml"
        # keep cookiecutter's replay and cache folders out of the user's home
        settings.write_text(
            f"replay_dir: {json.dumps(str(tmp / 'replay'))}\ncookiecutters_dir: {json.dumps(str(tmp / 'cache'))}\n",
            encoding="utf-8",
        )
        out = tmp / "out"
        out.mkdir()
        try:
            rendered = cookiecutter(
                str(template_dir()),
                no_input=True,
                extra_context=context,
                output_dir=str(out),
                config_file=str(settings),
                overwrite_if_exists=False,
            )
        except Exception as err:  # a broken template is our bug, but say where
            raise ProjectError(f"could not render the project template: {err}",
                               hint="reinstall wavetrail; if it persists, report it") from err
        rendered = Path(rendered)
        target.mkdir(exist_ok=True)
        for child in rendered.iterdir():
            shutil.move(str(child), str(target / child.name))


def _install_rules(target: Path) -> None:
    from wavetrail.resources import rules_dir

    shutil.copytree(
        rules_dir(),
        target / "workflow" / "rules",
        ignore=shutil.ignore_patterns("__pycache__", "*.pyc", ".*"),
        dirs_exist_ok=True,
    )


def _register(target: Path, files: list[Path]) -> None:
    try:
        from wavetrail.registry import register_files
    except ImportError:  # the registry module is not installed: write sha256sum lines ourselves
        from wavetrail._io import atomic_write_text, sha256_file

        lines = sorted(f"{sha256_file(f)}  {f.relative_to(target / 'data').as_posix()}\n" for f in files)
        atomic_write_text(target / "data" / "SHA256SUMS", "".join(lines))
        return
    register_files(target, files, commit=False)


def outcome_choices(codebook) -> tuple[list[str], list[str]]:
    """(scales, numeric variables measured at two or more waves) of a codebook: the names
    that ``growth.outcomes`` and ``forest.outcome`` may take."""
    waves = list(codebook.study.waves)
    scales = list(codebook.scales)
    measures = []
    for var in codebook.data_variables():
        if not var.numeric or var.identifier:
            continue
        n = len(var.waves) if var.waves is not None else len(waves)
        if n >= 2:
            measures.append(var.name)
    return scales, measures


def _outcome_settings(codebook, outcomes: list[str]) -> dict:
    """Cookiecutter values of growth.outcomes, forest.outcome, forest.enabled and a note.

    Named outcomes are checked against the codebook (a scale, or a numeric variable
    measured at two or more waves). With none named: every scale, the forest on the
    first; with no scale either: nothing fitted, forest off, and the candidates listed
    in a comment, so that the settings never stop a build half way.
    """
    scales, measures = outcome_choices(codebook) if codebook is not None else ([], [])
    choices = scales + [m for m in measures if m not in scales]
    if outcomes and codebook is None:
        raise ProjectError("--outcome needs --data: an outcome is checked against the codebook drafted from the data",
                           hint="give the data file with --data, or set growth.outcomes in config/config.yaml later")
    seen = set()
    for name in outcomes:
        if name in seen:
            raise ProjectError(f"--outcome {name} is given twice", hint="name each outcome once")
        seen.add(name)
        if name not in choices:
            listed = ", ".join(choices) if choices else "none (the drafted codebook has no numeric repeated variable)"
            raise ProjectError(
                f"--outcome {name}: not a scale or a numeric variable measured at two or more waves "
                "in the codebook drafted from the data",
                hint=f"choose among: {listed}")
    note = ""
    if outcomes:
        growth, forest, enabled = list(outcomes), outcomes[0], True
        if not codebook.first_wave_predictors(outcomes[0]):
            enabled = False
            note = (f"# The forest is off: the data hold no first-wave variable other than {outcomes[0]}\n"
                    "# itself to screen as a predictor of who develops differently. Add predictors to the\n"
                    "# codebook (measured at the first wave), then set forest.enabled: true.")
    elif scales:
        growth, forest, enabled = [], scales[0], True
        note = f"# No outcome was named: growth models every scale; the forest splits {scales[0]}."
    else:
        growth, forest, enabled = [], None, False
        if measures:
            note = ("# No outcome chosen yet, so growth fits nothing and the forest is off. Numeric\n"
                    "# variables measured at several waves, to check and choose from (name them under\n"
                    "# growth.outcomes, then set forest.enabled: true; forest.outcome null = the first):\n"
                    + "\n".join(f"#   {m}" for m in measures))
        else:
            note = ("# No outcome chosen yet, so growth fits nothing and the forest is off: name a scale\n"
                    "# or a numeric variable measured at several waves under growth.outcomes.")
    return {
        "outcomes": json.dumps(growth),
        "forest_outcome": json.dumps(forest) if forest is not None else "null",
        "forest_enabled": "true" if enabled else "false",
        "outcome_note": note,
    }


def _first_commit(target: Path, author: tuple[str, str] | None, message: str) -> str:
    """git init + one commit of everything not ignored; works with no git identity set."""
    import git

    try:
        repo = git.Repo.init(target, initial_branch="main")
    except git.GitCommandError:  # git older than 2.28
        repo = git.Repo.init(target)
    try:
        if author is None:
            author = _git_identity(repo) or DEFAULT_AUTHOR
        actor = git.Actor(*author)
        repo.git.add(A=True)
        commit = repo.index.commit(message, author=actor, committer=actor)
        return commit.hexsha
    finally:
        repo.close()


def _git_identity(repo) -> tuple[str, str] | None:
    reader = repo.config_reader()
    try:
        name = reader.get_value("user", "name", default="")
        email = reader.get_value("user", "email", default="")
    except Exception:
        return None
    if name and email:
        return str(name), str(email)
    return None


# --------------------------------------------------------------------------- demo


def make_demo(path: str | Path = "demo-panel", *, trees: int | None = None, holdout: float | None = None) -> Path:
    """Write the invented demo project (simulated panel, its settings and its truth).

    The data are generated by the seeded simulator in ``examples/demo_panel/``; the
    planted effects are written to ``docs/demo-truth.md`` in the project.

    Parameters
    ----------
    path
        Folder to create (must not exist or be empty).
    trees
        Override the demo's forest size (tests use fewer trees).
    holdout
        Override the share of people the demo keeps out of the forest (0 = none).

    Returns
    -------
    Path
        The project root; build it with :func:`wavetrail.build.build_project`.
    """
    demo = _demo_module()

    def populate(root: Path) -> None:
        demo.write_demo(root, trees=trees, holdout=holdout)

    return new_project(
        path,
        title="Sleep over adolescence (invented demo panel)",
        author=None,
        seed=demo.SEED,
        populate=populate,
        commit_message="Demo panel project (simulated data)",
    )


def _demo_module():
    """Import examples/demo_panel/simulate.py from the checkout or the wheel."""
    import importlib.util

    from wavetrail.resources import examples_dir

    file = examples_dir() / "demo_panel" / "simulate.py"
    spec = importlib.util.spec_from_file_location("wavetrail_demo_panel", file)
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


# --------------------------------------------------------------------------- check


def check_project(path: str | Path = "."):
    """Run the codebook checks on the raw data of a project, without Snakemake.

    Returns
    -------
    pandas.DataFrame
        The findings table (variable, wave, check, severity, count, rows, message).

    Raises
    ------
    ProjectError, ConfigError, CodebookError, DataError
        With the file and line or key at fault.
    """
    from wavetrail.checks import run_checks
    from wavetrail.codebook import load_codebook
    from wavetrail.config import load_config

    from wavetrail.build import check_settings
    from wavetrail.config import CONFIG_FILE, read_yaml

    root = find_project(path)
    config = load_config(root)
    _, lines = read_yaml(root / CONFIG_FILE)
    files = [root / f for f in config["data"]]
    for f in files:
        if not f.is_file():
            raise DataError(f"data file {f.relative_to(root).as_posix()} (listed under `data` in config/config.yaml) does not exist",
                            hint="copy the file there, or correct the path in config/config.yaml")
    codebook = load_codebook(root / config["codebook"])
    check_settings(root, config, lines)
    return run_checks([str(f) for f in files], codebook)
