"""Reading what a report shows: result tables, the codebook's study block, provenance files.

A table that is not given and is not at its standard place is *absent* (its stage
is not configured) and the report says so; a table that is given but missing or
unreadable is an error that names the file.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import pandas as pd
import yaml

from wavetrail.errors import BuildError, CodebookError

#: result table name -> its standard place in a project
TABLE_PATHS: dict[str, str] = {
    "findings": "results/checks/findings.csv",
    "descriptives": "results/checks/descriptives.csv",
    "attrition": "results/checks/attrition.csv",
    "scores": "results/scores/scores.csv",
    "reliability": "results/scores/reliability.csv",
    "invariance": "results/scores/invariance.csv",
    "growth_fit": "results/growth/fit.csv",
    "growth_estimates": "results/growth/estimates.csv",
    "growth_comparison": "results/growth/comparison.csv",
    "growth_conditional": "results/growth/conditional.csv",
    "growth_conditional_tests": "results/growth/conditional_tests.csv",
    "importance": "results/forest/importance.csv",
    "dependence": "results/forest/dependence.csv",
    "interactions": "results/forest/interactions.csv",
    "dependence_pairs": "results/forest/dependence_pairs.csv",
    "forest_overview": "results/forest/overview.csv",
    "forest_trees": "results/forest/trees.csv",
    "differences": "results/forest/differences.csv",
    "confirmation": "results/forest/confirmation.csv",
    "confirmation_tests": "results/forest/confirmation_tests.csv",
}
#: other named inputs of the report step
OTHER_PATHS: dict[str, str] = {"lock": "environment/requirements.lock"}
REGISTRY = "data/SHA256SUMS"


def find_project_root(start: str | Path = ".") -> Path:
    """The nearest folder at or above ``start`` that holds ``config/config.yaml``."""
    here = Path(start).resolve()
    for folder in (here, *here.parents):
        if (folder / "config" / "config.yaml").is_file():
            return folder
    return here


@dataclass
class StudyInfo:
    """What the report needs from the codebook: waves, time scores, labels, scale units."""

    waves: list = field(default_factory=list)
    time_scores: list = field(default_factory=list)
    time_unit: str | None = None
    labels: dict[str, str] = field(default_factory=dict)
    scale_labels: dict[str, str] = field(default_factory=dict)
    scale_ranges: dict[str, tuple[float, float]] = field(default_factory=dict)
    levels: dict[str, dict[str, str]] = field(default_factory=dict)
    #: unit of each variable that declares one (``unit:`` in the codebook)
    units: dict[str, str] = field(default_factory=dict)
    #: names of the declared multi-item scales
    scale_names: set = field(default_factory=set)

    def is_scale(self, name) -> bool:
        """True for a declared multi-item scale (False for a single measure)."""
        if not self.scale_names:  # no codebook read: take every name for a scale
            return str(name) not in self.labels
        return str(name) in self.scale_names

    def level_label(self, name: str, code) -> str:
        """The codebook's label of a category code (``1``, ``1.0`` and ``"1"`` alike), else the code."""
        return self.levels.get(str(name), {}).get(_code(code), _code(code))

    def label(self, name: str) -> str:
        return self.labels.get(str(name), str(name))

    def scale_label(self, scale: str) -> str:
        """The label of an outcome: a scale's label, else a variable's codebook label."""
        name = str(scale)
        if name in self.scale_labels:
            return self.scale_labels[name]
        if name not in self.scale_names and name in self.labels:
            return self.labels[name]
        return name.replace("_", " ").capitalize()

    def time_of(self, wave) -> float | None:
        for w, t in zip(self.waves, self.time_scores):
            if str(w) == str(wave):
                return float(t)
        return None


def read_study(path: str | Path | None) -> StudyInfo:
    """The study block, labels and scale ranges from a codebook YAML file (absent file: empty)."""
    if path is None or not Path(path).is_file():
        return StudyInfo()
    try:
        doc = yaml.safe_load(Path(path).read_text(encoding="utf-8")) or {}
    except yaml.YAMLError as err:
        raise CodebookError(f"{path}: not valid YAML ({err})", hint="run `wavetrail check` to see the problem") from None
    study = doc.get("study") or {}
    info = StudyInfo(
        waves=list(study.get("waves") or []),
        time_scores=list(study.get("time_scores") or []),
        time_unit=study.get("time_unit"),
    )
    if info.waves and not info.time_scores:
        info.time_scores = list(range(len(info.waves)))
    for var in doc.get("variables") or []:
        if not isinstance(var, dict) or "name" not in var:
            continue
        name = str(var["name"])
        if var.get("label"):
            info.labels[name] = str(var["label"])
        if var.get("unit"):
            info.units[name] = str(var["unit"])
        if isinstance(var.get("levels"), dict):
            info.levels[name] = {_code(k): str(v) for k, v in var["levels"].items()}
        scale, rng = var.get("scale"), var.get("range")
        if scale and isinstance(rng, (list, tuple)) and len(rng) == 2:
            lo, hi = float(rng[0]), float(rng[1])
            old = info.scale_ranges.get(scale)
            info.scale_ranges[scale] = (lo, hi) if old is None else (min(lo, old[0]), max(hi, old[1]))
    for name, spec in (doc.get("scales") or {}).items():
        info.scale_names.add(str(name))
        if isinstance(spec, dict) and spec.get("label"):
            info.scale_labels[str(name)] = str(spec["label"])
    return info


