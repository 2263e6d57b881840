"""``wavetrail pack``: the reviewer archive of a built project.

The archive is one ``.zip`` or ``.tar.gz`` holding a BagIt bag whose payload
is the committed project (every git-tracked file), ``results/`` with the
ledger, the environment lock, an RO-Crate describing every recorded job,
``wavetrail-archive.json`` (what this archive holds and leaves out, for
``wavetrail verify``) and ``ARCHIVE-README.md`` (the same for people).

Raw data modes
--------------
``include``
    The registered raw files go in.
``exclude``
    Only their registered hashes go in (``data/SHA256SUMS``).
``stand-in``
    Synthetic rows (:mod:`wavetrail.archive.stand_in`) go in under a file name
    that says ``STAND-IN``; the archive's ``data/SHA256SUMS`` and
    ``config/config.yaml`` point at the stand-in so that a rebuild runs on it;
    the real registry and the original hashes of the two altered files are
    kept in ``wavetrail-archive.json``.

In ``exclude`` and ``stand-in`` mode, output tables keyed by the real person
ids are person-level data as well and are withheld (hash only), and so is the
stored panel (``results/checks/panel.parquet``, :mod:`wavetrail.stored_panel`):
it is a row-level copy of the raw data, so it goes wherever they go. Its
ledger record stays, and ``wavetrail verify`` traces it to the registered raw
data through the check step's record; a rebuild writes it again (from the
stand-in rows in stand-in mode). With ``include`` it is packed beside the raw
files, after a look at its columns (never an identifier column).

Packing refuses a project whose committed state does not match its results
(uncommitted changes, outputs whose bytes differ from their ledger record,
jobs that ran on inputs that have changed since, jobs recorded at a commit
whose settings or workflow differ from HEAD) unless ``allow_dirty``; and it
refuses when the disclosure check finds something unless ``allow_disclosure``.
"""

from __future__ import annotations

import re
import shutil
import tempfile
from datetime import timezone
from pathlib import Path, PurePosixPath

from wavetrail import __version__
from wavetrail._io import atomic_write_text, sha256_file, write_json, write_table
from wavetrail.errors import ArchiveError, UsageError

from wavetrail.archive import stand_in as standin_mod
from wavetrail.archive.bag import make_bag, write_archive
from wavetrail.archive.crate import build_crate
from wavetrail.archive.disclosure import BLOCK, check_outputs, check_raw_files
from wavetrail.archive.schema import STAND_IN_LABEL
from wavetrail.stored_panel import STORED_PANEL, WITHHELD_REASON

MODES = ("include", "exclude", "stand-in")
MANIFEST = "wavetrail-archive.json"
README = "ARCHIVE-README.md"
CRATE = "ro-crate-metadata.json"
SCHEMA = "wavetrail-archive/1"
#: folders never packed (rebuilt by every run, or the tool's own bookkeeping)
SKIP_TOP = (".git", ".snakemake", "logs")
#: tracked folders whose content decides what a job computes
CODE_PATHS = ("config", "workflow")
#: file name endings of temporary files, never packed
TEMP_SUFFIXES = (".tmp",)
#: what wavetrail._io.atomic_write_bytes names its temporary file: ".<target name>.<random>.tmp"
_ATOMIC_TEMP = re.compile(r"^\..+\.[^./]+\.tmp$")


def is_temporary(rel: str) -> bool:
    """True for a temporary file that must not go into an archive.

    ``*.tmp`` anywhere (e.g. left behind by a killed job) and the temporary
    names of wavetrail's atomic writes (``.<name>.<random>.tmp``).
    """
    name = PurePosixPath(rel).name
    return name.endswith(TEMP_SUFFIXES) or bool(_ATOMIC_TEMP.match(name))


def _short(items: list[str], n: int = 8) -> str:
    shown = "\n  ".join(items[:n])
    more = f"\n  ... and {len(items) - n} more" if len(items) > n else ""
    return shown + more


# --------------------------------------------------------------------------- state of the project


