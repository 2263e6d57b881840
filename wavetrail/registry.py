"""The data registry: ``data/SHA256SUMS`` holds the accepted hash of every raw data file.

The file is in sha256sum format — ``<64 hex digits><two spaces><path relative to
data/>`` — so ``cd data && sha256sum -c SHA256SUMS`` checks it without
wavetrail. Lines are sorted by path. The first workflow step
(:func:`wavetrail.stages.provenance.confirm_raw_hashes`) refuses to run when a raw
file's bytes differ from its registered hash; ``wavetrail data register FILE``
accepts the new bytes and, in a git repository, commits the registry.
"""

from __future__ import annotations

import os
import re
from pathlib import Path, PurePosixPath

import pandas as pd
import yaml

from wavetrail._io import atomic_write_text, sha256_file
from wavetrail.errors import RegistryError

#: registry location, relative to the project root
REGISTRY_PATH = "data/SHA256SUMS"
#: neutral identity for commits when git has none configured
NEUTRAL_AUTHOR = ("wavetrail", "wavetrail@localhost")

_LINE = re.compile(r"^(?P<hex>[0-9a-fA-F]{64}) [ *](?P<path>.+)$")
STATUS_COLUMNS = ["file", "state", "sha256", "actual_sha256", "size"]


def _hint_add(rel: str) -> str:
    return f"if the new bytes are intended, accept them with `wavetrail data register {rel}`"


def project_of(file: str | Path) -> Path:
    """The project a data file belongs to: the nearest folder above it whose ``data/`` holds it.

    A folder counts when it has ``config/config.yaml`` or ``data/SHA256SUMS``; without
    one (or for a file outside any ``data/``) the current folder is the project, and
    :func:`register_files` then says why the file cannot be registered there.
    """
    here = Path(os.path.abspath(file))
    for parent in here.parents:
        if parent.name == "data" and ((parent.parent / "config" / "config.yaml").is_file()
                                      or (parent / "SHA256SUMS").is_file()):
            return parent.parent
    return Path(".")


def registry_file(project: str | Path) -> Path:
    return Path(project) / REGISTRY_PATH


def read_registry(project: str | Path, registry: str | Path | None = None) -> dict[str, str]:
    """Registered hashes: ``{project-relative POSIX path: hex}`` (empty when there is no registry).

    Raises
    ------
    RegistryError
        On a malformed line (names the file and line number) or a path that
        leaves ``data/``.
    """
    project = Path(project)
    path = registry_file(project) if registry is None else _abs(project, registry)
    if not path.exists():
        return {}
    entries: dict[str, str] = {}
    for number, raw in enumerate(path.read_text(encoding="utf-8").splitlines(), start=1):
        if not raw.strip():
            continue
        match = _LINE.match(raw)
        if not match:
            raise RegistryError(
                f"{REGISTRY_PATH}, line {number}: expected '<sha256>  <path>', found {raw!r}",
                hint="fix the line by hand or re-register the file with `wavetrail data register data/raw/<file>`",
            )
        rel = PurePosixPath(match["path"])
        if rel.is_absolute() or ".." in rel.parts:
            raise RegistryError(f"{REGISTRY_PATH}, line {number}: path {match['path']!r} leaves data/",
                                hint="paths in the registry are relative to data/, e.g. raw/panel.csv")
        entries[str(PurePosixPath("data") / rel)] = match["hex"].lower()
    return entries


def write_registry(project: str | Path, entries: dict[str, str]) -> Path:
    """Write ``entries`` (project-relative paths under data/) atomically, sorted by path."""
    lines = []
    for rel in sorted(entries):
        inner = PurePosixPath(rel).relative_to("data")
        lines.append(f"{entries[rel]}  {inner}")
    return atomic_write_text(registry_file(project), "".join(line + "\n" for line in lines))


def _abs(project: Path, p: str | Path) -> Path:
    p = Path(p)
    return p if p.is_absolute() else project / p


