"""Shared material of the archive tests: a small simulated panel and a hand-built project.

The project is what a build leaves behind, made by hand so that packing and
verification can be tested without running the workflow: settings, codebook,
raw data registered in data/SHA256SUMS, a git commit, result tables computed
from the data, the stored panel (results/checks/panel.parquet, read by a later
"job" as in a build), an environment lock and one ledger record per "job".
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

CODEBOOK = """\
study:
  id: pid
  wave: wave
  waves: [1, 2, 3]
  time_scores: [0, 1, 2]
  title: Invented test panel
variables:
  - {name: pid, label: Study number, type: integer}
  - {name: wave, label: Wave, type: integer}
  - {name: it1, label: Item 1, type: integer, range: [1, 5], missing: {-99: refused, -98: do not know}, scale: sd}
  - {name: it2, label: Item 2, type: integer, range: [1, 5], missing: {-99: refused, -98: do not know}, scale: sd}
  - {name: it3, label: Item 3, type: integer, range: [1, 5], missing: {-99: refused}, scale: sd, reverse: true}
  - {name: it4, label: Item 4, type: integer, range: [1, 5], missing: {-99: refused}, scale: sd}
  - {name: it5, label: Item 5, type: integer, range: [1, 5], missing: {-99: refused}, scale: sd}
  - {name: it6, label: Item 6, type: integer, range: [1, 5], missing: {-99: refused}, scale: sd}
  - {name: screen, label: Screen hours, type: number, range: [0, 12], waves: [1]}
  - {name: start, label: Start time, type: category, levels: {1: early, 2: mid, 3: late}, ordered: true, waves: [1]}
  - {name: sex, label: Sex, type: category, levels: {1: girl, 2: boy}}
  - {name: email, label: Email, type: text, identifier: true}
scales:
  sd: {label: Sleep difficulty}
"""

CONFIG = """\
# settings of the invented test panel
data: [data/raw/panel.csv]
codebook: config/codebook.yaml
seed: 20261202
report: {min_cell: 5}
"""

ITEMS = ["it1", "it2", "it3", "it4", "it5", "it6"]


def make_panel(n: int = 300, seed: int = 1, email: bool = True) -> pd.DataFrame:
    """Raw long rows: 3 waves with attrition, 6 correlated items (1-5) with missing codes."""
    rng = np.random.default_rng(seed)
    pid = rng.choice(np.arange(1000, 9000), size=n, replace=False)
    screen = np.clip(rng.gamma(2.0, 1.5, n), 0, 12).round(1)
    start = rng.choice([1, 2, 3], n, p=[0.3, 0.5, 0.2])
    sex = rng.choice([1, 2], n)
    latent = 0.3 * (screen - 3) + rng.normal(0, 1, n)
    rows = []
    for w in (1, 2, 3):
        keep = rng.random(n) < (1.0 if w == 1 else 0.85 - 0.1 * w)
        for i in np.flatnonzero(keep):
            level = latent[i] + 0.2 * w + rng.normal(0, 0.4)
            items = [int(np.clip(np.round(3 + level + rng.normal(0, 0.7)), 1, 5)) for _ in ITEMS]
            items[2] = 6 - items[2]
            coded = []
            for k, v in enumerate(items):
                u = rng.random()
                if u < 0.05:
                    v = -99
                elif u < 0.08 and k < 2:
                    v = -98
                coded.append(v)
            row = dict(pid=int(pid[i]), wave=w, **dict(zip(ITEMS, coded)),
                       screen=screen[i] if w == 1 else None, start=int(start[i]) if w == 1 else None,
                       sex=int(sex[i]), email=f"pupil{pid[i]}@school.example" if email else None)
            rows.append(row)
    return pd.DataFrame(rows)


def _lock_text() -> str:
    from wavetrail import environment

    return environment.lock_text()


def _record(root: Path, step: str, inputs: list[str], outputs: list[str], params=None, wildcards=None,
            seed: int = 0, commit: str | None = None) -> dict:
    from wavetrail import environment, ledger

    return {
        "schema": ledger.SCHEMA, "step": step, "wildcards": wildcards or {},
        "inputs": ledger.file_entries(root, inputs), "outputs": ledger.file_entries(root, outputs),
        "params": params or {}, "seed": seed, "started": "2026-12-01T10:00:00+00:00",
        "finished": "2026-12-01T10:00:05+00:00", "python": environment.interpreter(),
        "platform": "test-platform", "packages": {"numpy": np.__version__, "pandas": pd.__version__},
        "lock_sha256": environment.fingerprint(), "git": {"commit": commit, "dirty": True},
        "wavetrail": "0.1.0",
    }


def write_results(root: Path, commit: str, extra_outputs: dict | None = None) -> None:
    """Result tables computed from the raw data, the lock and one ledger record per job."""
    from wavetrail import ledger
    from wavetrail._io import atomic_write_text, write_json, write_table
    from wavetrail.codebook import load_codebook
    from wavetrail.panel import load_panel

    import yaml

    data_file = yaml.safe_load((root / "config/config.yaml").read_text())["data"][0]
    cb = load_codebook(root / "config/codebook.yaml")
    panel = load_panel([root / data_file], cb)
    long = panel.long
    from wavetrail.stored_panel import STORED_PANEL, write_stored_panel

    write_stored_panel(panel, root / STORED_PANEL, codebook_path=root / "config/codebook.yaml")
    atomic_write_text(root / "environment/requirements.lock", _lock_text())
    write_table(root / "results/checks/data_registry.csv",
                pd.DataFrame({"file": [data_file], "state": ["registered"]}))
    keyed = long.copy()
    keyed["score"] = keyed[[c for c in ITEMS]].mean(axis=1)
    keyed["n_items"] = keyed[ITEMS].notna().sum(axis=1)
    scores = pd.DataFrame({"id": keyed["pid"], "wave": keyed["wave"], "scale": "sd",
                           "score": keyed["score"], "n_items": keyed["n_items"]})
    write_table(root / "results/scores/scores.csv", scores)
    desc = scores.groupby("wave")["score"].agg(["count", "mean", "std"]).reset_index()
    desc = desc.rename(columns={"count": "n", "std": "sd"})
    write_table(root / "results/checks/descriptives.csv", desc)
    growth = pd.DataFrame({"model": ["linear"], "n": [int(scores["id"].nunique())],
                           "slope": [float(np.polyfit(scores["wave"], scores["score"].fillna(scores["score"].mean()),
                                                      1)[0])]})
    write_table(root / "results/growth/fit.csv", growth)
    write_json(root / "results/growth/summary.json", {"slope": float(growth["slope"][0]), "waves": [1, 2, 3]})
    for rel, text in (extra_outputs or {}).items():
        atomic_write_text(root / rel, text)
    records = {
        "lock_environment": _record(root, "lock_environment", [], ["environment/requirements.lock"],
                                    commit=commit),
        "confirm_raw_hashes": _record(root, "confirm_raw_hashes", [data_file, "data/SHA256SUMS"],
                               ["results/checks/data_registry.csv"], commit=commit),
        "check_data": _record(root, "check_data", [data_file, "config/codebook.yaml",
                                                   "results/checks/data_registry.csv"],
                              [STORED_PANEL], commit=commit),
        "score_scales": _record(root, "score_scales", [data_file, "config/codebook.yaml",
                                                       "results/checks/data_registry.csv"],
                                ["results/scores/scores.csv"], params={"scales": ["sd"]}, seed=11,
                                commit=commit),
        "describe": _record(root, "describe", ["results/scores/scores.csv", STORED_PANEL],
                            ["results/checks/descriptives.csv", "results/growth/fit.csv",
                             "results/growth/summary.json", *(extra_outputs or {})],
                            params={"settings": {"shape": "linear"}}, wildcards={"outcome": "sd"}, seed=12,
                            commit=commit),
    }
    for name, rec in records.items():
        write_json(root / ledger.LEDGER_DIR / ledger.record_name(name, rec["wildcards"]), rec)


SNAKEFILE = """\
# the workflow of the test project: one rule recomputes every result table and its ledger records
import sys
from pathlib import Path
sys.path.insert(0, {tests!r})
configfile: "config/config.yaml"