def _repo(root: Path):
    from wavetrail.registry import open_repo

    repo = open_repo(root)
    if repo is None or not repo.head.is_valid():
        raise ArchiveError(f"{root} is not a git repository with a commit",
                           hint="packing archives the committed project; commit it first (git add, git commit)")
    top = Path(repo.working_tree_dir).resolve()
    if top != root.resolve():
        raise ArchiveError(f"{root} is inside the git repository {top}, not its root",
                           hint="pack a project that is its own repository")
    return repo


def tracked_files(repo) -> list[str]:
    """Every git-tracked file (POSIX paths relative to the repository root)."""
    out = repo.git.ls_files("-z")
    return sorted(p for p in out.split("\x00") if p)


def state_problems(root: Path, repo, records: list[dict]) -> list[str]:
    """Why the committed project does not match its results (empty when it does)."""
    problems: list[str] = []
    changed = sorted({d.a_path for d in repo.index.diff(None)} | {d.a_path for d in repo.index.diff("HEAD")})
    problems += [f"{p}: uncommitted change" for p in changed]
    for p in repo.untracked_files:
        if p.split("/", 1)[0] in CODE_PATHS:
            problems.append(f"{p}: not committed (untracked file in {p.split('/', 1)[0]}/)")
    produced = {}
    for rec in records:
        for e in rec["outputs"]:
            produced[e["path"]] = (rec, e)
    for rec in records:
        name = rec.get("_file", rec["step"])
        for e in rec["outputs"]:
            f = root / e["path"]
            if not f.is_file():
                problems.append(f"{e['path']}: recorded by {name} but missing")
            elif sha256_file(f) != e["sha256"]:
                problems.append(f"{e['path']}: bytes differ from its ledger record {name} (drift)")
        for e in rec["inputs"]:
            f = root / e["path"]
            if e["path"] in produced:
                if produced[e["path"]][1]["sha256"] != e["sha256"]:
                    problems.append(f"{name}: input {e['path']} was rewritten after this job ran (stale)")
            elif f.is_file() and e.get("sha256") and sha256_file(f) != e["sha256"]:
                problems.append(f"{name}: input {e['path']} has changed since this job ran (stale)")
    from wavetrail.ledger import source_changes

    for name, changed in sorted(source_changes(root, records, repo).items()):
        problems.append(f"{name}: its settings, plan or workflow changed since the job ran "
                        f"({', '.join(changed[:3])}{' ...' if len(changed) > 3 else ''})")
    return problems


# --------------------------------------------------------------------------- stand-in helpers


def replace_data_key(config_text: str, new_paths: list[str], note: str) -> str:
    """``config.yaml`` text with its top-level ``data:`` entry replaced (comments elsewhere kept)."""
    lines = config_text.splitlines(keepends=True)
    out, i, done = [], 0, False
    while i < len(lines):
        line = lines[i]
        if not done and re.match(r"^data\s*:", line):
            out.append(f"# {note}\n")
            out.append("data: [" + ", ".join(new_paths) + "]\n")
            i += 1
            while i < len(lines) and (re.match(r"^\s+-", lines[i]) or re.match(r"^\s+\S", lines[i])
                                      and not re.match(r"^\S", lines[i])):
                i += 1
            done = True
            continue
        out.append(line)
        i += 1
    if not done:
        raise ArchiveError("config/config.yaml has no top-level `data:` key to point at the stand-in",
                           hint="list the raw files under `data:`")
    return "".join(out)


def _standin_name(real: list[str]) -> str:
    stem = PurePosixPath(real[0]).name.split(".")[0] if real else "panel"
    return f"data/raw/{stem}.STAND-IN.csv"


# --------------------------------------------------------------------------- packing


def _title(config: dict, codebook, root: Path) -> str:
    for value in (config.get("title"), (config.get("report") or {}).get("title"),
                  getattr(codebook.study, "title", None)):
        if value:
            return str(value)
    readme = root / "README.md"
    if readme.is_file():
        for line in readme.read_text(encoding="utf-8", errors="replace").splitlines():
            if line.startswith("# ") and line[2:].strip():
                return line[2:].strip()
    return root.name