def project_relative(project: str | Path, file: str | Path, *, must_exist: bool = True) -> str:
    """The POSIX path of ``file`` relative to the project, checked to lie under ``data/``.

    A relative ``file`` is taken relative to the current folder when it exists
    there, otherwise relative to the project.
    """
    project = Path(project).resolve()
    file = Path(file)
    if file.is_absolute():
        candidate = file
    elif Path.cwd().joinpath(file).exists() or not project.joinpath(file).exists():
        candidate = Path.cwd() / file
    else:
        candidate = project / file
    candidate = Path(os.path.abspath(candidate))
    if must_exist and not candidate.is_file():
        raise RegistryError(f"no such data file: {file}", hint="give the path of a file under data/ of the project")
    try:
        rel = candidate.resolve().relative_to(project) if candidate.exists() else candidate.relative_to(project)
    except ValueError:
        raise RegistryError(
            f"{file} is not inside the project {project}",
            hint="copy the raw file into data/raw/ of the project first, then register it",
        ) from None
    rel_posix = PurePosixPath(rel.as_posix())
    if rel_posix.parts[:1] != ("data",) or str(rel_posix) == REGISTRY_PATH:
        raise RegistryError(f"{rel_posix} is not a data file under data/",
                            hint="raw data files live under data/ (usually data/raw/)")
    return str(rel_posix)


def register_files(project: str | Path, files, *, commit: bool = True) -> list[str]:
    """Register (or re-register) the current bytes of ``files`` in ``data/SHA256SUMS``.

    Parameters
    ----------
    project : path
        Project root.
    files : iterable of paths
        Raw data files under ``data/``.
    commit : bool
        Commit ``data/SHA256SUMS`` when the project is a git repository and the
        registry changed (only that file; a neutral author is used when git has
        no identity).

    Returns
    -------
    list of str
        One line per file (registered / updated with both hashes / unchanged)
        and one about the commit, for the CLI to print.
    """
    project = Path(project)
    if not project.is_dir():
        raise RegistryError(f"no project folder at {project}", hint="give the path of a file under data/ of a project")
    entries = read_registry(project)
    lines: list[str] = []
    changed = False
    for file in files:
        rel = project_relative(project, file)
        digest = sha256_file(project / rel)
        size = (project / rel).stat().st_size
        old = entries.get(rel)
        if old == digest:
            lines.append(f"unchanged  {rel}  sha256 {digest}")
            continue
        entries[rel] = digest
        changed = True
        if old is None:
            lines.append(f"registered {rel}  sha256 {digest}  ({size} bytes)")
        else:
            lines.append(f"updated    {rel}  sha256 {old} -> {digest}  ({size} bytes)")
    if changed:
        write_registry(project, entries)
        if commit:
            sha = commit_files(project, [REGISTRY_PATH], "Register raw data hashes in data/SHA256SUMS")
            if sha:
                lines.append(f"committed  {REGISTRY_PATH} ({sha[:10]})")
    return lines


def _configured_data(project: Path) -> list[str]:
    cfg = project / "config" / "config.yaml"
    try:
        data = (yaml.safe_load(cfg.read_text(encoding="utf-8")) or {}).get("data", [])
    except (OSError, yaml.YAMLError, AttributeError):
        return []
    if isinstance(data, str):
        data = [data]
    out = []
    for item in data if isinstance(data, list) else []:
        p = PurePosixPath(str(item).replace("\\", "/"))
        if not p.is_absolute() and ".." not in p.parts:
            out.append(str(p))
    return out


def registry_status(project: str | Path) -> pd.DataFrame:
    """Registered versus present raw data files.

    Covers every registered file, every file under ``data/raw/`` and every file
    named by ``data:`` in config/config.yaml.

    Returns
    -------
    DataFrame
        Columns ``file, state, sha256, actual_sha256, size`` sorted by file;
        ``state`` is ``ok``, ``changed`` (bytes differ from the registered hash),
        ``missing`` (registered, not present) or ``unregistered`` (present or
        configured, not registered).
    """
    project = Path(project)
    entries = read_registry(project)
    names = set(entries) | set(_configured_data(project))
    raw = project / "data" / "raw"
    if raw.is_dir():
        for p in raw.rglob("*"):
            if p.is_file() and not p.name.startswith("."):
                names.add(p.relative_to(project).as_posix())
    rows = []
    for rel in sorted(names):
        path = project / rel
        present = path.is_file()
        actual = sha256_file(path) if present else None
        registered = entries.get(rel)
        if registered is None:
            state = "unregistered" if present else "missing"
        elif not present:
            state = "missing"
        else:
            state = "ok" if actual == registered else "changed"
        rows.append({"file": rel, "state": state, "sha256": registered, "actual_sha256": actual,
                     "size": path.stat().st_size if present else None})
    df = pd.DataFrame(rows, columns=STATUS_COLUMNS)
    df["size"] = df["size"].astype("Int64")
    return df