def _code(value) -> str:
    """A category code as text the same way whether YAML or CSV gave it (``1``, ``1.0`` -> ``1``)."""
    try:
        f = float(value)
    except (TypeError, ValueError):
        return str(value)
    return str(int(f)) if f.is_integer() else str(value)


def read_table(path: Path, name: str) -> pd.DataFrame:
    try:
        return pd.read_csv(path)
    except pd.errors.EmptyDataError:
        return pd.DataFrame()
    except (OSError, pd.errors.ParserError, UnicodeDecodeError) as err:
        raise BuildError(f"result table {name} ({path}) cannot be read: {err}",
                         hint="rebuild the stage that writes it (wavetrail build)") from None


def load_tables(root: Path, given: dict[str, str]) -> tuple[dict[str, pd.DataFrame | None], dict[str, str]]:
    """Read every result table; ``given`` overrides the standard places (name -> path)."""
    unknown = sorted(set(given) - set(TABLE_PATHS) - set(OTHER_PATHS))
    if unknown:
        raise BuildError(f"the report got unknown table names {unknown}",
                         hint=f"use the names {sorted(TABLE_PATHS)}")
    tables: dict[str, pd.DataFrame | None] = {}
    paths: dict[str, str] = {}
    for name, default in TABLE_PATHS.items():
        rel = given.get(name)
        path = root / (rel or default)
        if rel is not None and not path.is_file():
            raise BuildError(f"result table {name} is missing: {rel}",
                             hint="rebuild the stage that writes it (wavetrail build)")
        if path.is_file():
            tables[name] = read_table(path, name)
            paths[name] = str(rel or default)
        else:
            tables[name] = None
    return tables, paths


def read_registry(root: Path) -> list[tuple[str, str]]:
    """(path, sha256) pairs of ``data/SHA256SUMS`` (sha256sum format), in file order."""
    path = root / REGISTRY
    if not path.is_file():
        return []
    pairs = []
    for line in path.read_text(encoding="utf-8").splitlines():
        line = line.strip()
        if not line or line.startswith("#"):
            continue
        digest, _, name = line.partition(" ")
        pairs.append((name.strip().lstrip("*"), digest.lower()))
    return pairs


def read_lock(path: Path | None) -> dict[str, Any]:
    """Pinned packages of ``environment/requirements.lock`` (``name==version`` lines) and its hash."""
    if path is None or not path.is_file():
        return {}
    from wavetrail._io import sha256_file

    pins: dict[str, str] = {}
    for line in path.read_text(encoding="utf-8").splitlines():
        line = line.split("#", 1)[0].strip()
        if "==" in line:
            name, _, version = line.partition("==")
            pins[name.strip().lower().replace("_", "-")] = version.split(";")[0].strip()
    return {"sha256": sha256_file(path), "pins": pins}


def read_ledger(root: Path, *, skip: tuple[str, ...] = ("render_report",)) -> list[dict]:
    """The project's ledger records, without those of the report step itself.

    The report's own record of an earlier build is left out, so a first build and a
    rebuild show the same provenance. Empty when no step has been recorded yet.
    """
    from wavetrail import ledger

    return [r for r in ledger.read_records(root) if r.get("step") not in skip]


def read_plan_changes(root: Path) -> pd.DataFrame:
    """Deviations from the frozen analysis plan (one ``not frozen`` row when no plan was frozen)."""
    from wavetrail import plan

    return plan.plan_changes(root, missing_ok=True)


#: folders whose files decide what the workflow computes (the report's code fingerprint)
CODE_FOLDERS = ("config", "workflow")
_NOT_CODE_PARTS = {"__pycache__", ".ipynb_checkpoints", ".snakemake"}


def code_fingerprint(root: Path) -> tuple[list[str], str]:
    """The code files of a project and one SHA-256 over them.

    Files under ``config/`` and ``workflow/`` (not hidden, no byte-code caches,
    no ``*.tmp``), sorted by project-relative path; the digest is the SHA-256
    of the lines ``<sha256>  <path>`` (sha256sum format), so it depends on the
    files' bytes and names only, never on times or on the git history.
    """
    from wavetrail._io import sha256_bytes, sha256_file

    files = []
    for folder in CODE_FOLDERS:
        base = Path(root) / folder
        if not base.is_dir():
            continue
        for path in base.rglob("*"):
            rel = path.relative_to(root)
            if not path.is_file() or path.is_symlink() or any(
                    part.startswith(".") or part in _NOT_CODE_PARTS for part in rel.parts):
                continue
            if path.suffix in (".pyc", ".tmp"):
                continue
            files.append(rel.as_posix())
    files.sort()
    lines = "".join(f"{sha256_file(Path(root) / rel)}  {rel}\n" for rel in files)
    return files, sha256_bytes(lines.encode("utf-8"))