rule all:
    input: "results/growth/fit.csv"

rule compute_all:
    input: config["data"]
    output: "results/growth/fit.csv"
    run:
        from test_archive_helpers import write_results
        write_results(Path("."), None)
"""


def make_project(root: Path, n: int = 300, seed: int = 1, email: bool = True,
                 extra_outputs: dict | None = None, workflow: bool = False) -> Path:
    """A committed project with results and ledger (raw data git-ignored, as for data kept private).

    With ``workflow=True`` its Snakefile really recomputes the results (for rebuild tests).
    """
    import git

    from wavetrail._io import atomic_write_text, write_table
    from wavetrail.registry import write_registry
    from wavetrail._io import sha256_file

    root = Path(root)
    atomic_write_text(root / "config/config.yaml", CONFIG)
    atomic_write_text(root / "config/codebook.yaml", CODEBOOK)
    atomic_write_text(root / "workflow/Snakefile", SNAKEFILE.format(tests=str(Path(__file__).parent))
                      if workflow else "# the workflow of the test project\n")
    atomic_write_text(root / ".gitignore", "data/raw/\n.snakemake/\nlogs/\n")
    atomic_write_text(root / "README.md", "# Invented test panel\n")
    write_table(root / "data/raw/panel.csv", make_panel(n, seed, email=email))
    write_registry(root, {"data/raw/panel.csv": sha256_file(root / "data/raw/panel.csv")})
    repo = git.Repo.init(root)
    repo.git.add("-A")
    env = {"GIT_AUTHOR_NAME": "tester", "GIT_AUTHOR_EMAIL": "t@localhost",
           "GIT_COMMITTER_NAME": "tester", "GIT_COMMITTER_EMAIL": "t@localhost",
           "GIT_AUTHOR_DATE": "2026-12-01T09:00:00+00:00", "GIT_COMMITTER_DATE": "2026-12-01T09:00:00+00:00"}
    with repo.git.custom_environment(**env):
        repo.git.commit("-q", "-m", "test project", "--no-gpg-sign")
    write_results(root, repo.head.commit.hexsha, extra_outputs)
    return root