def _readme(title: str, commit: str, mode: str, standin: dict | None, withheld: dict, allowed: list[str]) -> str:
    lines = [f"# Reviewer archive: {title}", "",
             f"Project commit `{commit}`, packed by wavetrail {__version__}, raw data mode **{mode}**.", ""]
    if standin:
        lines += ["> **STAND-IN DATA - NOT THE REAL DATA.**",
                  f"> `{standin['path']}` holds synthetic rows generated from the codebook and summary "
                  "properties of the real data (Gaussian copula). No row is a real person's record and "
                  "the ids are invented. Numbers rebuilt from it are not the study's results; the "
                  "results in `results/` were computed from the real data, which stay with the authors.",
                  ""]
        near = standin.get("closeness") or {}
        if near:
            lines += ["> " + standin_mod.closeness_line(near), ""]
    lines += ["## Check it", "",
              "    wavetrail verify THIS-ARCHIVE            # integrity and provenance; runs no code from it",
              "    wavetrail verify THIS-ARCHIVE --rebuild  # also reruns the workflow (runs the authors' code:",
              "                                             # use an isolated environment)", "",
              "## What is here", "",
              "- the committed project (settings, codebook, workflow), `results/` and the job ledger "
              "`results/ledger/`",
              "- `environment/requirements.lock`: the package versions of the build",
              f"- `{CRATE}`: RO-Crate describing every recorded job",
              f"- `{MANIFEST}`: what this archive holds and leaves out, read by `wavetrail verify`", ""]
    if withheld:
        lines += ["## Left out (only their sha256 is kept)", ""]
        lines += [f"- `{p}`: {withheld[p]['reason']}" for p in sorted(withheld)]
        lines += [""]
    if allowed:
        lines += ["## Disclosure findings the authors accepted (--allow-disclosure)", ""]
        lines += [f"- {m}" for m in allowed]
        lines += [""]
    return "\n".join(lines)


