"""`build_project`: the Snakemake workflow wiring, failures, profiles, end-to-end runs."""

from __future__ import annotations

import os
import re
import subprocess
import sys
import zipfile
from pathlib import Path

import pytest

from wavetrail.build import build_project
from wavetrail.errors import BuildError, UsageError
from wavetrail.project import make_demo

REPO = Path(__file__).resolve().parents[1]
STAGES = [
    "confirm_raw_hashes", "lock_environment", "check_data", "score_scales", "assess_reliability",
    "test_invariance", "fit_growth", "grow_forest_shard", "merge_forest", "summarise_forest", "render_report",
]


def _set_forest(root: Path, **values) -> None:
    text = (root / "config" / "config.yaml").read_text()
    for key, value in values.items():
        text, n = re.subn(rf"(?m)^(  {key}:) *\S+", rf"\g<1> {value}", text)
        assert n == 1, key
    (root / "config" / "config.yaml").write_text(text)


@pytest.fixture
def demo_project(tmp_path):
    return make_demo(tmp_path / "demo")


def test_dry_run_plans_every_stage_and_one_job_per_shard(demo_project):
    _set_forest(demo_project, shards=3)
    result = build_project(demo_project, cores=2, extra=["--dry-run"])
    counts = {rule: result.jobs.count(rule) for rule in set(result.jobs)}
    assert set(counts) == set(STAGES)
    assert counts["grow_forest_shard"] == 3
    assert sum(counts.values()) == len(STAGES) - 1 + 3
    # a dry run writes no result
    assert not (demo_project / "results" / "checks" / "findings.csv").exists()


def test_forest_can_be_left_out(demo_project):
    text = (demo_project / "config" / "config.yaml").read_text().replace("enabled: true", "enabled: false")
    (demo_project / "config" / "config.yaml").write_text(text)
    result = build_project(demo_project, extra=["--dry-run"])
    assert "grow_forest_shard" not in result.jobs and "summarise_forest" not in result.jobs
    assert "render_report" in result.jobs


def test_rules_pass_the_linter_except_the_environment_advice(demo_project):
    # every rule runs in the project's locked environment (environment/requirements.lock),
    # so Snakemake's advice to give each rule a conda environment or container is the only lint
    proc = subprocess.run([sys.executable, "-m", "snakemake", "--lint"], cwd=demo_project,
                          capture_output=True, text=True)
    titles = {line.strip()[2:] for line in (proc.stdout + proc.stderr).splitlines()
              if line.startswith("    * ")}
    assert titles == {"Specify a conda environment or container for each rule.:"}, proc.stdout + proc.stderr


def test_unknown_profile_is_a_usage_error(demo_project):
    with pytest.raises(UsageError, match="no profile 'nowhere'"):
        build_project(demo_project, profile="nowhere")


def test_changed_raw_data_fails_the_first_job_with_its_message(demo_project):
    raw = demo_project / "data" / "raw" / "panel.csv"
    raw.write_text(raw.read_text() + "99999,1,12.5" + "," * 44 + "\n")
    with pytest.raises(BuildError) as info:
        build_project(demo_project, cores=1)
    text = str(info.value)
    assert "rule confirm_raw_hashes failed" in text
    assert "panel.csv" in text
    assert "logs/provenance/confirm_raw_hashes.log" in text


def _result_tables(root: Path) -> dict[str, bytes]:
    out = {}
    for path in sorted((root / "results").rglob("*")):
        rel = path.relative_to(root).as_posix()
        if path.is_file() and not rel.startswith("results/ledger/") and path.suffix in (".csv", ".json"):
            out[rel] = path.read_bytes()
    return out


def _missing_steps() -> list[str]:
    """Step modules of wavetrail.stages.STEPS that cannot be imported (yet)."""
    import importlib

    from wavetrail.stages import STEPS

    missing = []
    for target in sorted(set(STEPS.values())):
        module, func = target.split(":")
        try:
            if not hasattr(importlib.import_module(module), func):
                missing.append(target)
        except Exception:  # noqa: BLE001 - any import failure means the stage cannot run
            missing.append(target)
    return missing


@pytest.fixture(scope="module")
def built_demo(tmp_path_factory):
    """One demo project (few trees) built locally, plus an unbuilt copy of it."""
    import shutil

    missing = _missing_steps()
    if missing:
        pytest.skip(f"workflow steps not importable yet: {', '.join(missing)}")

    base = tmp_path_factory.mktemp("built")
    root = make_demo(base / "local", trees=16)
    pristine = base / "pristine"
    shutil.copytree(root, pristine, symlinks=True)
    lines: list[str] = []
    result = build_project(root, cores=2, progress=lines.append)
    return root, pristine, result, lines