def verify_registered(project: str | Path, paths, registry: str | Path | None = None) -> pd.DataFrame:
    """Check that each raw file in ``paths`` has exactly its registered bytes.

    Returns
    -------
    DataFrame
        Columns ``file, sha256, size, state`` (state ``ok``), one row per file, sorted.

    Raises
    ------
    RegistryError
        Naming every file that is unregistered, missing or changed — with the
        expected and actual hash — and the command that accepts the change.
    """
    project = Path(project)
    reg_path = registry_file(project) if registry is None else _abs(project, registry)
    if isinstance(paths, (str, os.PathLike)):
        paths = [paths]
    entries = read_registry(project, reg_path)
    problems: list[str] = []
    hints: list[str] = []
    rows = []
    for p in paths:
        rel = project_relative(project, _abs(project, p), must_exist=False)
        path = project / rel
        if not path.is_file():
            problems.append(f"{rel}: file is missing (registered sha256 {entries.get(rel, 'none')})")
            hints.append(f"restore {rel}, or remove it from `data:` in config/config.yaml")
            continue
        actual = sha256_file(path)
        expected = entries.get(rel)
        if expected is None:
            problems.append(f"{rel}: not registered in {REGISTRY_PATH} (actual sha256 {actual})")
            hints.append(f"register it with `wavetrail data register {rel}`")
        elif expected != actual:
            problems.append(f"{rel}: bytes differ from the registered hash\n"
                            f"      expected sha256 {expected}\n      actual   sha256 {actual}")
            hints.append(_hint_add(rel))
        else:
            rows.append({"file": rel, "sha256": actual, "size": path.stat().st_size, "state": "ok"})
    if problems:
        raise RegistryError(
            "raw data do not match data/SHA256SUMS:\n  " + "\n  ".join(problems),
            hint="; ".join(dict.fromkeys(hints)),
        )
    return pd.DataFrame(rows, columns=["file", "sha256", "size", "state"]).sort_values("file", ignore_index=True)


# -- git ---------------------------------------------------------------------------------

def open_repo(project: str | Path):
    """The GitPython ``Repo`` holding ``project``, or ``None`` (no git, not a repository)."""
    os.environ.setdefault("GIT_PYTHON_REFRESH", "quiet")
    try:
        import git
    except Exception:  # GitPython missing or no git executable
        return None
    try:
        return git.Repo(Path(project), search_parent_directories=True)
    except (git.exc.InvalidGitRepositoryError, git.exc.NoSuchPathError, git.exc.GitError):
        return None


def _identity_env(repo) -> dict[str, str]:
    """Author/committer variables when git has no identity of its own."""
    reader = repo.config_reader()
    name = reader.get_value("user", "name", default="")
    email = reader.get_value("user", "email", default="")
    env = {}
    for role in ("AUTHOR", "COMMITTER"):
        if not name and not os.environ.get(f"GIT_{role}_NAME"):
            env[f"GIT_{role}_NAME"] = NEUTRAL_AUTHOR[0]
        if not email and not os.environ.get(f"GIT_{role}_EMAIL"):
            env[f"GIT_{role}_EMAIL"] = NEUTRAL_AUTHOR[1]
    return env


def commit_files(project: str | Path, paths, message: str) -> str | None:
    """Commit only ``paths`` (project-relative) when ``project`` is in a git repository.

    Other staged changes are left staged and uncommitted. Returns the new
    commit's hex sha, or ``None`` when there is no repository or nothing changed.
    """
    repo = open_repo(project)
    if repo is None:
        return None
    import git

    root = Path(repo.working_tree_dir).resolve()
    rels = [(Path(project).resolve() / p).relative_to(root).as_posix() for p in paths]
    try:
        with repo.git.custom_environment(**_identity_env(repo)):
            repo.git.add("--", *rels)
            if not repo.head.is_valid():
                pending = True
            else:
                pending = bool(repo.git.diff("--cached", "--name-only", "HEAD", "--", *rels).strip())
            if not pending:
                return None
            repo.git.commit("-m", message, "--only", "--", *rels)
    except git.exc.GitCommandError as err:
        raise RegistryError(f"git could not commit {', '.join(rels)}: {err.stderr.strip() or err}",
                            hint="commit the file yourself (the registry itself was written)") from None
    return repo.head.commit.hexsha