def pack_project(path=".", raw: str = "exclude", output=None, allow_dirty: bool = False,
                 allow_disclosure: bool = False, min_cell: int | None = None, notes: list | None = None,
                 **earlier) -> Path:
    """Write the reviewer archive of a project.

    Parameters
    ----------
    path : path
        The project (or a folder inside it).
    raw : {"include", "exclude", "stand-in"}
        What goes in for the raw data (see the module notes); ``wavetrail pack --raw``.
        Default ``"exclude"``, the same as the command: raw data leave the machine only
        when asked for (``"include"``) or as a stand-in.
        The earlier name ``data=`` is accepted this version only (``DeprecationWarning``).
    output : path, optional
        Archive file, ``.zip`` or ``.tar.gz``; default
        ``<project>-<commit>-<mode>.zip`` beside the project folder.
    allow_dirty : bool
        Pack even when the committed project and its results disagree.
    allow_disclosure : bool
        Pack even when the disclosure check finds something (the findings
        are written into the archive).
    min_cell : int, optional
        Smallest count of people a packed file may show. Default: the
        project's ``report.min_cell`` (the threshold the report suppresses
        with), else 5.
    notes : list, optional
        Lines for the person packing are appended here (the small-cell
        threshold and where it came from, the stand-in closeness figures).

    Returns
    -------
    Path
        The archive written.

    Raises
    ------
    ArchiveError
        When the project is not packable (names why and what to do).
    """
    from wavetrail.codebook import load_codebook
    from wavetrail.config import load_config
    from wavetrail.ledger import read_records
    from wavetrail.project import find_project
    from wavetrail.registry import read_registry

    if earlier:
        from wavetrail.sem.fitting import renamed_arguments

        raw = renamed_arguments("pack_project", earlier, {"data": "raw"}).get("raw", raw)
    data = raw
    if data not in MODES:
        raise UsageError(f"--raw {data!r}: choose include, exclude or stand-in")
    root = find_project(path)
    repo = _repo(root)
    config = load_config(root)
    codebook = load_codebook(root / config["codebook"])
    records = read_records(root)
    if not records:
        raise ArchiveError(f"{root}: no ledger records in results/ledger/",
                           hint="build the project first with `wavetrail build`")
    problems = state_problems(root, repo, records)
    if problems and not allow_dirty:
        uncommitted = any("uncommitted change" in p or "not committed" in p for p in problems)
        hint = ("commit your changes, run `wavetrail build` (it reruns every job listed here), then pack again"
                if uncommitted else "run `wavetrail build` (it reruns every job listed here), then pack again")
        raise ArchiveError("the project's committed state does not match its results:\n  " + _short(problems),
                           hint=hint + "; or pack anyway with --allow-dirty")
    head = repo.head.commit
    commit = head.hexsha
    when = head.committed_datetime.astimezone(timezone.utc)
    registry = read_registry(root)
    raw_paths = sorted(set(registry) | {PurePosixPath(p).as_posix() for p in config.get("data") or []})
    unregistered = [p for p in raw_paths if p not in registry]
    if unregistered:
        raise ArchiveError(f"{unregistered[0]}: listed under `data` in config/config.yaml but not registered "
                           "in data/SHA256SUMS", hint=f"register it with `wavetrail data register {unregistered[0]}`, "
                                                      "commit, and rebuild")

    # -------- the payload: tracked files + results + lock + registry
    files: dict[str, Path] = {}
    for rel in tracked_files(repo):
        if rel.split("/", 1)[0] in SKIP_TOP:
            continue
        files[rel] = root / rel
    for sub in ("results",):
        for f in sorted((root / sub).rglob("*")) if (root / sub).is_dir() else []:
            rel = f.relative_to(root).as_posix()
            if f.name.startswith(".") or "/." in rel:
                continue
            if f.is_symlink():
                raise ArchiveError(f"{rel}: a link cannot go into an archive", hint="replace it by the file")
            if f.is_file():
                files[rel] = f
    for rel in ("environment/requirements.lock", "data/SHA256SUMS"):
        if (root / rel).is_file():
            files[rel] = root / rel
    for rel in [r for r in files if is_temporary(r)]:
        del files[rel]  # a temporary file (a killed job's leftover, an unfinished atomic write)
    for rel in list(files):
        if files[rel].is_symlink():
            raise ArchiveError(f"{rel}: a link cannot go into an archive", hint="replace it by the file")
        if not files[rel].is_file():
            del files[rel]  # tracked but deleted (allowed only with --allow-dirty)
    for rel in raw_paths:
        files.pop(rel, None)
    # the stored panel: row-level data like the raw files, so it follows them (see the module notes)
    stored = {rel: files.pop(rel) for rel in [STORED_PANEL] if rel in files}
    withheld: dict[str, dict] = {}
    if data == "include":
        for rel in raw_paths:
            f = root / rel
            if not f.is_file():
                raise ArchiveError(f"{rel}: raw data file missing; --raw include needs it",
                                   hint="put the file back, or pack with --raw exclude")
            if rel in registry and sha256_file(f) != registry[rel]:
                raise ArchiveError(f"{rel}: bytes differ from data/SHA256SUMS",
                                   hint=f"accept them with `wavetrail data register {rel}` and rebuild")
            files[rel] = f
    else:
        for rel in raw_paths:
            withheld[rel] = {"sha256": registry.get(rel), "size": (root / rel).stat().st_size
                             if (root / rel).is_file() else None, "reason": "raw data kept by the authors"}

    # -------- disclosure check on every file that would go out
    panel = _load_panel(root, config, codebook)
    if min_cell is not None:
        threshold, source = int(min_cell), "pack --min-cell"
    else:
        import yaml

        written = yaml.safe_load((root / "config/config.yaml").read_text(encoding="utf-8")) or {}
        said = isinstance(written.get("report"), dict) and "min_cell" in written["report"]
        threshold = int((config.get("report") or {}).get("min_cell", 5))
        source = ("report.min_cell in config/config.yaml, the threshold the report suppresses with" if said
                  else "report.min_cell's default; set it in config/config.yaml or use pack --min-cell")
    if threshold < 1:
        raise UsageError(f"--min-cell {threshold}: give a count of at least 1")
    say = notes.append if notes is not None else (lambda line: None)
    say(f"disclosure check: {len(files)} files; small cells are counts below {threshold} ({source})")
    outgoing = {rel: f for rel, f in files.items() if rel not in raw_paths}
    report = check_outputs(outgoing, codebook, panel.long, min_cell=threshold, data_included=(data == "include"),
                           min_cell_source=source)
    findings = report.findings.to_dict("records")
    if data == "include":
        tables = {}
        for rel in raw_paths:
            tables[rel] = _raw_frame(root / rel)
        findings += check_raw_files({r: root / r for r in raw_paths}, codebook, tables)
    if data == "include":
        findings += _stored_panel_findings(stored, codebook)
        files.update(stored)
    else:
        for rel, f in stored.items():
            withheld[rel] = {"sha256": sha256_file(f), "size": f.stat().st_size, "reason": WITHHELD_REASON}
    if data != "include":
        for rel in report.person_level:
            rec_hash = sha256_file(files[rel])
            withheld[rel] = {"sha256": rec_hash, "size": files[rel].stat().st_size,
                             "reason": "person-level output keyed by the real person ids"}
            del files[rel]
    blocking = [f for f in findings if f["severity"] == BLOCK]
    if blocking and not allow_disclosure:
        raise ArchiveError(f"the disclosure check found what an archive (--raw {data}) must not show:\n  "
                           + _short([f["message"] for f in blocking]),
                           hint="fix the outputs and rebuild, or pack anyway with --allow-disclosure "
                                "(the findings are then listed in the archive)")

    with tempfile.TemporaryDirectory(prefix="wavetrail-pack-") as tmp:
        staging = Path(tmp) / "bag"
        staging.mkdir()
        for rel, f in sorted(files.items()):
            target = staging / rel
            target.parent.mkdir(parents=True, exist_ok=True)
            shutil.copyfile(f, target)
        standin = None
        altered: dict[str, dict] = {}
        if data == "stand-in":
            standin, altered = _write_standin(root, staging, config, panel, raw_paths, registry)
            near = standin["closeness"]
            say(standin_mod.closeness_line(near))
            too_close = standin_mod.closeness_problems(near)
            if too_close:
                raise ArchiveError("the stand-in rows are too close to the real rows:\n  " + _short(too_close),
                                   hint="pack with --raw exclude")
        manifest = {
            "schema": SCHEMA, "title": _title(config, codebook, root), "commit": commit,
            "committed": when.isoformat(timespec="seconds"), "wavetrail": __version__, "mode": data,
            "registry": {p: registry[p] for p in sorted(registry)},
            "withheld": withheld, "stand-in": standin, "altered": altered,
            "disclosure": {"min_cell": threshold, "min_cell_source": source, "findings": findings,
                           "allowed": bool(blocking)},
            "state": {"problems": problems, "allowed": bool(problems)},
        }
        write_json(staging / MANIFEST, manifest)
        atomic_write_text(staging / README, _readme(manifest["title"], commit, data, standin, withheld,
                                                    [f["message"] for f in blocking]))
        payload = {p.relative_to(staging).as_posix(): {"sha256": sha256_file(p), "size": p.stat().st_size}
                   for p in sorted(staging.rglob("*")) if p.is_file()}
        try:
            import snakemake

            smk_version = getattr(snakemake, "__version__", None)
        except Exception:
            smk_version = None
        description = (f"Reviewer archive of the panel-study project '{manifest['title']}' at commit {commit}; "
                       f"raw data mode: {data}.")
        if standin:
            description += " " + standin_mod.NOTE
        graph = build_crate(title=manifest["title"], description=description,
                            date=when.isoformat(timespec="seconds"), license_text=config.get("license"),
                            records=records, payload=payload, withheld=withheld, standin=standin,
                            wavetrail_version=__version__, snakemake_version=smk_version, commit=commit, mode=data)
        write_json(staging / CRATE, graph)
        bag_info = {
            "External-Description": description,
            "External-Identifier": f"git:{commit}",
            "Project-Title": manifest["title"],
            "Project-Commit": commit,
            "Wavetrail-Version": __version__,
            "Raw-Data-Mode": data,
        }
        if standin:
            bag_info[STAND_IN_LABEL] = f"{standin['path']}: {standin_mod.NOTE}"
        make_bag(staging, bag_info, date=when.date().isoformat(), agent=f"wavetrail {__version__}")
        if output is None:
            output = root.parent / f"{root.name}-{commit[:10]}-{data}.zip"
        output = Path(output)
        top = f"{root.name}-{data}"
        return write_archive(staging, output, top, int(when.timestamp()))


