"""The analysis plan: config and codebook frozen before results are seen, and every later deviation.

``freeze_plan`` writes ``config/plan.lock.json`` — for config/config.yaml and
the codebook it names, the sha256 of the bytes and the parsed YAML structure —
and commits it when the project is a git repository. ``plan_changes`` compares
the current files with the frozen ones key by key (the YAML structures, not
only the hashes), so the report can list exactly what was changed after the
plan was fixed.
"""

from __future__ import annotations

import datetime as _dt
import json
from pathlib import Path
from typing import Any

import pandas as pd
import yaml

from wavetrail._io import sha256_file, write_json
from wavetrail.errors import ConfigError, ProjectError

SCHEMA = "wavetrail-plan/1"
PLAN_PATH = "config/plan.lock.json"
CONFIG_PATH = "config/config.yaml"
DEFAULT_CODEBOOK = "config/codebook.yaml"
CHANGE_COLUMNS = ["file", "key", "change", "frozen", "current"]


def _normalise(value: Any) -> Any:
    """A YAML structure as plain JSON values (keys as strings, dates as ISO text)."""
    if isinstance(value, dict):
        return {str(k): _normalise(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_normalise(v) for v in value]
    if isinstance(value, (_dt.date, _dt.datetime)):
        return value.isoformat()
    if value is None or isinstance(value, (bool, int, float, str)):
        return value
    return str(value)


def _load_yaml(path: Path, rel: str) -> Any:
    try:
        return _normalise(yaml.safe_load(path.read_text(encoding="utf-8")))
    except yaml.YAMLError as err:
        mark = getattr(err, "problem_mark", None)
        where = f", line {mark.line + 1}" if mark is not None else ""
        raise ConfigError(f"{rel}{where}: not valid YAML ({getattr(err, 'problem', err)})",
                          hint="fix the file, then run the plan command again") from None


def plan_files(project: str | Path) -> list[str]:
    """Project-relative paths that make up the plan: the config and the codebook it names."""
    project = Path(project)
    cfg = project / CONFIG_PATH
    if not cfg.is_file():
        raise ProjectError(f"no {CONFIG_PATH} in {project}", hint="run the command inside a wavetrail project")
    config = _load_yaml(cfg, CONFIG_PATH)
    codebook = config.get("codebook", DEFAULT_CODEBOOK) if isinstance(config, dict) else DEFAULT_CODEBOOK
    return [CONFIG_PATH, Path(str(codebook)).as_posix()]


def _snapshot(project: Path, rel: str) -> dict[str, Any]:
    path = project / rel
    if not path.is_file():
        raise ProjectError(f"{rel} does not exist", hint=f"create {rel} (or fix `codebook:` in {CONFIG_PATH})")
    return {"sha256": sha256_file(path), "content": _load_yaml(path, rel)}


def read_plan(project: str | Path) -> dict[str, Any] | None:
    """The frozen plan, or ``None`` when the plan was never frozen."""
    path = Path(project) / PLAN_PATH
    if not path.is_file():
        return None
    try:
        plan = json.loads(path.read_text(encoding="utf-8"))
    except (json.JSONDecodeError, UnicodeDecodeError) as err:
        raise ProjectError(f"{PLAN_PATH}: not readable ({err})",
                           hint="restore it from git history (`git log -- config/plan.lock.json`)") from None
    if not isinstance(plan, dict) or plan.get("schema") != SCHEMA or not isinstance(plan.get("files"), dict):
        raise ProjectError(f"{PLAN_PATH}: not a {SCHEMA} file", hint="restore it from git history")
    return plan


def freeze_plan(project: str | Path, *, replace: bool = False, commit: bool = True) -> str:
    """Freeze config and codebook as the analysis plan; returns a summary line for the CLI.

    Parameters
    ----------
    replace : bool
        Freeze again over an existing plan (the old one stays in git history).
        Without it a second freeze is refused, so deviations cannot be hidden
        by accident.
    commit : bool
        Commit ``config/plan.lock.json`` when the project is a git repository.
    """
    project = Path(project)
    old = read_plan(project)
    if old is not None and not replace:
        raise ProjectError(f"the analysis plan was already frozen on {old.get('frozen')} ({PLAN_PATH})",
                           hint="`wavetrail plan diff` lists the deviations; `wavetrail plan freeze --replace` "
                                "freezes the current files instead")
    from wavetrail.ledger import git_state

    files = {rel: _snapshot(project, rel) for rel in plan_files(project)}
    seen = results_seen(project)
    plan = {
        "schema": SCHEMA,
        "frozen": _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds"),
        "files": files,
        "git": git_state(project),
        "results_seen": seen,
    }
    write_json(project / PLAN_PATH, plan)
    sha = None
    if commit:
        from wavetrail.registry import commit_files

        sha = commit_files(project, [PLAN_PATH], "Freeze the analysis plan (config and codebook)")
    parts = [f"{rel} sha256 {snap['sha256'][:12]}" for rel, snap in files.items()]
    line = f"analysis plan frozen in {PLAN_PATH}: " + ", ".join(parts)
    line += f"; committed {sha[:10]}" if sha else ""
    if seen:
        line += f"\nnote: results of {', '.join(seen)} already existed; the plan records that it came after them"
    return line


#: steps that only check data and environment: their outputs are not results an analysis plan could follow
PREPARATORY_STEPS = ("confirm_raw_hashes", "lock_environment", "check_data")


def results_seen(project: str | Path) -> list[str]:
    """Analysis steps that already have ledger records (sorted), i.e. results that existed."""
    from wavetrail.ledger import read_records

    try:
        records = read_records(project)
    except Exception:  # an unreadable ledger says nothing about the plan
        return []
    return sorted({r["step"] for r in records if r["step"] not in PREPARATORY_STEPS})


def _label(item: Any, index: int) -> str:
    if isinstance(item, dict) and isinstance(item.get("name"), str):
        return f"[{item['name']}]"
    return f"[{index}]"


def _keyed(items: list) -> dict[str, Any] | None:
    """A list of dicts with unique ``name``s as ``{"[name]": item}``; ``None`` for other lists."""
    if not items or not all(isinstance(i, dict) and isinstance(i.get("name"), str) for i in items):
        return None
    keyed = {f"[{i['name']}]": i for i in items}
    return keyed if len(keyed) == len(items) else None


def _fmt(value: Any) -> str | None:
    if value is _ABSENT:
        return None
    return json.dumps(value, sort_keys=True, ensure_ascii=False)


_ABSENT = object()


def diff_structures(old: Any, new: Any, prefix: str = "") -> list[tuple[str, str, Any, Any]]:
    """Key-level differences between two YAML structures: ``[(key, change, old, new)]``.

    Mappings are compared key by key (``a.b``); lists of mappings that each
    have a unique ``name`` (codebook variables) by name (``variables[slp4].reverse``);
    other lists of mappings by position; anything else as one value.
    """
    out: list[tuple[str, str, Any, Any]] = []
    join = (lambda k: f"{prefix}.{k}" if prefix else k)
    if isinstance(old, dict) and isinstance(new, dict):
        for key in list(old) + [k for k in new if k not in old]:
            a, b = old.get(key, _ABSENT), new.get(key, _ABSENT)
            if a is _ABSENT:
                out.append((join(key), "added", a, b))
            elif b is _ABSENT:
                out.append((join(key), "removed", a, b))
            else:
                out.extend(diff_structures(a, b, join(key)))
        return out
    if isinstance(old, list) and isinstance(new, list) and (
            any(isinstance(i, dict) for i in old) or any(isinstance(i, dict) for i in new)):
        ko, kn = _keyed(old), _keyed(new)
        if ko is not None and kn is not None:
            pairs = [(k, ko.get(k, _ABSENT), kn.get(k, _ABSENT)) for k in list(ko) + [k for k in kn if k not in ko]]
        else:
            n = max(len(old), len(new))
            pairs = [(f"[{i}]", old[i] if i < len(old) else _ABSENT, new[i] if i < len(new) else _ABSENT)
                     for i in range(n)]
        for label, a, b in pairs:
            key = f"{prefix}{label}"
            if a is _ABSENT:
                out.append((key, "added", a, b))
            elif b is _ABSENT:
                out.append((key, "removed", a, b))
            else:
                out.extend(diff_structures(a, b, key))
        return out
    if old != new or type(old) is not type(new):
        out.append((prefix or "(whole file)", "changed", old, new))
    return out


def plan_changes(project: str | Path, *, missing_ok: bool = False) -> pd.DataFrame:
    """Every change to the plan files since the plan was frozen.

    Returns
    -------
    DataFrame
        Columns ``file, key, change, frozen, current`` (``frozen``/``current``
        are JSON text of the values; empty where absent). ``change`` is
        ``added``, ``removed`` or ``changed`` for a key; ``file added`` /
        ``file removed`` when the codebook named by the config is another file;
        ``reformatted`` when a file's bytes changed but no key did. Empty when
        nothing changed. With ``missing_ok`` and no frozen plan: one row with
        change ``not frozen``.

    Raises
    ------
    ProjectError
        When the plan was never frozen (unless ``missing_ok``).
    """
    project = Path(project)
    plan = read_plan(project)
    if plan is None:
        if missing_ok:
            return pd.DataFrame([{"file": PLAN_PATH, "key": "", "change": "not frozen", "frozen": None,
                                  "current": None}], columns=CHANGE_COLUMNS, dtype=object)
        raise ProjectError(f"the analysis plan has not been frozen ({PLAN_PATH} does not exist)",
                           hint="run `wavetrail plan freeze` before looking at results")
    frozen = plan["files"]
    try:
        current_files = plan_files(project)
    except ProjectError:
        current_files = []
    rows = []
    for rel in list(frozen) + [f for f in current_files if f not in frozen]:
        path = project / rel
        if rel not in frozen:
            rows.append({"file": rel, "key": "", "change": "file added", "frozen": None,
                         "current": sha256_file(path) if path.is_file() else None})
            continue
        if rel not in current_files or not path.is_file():
            rows.append({"file": rel, "key": "", "change": "file removed",
                         "frozen": frozen[rel]["sha256"], "current": None})
            continue
        if sha256_file(path) == frozen[rel]["sha256"]:
            continue
        diffs = diff_structures(frozen[rel]["content"], _load_yaml(path, rel))
        if not diffs:
            rows.append({"file": rel, "key": "", "change": "reformatted", "frozen": frozen[rel]["sha256"],
                         "current": sha256_file(path)})
        for key, change, a, b in diffs:
            rows.append({"file": rel, "key": key, "change": change, "frozen": _fmt(a), "current": _fmt(b)})
    return pd.DataFrame(rows, columns=CHANGE_COLUMNS, dtype=object)