@pytest.mark.slow
def test_new_project_builds_end_to_end_and_a_second_build_runs_nothing(built_demo):
    root, _, result, lines = built_demo
    assert set(result.jobs) == set(STAGES)
    assert any(line.startswith("[") and "finished" in line for line in lines)
    for rel in ("results/checks/findings.csv", "results/checks/descriptives.csv", "results/checks/attrition.csv",
                "results/checks/data_registry.csv", "results/scores/scores.csv",
                "results/scores/reliability.csv", "results/scores/invariance.csv",
                "results/growth/fit.csv", "results/growth/estimates.csv", "results/growth/comparison.csv",
                "results/growth/trajectories.png", "results/forest/forest.json",
                "results/forest/importance.csv", "results/forest/dependence.csv",
                "results/forest/interactions.csv", "results/forest/dependence_pairs.csv",
                "results/forest/importance_plot.png",
                "results/write-up/report.html", "results/write-up/report.ipynb",
                "environment/requirements.lock"):
        assert (root / rel).is_file() and (root / rel).stat().st_size > 0, rel
    assert result.report == root / "results" / "write-up" / "report.html"
    again = build_project(root, cores=2)
    assert again.jobs == [] and again.up_to_date
    assert "nothing to do" in again.summary


@pytest.mark.slow
def test_built_demo_uses_todays_names(built_demo):
    # every text file a build writes or a new project holds (results, report, settings,
    # workflow, docs; hidden folders such as .git and .snakemake aside) is free of the
    # earlier names listed in tests/test_names.py
    from test_names import EARLIER_NAMES, _hits

    root = built_demo[0]
    found, scanned = {}, 0
    for path in sorted(root.rglob("*")):
        rel = path.relative_to(root)
        if not path.is_file() or any(part.startswith(".") for part in rel.parts) or path.suffix == ".png":
            continue
        try:
            text = path.read_text(encoding="utf-8")
        except UnicodeDecodeError:
            continue
        scanned += 1
        if _hits(text, EARLIER_NAMES):
            found[str(rel)] = _hits(text, EARLIER_NAMES)
    assert scanned > 50 and (root / "results/write-up/report.html").is_file()
    assert found == {}


@pytest.mark.slow
def test_cluster_executor_gives_the_same_tables_as_a_local_run(built_demo, tmp_path):
    """The generic cluster executor with a local submit script (jobs run in the background)."""
    local, cluster, _, _ = built_demo
    submit = tmp_path / "submit.sh"
    submit.write_text('#!/bin/bash\njs="${@: -1}"\nnohup bash "$js" > "$js.out" 2>&1 &\necho "local-$!"\n')
    submit.chmod(0o755)
    profile = cluster / "workflow" / "profiles" / "localcluster"
    profile.mkdir()
    (profile / "config.yaml").write_text(
        "executor: cluster-generic\n"
        f"cluster-generic-submit-cmd: {submit}\n"
        "jobs: 2\n"
        "latency-wait: 10\n"
        "rerun-incomplete: true\n"
        "default-resources:\n  runtime: 30\n  mem_mb: 1000\n"
    )
    result = build_project(cluster, cores=2, profile="localcluster")
    assert set(result.jobs) == set(STAGES)
    a, b = _result_tables(local), _result_tables(cluster)
    assert a.keys() == b.keys() and len(a) > 10
    assert [k for k in a if a[k] != b[k]] == []


@pytest.mark.slow
def test_wheel_carries_template_rules_and_examples(tmp_path):
    proc = subprocess.run([sys.executable, "-m", "pip", "wheel", "--no-deps", "--no-build-isolation",
                           "-w", str(tmp_path), str(REPO)], capture_output=True, text=True)
    assert proc.returncode == 0, proc.stderr[-2000:]
    (wheel,) = tmp_path.glob("wavetrail-*.whl")
    names = set(zipfile.ZipFile(wheel).namelist())
    for member in ("wavetrail/_bundled/template/cookiecutter.json",
                   "wavetrail/_bundled/template/{{cookiecutter.project_slug}}/workflow/Snakefile",
                   "wavetrail/_bundled/rules/common.smk",
                   "wavetrail/_bundled/rules/forest.smk",
                   "wavetrail/_bundled/rules/scripts/run_step.py",
                   "wavetrail/_bundled/examples/demo_panel/simulate.py",
                   "wavetrail/schemas/config.schema.json"):
        assert member in names, member
    # the installed wheel finds them through wavetrail.resources (unpacked, not imported from the checkout)
    target = tmp_path / "site"
    zipfile.ZipFile(wheel).extractall(target)
    code = ("import wavetrail.resources as r; print(r.template_dir()); print(r.rules_dir()); print(r.examples_dir())")
    env = dict(os.environ, PYTHONPATH=str(target))
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, env=env, cwd=tmp_path)
    assert out.returncode == 0, out.stderr
    for line in out.stdout.split():
        assert line.startswith(str(target / "wavetrail" / "_bundled")), line