def _stored_panel_findings(stored: dict, codebook) -> list[dict]:
    """A stored panel going out with the raw data never holds an identifier column (it is written
    without them); one that does, or that cannot be read as Parquet, blocks like raw data would."""
    from wavetrail.archive.disclosure import _finding
    from wavetrail.stored_panel import stored_columns

    out = []
    for rel, f in sorted(stored.items()):
        names = stored_columns(f)
        if names is None:
            out.append(_finding("identifier column", BLOCK, rel, "", "", f"{rel}: the stored panel cannot be "
                                "read as Parquet, so its columns cannot be checked; run `wavetrail build` again"))
            continue
        for name in codebook.identifiers:
            if name in names:
                out.append(_finding("identifier column", BLOCK, rel, name, "",
                                    f"{rel}: stored panel column {name!r} is an identifier; run `wavetrail "
                                    "build` again (the check step writes it without identifiers)"))
    return out


def _load_panel(root: Path, config: dict, codebook):
    from wavetrail.panel import load_panel

    paths = [root / p for p in (config.get("data") or [])]
    missing = [p for p in paths if not p.is_file()]
    if missing:
        raise ArchiveError(f"{missing[0].relative_to(root).as_posix()}: raw data file missing; the disclosure "
                           "check (and a stand-in) need the real data on the authors' side",
                           hint="pack on the machine that holds the raw data")
    return load_panel(paths, codebook)


def _raw_frame(path: Path):
    from wavetrail.readers import read_table

    try:
        return read_table(path).frame
    except Exception:
        return None


def _write_standin(root: Path, staging: Path, config: dict, panel, raw_paths: list[str], registry: dict):
    from wavetrail.registry import write_registry
    from wavetrail.seeds import derive_seed

    seed = derive_seed(int(config.get("seed", 0)), "stand-in")
    made = standin_mod.synthesize(panel, seed)
    rel = _standin_name(raw_paths)
    write_table(staging / rel, made.frame)
    digest = sha256_file(staging / rel)
    altered = {}
    for key in ("config/config.yaml", "data/SHA256SUMS"):
        if (staging / key).is_file():
            altered[key] = {"sha256": sha256_file(staging / key),
                            "reason": "points at the stand-in data instead of the real data"}
    write_registry(staging, {rel: digest})
    text = (staging / "config/config.yaml").read_text(encoding="utf-8")
    atomic_write_text(staging / "config/config.yaml",
                      replace_data_key(text, [rel], "STAND-IN data (not the real data); the real files: "
                                       + ", ".join(raw_paths)))
    from wavetrail.config import load_config

    load_config(staging)  # the rewritten settings must still be valid
    info = {"path": rel, "sha256": digest, "size": (staging / rel).stat().st_size, "replaces": raw_paths,
            "seed": seed, "rows": int(len(made.frame)), "note": standin_mod.NOTE,
            "row_moves": int(made.redrawn), "closeness": made.closeness}
    return info, altered
