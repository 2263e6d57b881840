"""One name per concept, names of our own, and files that stand on their own.

The earlier names listed in docs/changes.md must not come back in what a user reads: the
command-line help, the settings schema, the project template and the .gitignore a new
project gets, and the docs. Nor may any file point at documents that are not in the
repository. The changelog (docs/changes.md) names the earlier names on purpose, and the
code that still accepts them for one version is not scanned for them.
"""

from __future__ import annotations

import json
import re
import subprocess
import warnings
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]

#: earlier names (pattern -> what replaced it); matched in help, schema, template and docs
EARLIER_NAMES = {
    r"\bdata add\b": "wavetrail data register",
    r"\bdata status\b|register\|status": "wavetrail data compare",
    r"\bclosed data\b|\bdata are closed\b|\bclosed by default\b|\bwhile closed\b": "kept private",
    r"\bopen data\b|\bdata are open\b": "shareable",
    r"\bmeanstructure\b": "means=",
    r"\borthogonal\b": "uncorrelated=",
    r"\binformation\s*=": "se_from=",
    r"\bmethod:\s*score\b|\bforest\.method\b|\"method\":\s*\{": "forest.split",
    r"--project\b": "the positional PATH",
    r"\bused_features\b|\"feature\"": "predictor",
    r"\"format\":\s*\"wavetrail-forest": "\"schema\"",
    r"\bstandin\b|Stand-In-Data": "stand-in",
    r"\bverify_data\b": "confirm_raw_hashes",
    r"\bchen\b": "decision_all_indices",
    r"BagIt-Version:\s*0\.97": "BagIt-Version: 1.0",
    r"pack [^\n]*--data\b": "pack --raw",
    r"results/reports\b|\"results\", \"reports\"": "results/write-up",
}

#: references to documents outside the repository; matched in every file of the repository
OUTSIDE_DOCUMENTS = [
    r"\bDESIGN\b", r"NOTES\.md", r"issue author", r"when the issue was written",
    r"\bin the design\b", r"issue notes", r"/work/shared\b", r"\bshared/(?:DESIGN|NOTES|STYLE)",
]


def _hits(text: str, patterns, flags=0) -> list[str]:
    return [p for p in patterns if re.search(p, text, flags)]


def _cli_help() -> str:
    """The --help text of the program, every command and every subcommand (hidden ones aside)."""
    from typer.main import get_command
    from typer.testing import CliRunner

    from wavetrail.cli import app

    root = get_command(app)
    runner = CliRunner()
    texts = []

    def walk(cmd, path):
        out = runner.invoke(app, [*path, "--help"], terminal_width=200)
        assert out.exit_code == 0, (path, out.output)
        texts.append(out.output)
        for name, sub in sorted(getattr(cmd, "commands", {}).items()):
            if not getattr(sub, "hidden", False):
                walk(sub, [*path, name])

    walk(root, [])
    return "\n".join(texts)


def _docs() -> dict[str, str]:
    files = [*sorted((ROOT / "docs").rglob("*.md")), ROOT / "README.md", ROOT / "DEVELOPERS.md"]
    return {str(p.relative_to(ROOT)): p.read_text(encoding="utf-8") for p in files
            if p.name != "changes.md"}


def _template() -> dict[str, str]:
    from wavetrail.project import GITIGNORE

    out = {str(p.relative_to(ROOT)): p.read_text(encoding="utf-8")
           for p in sorted((ROOT / "template").rglob("*")) if p.is_file()}
    out["the .gitignore of a new project"] = GITIGNORE
    return out


def test_the_scan_finds_what_it_looks_for():
    # control: each pattern matches the earlier spelling it stands for
    earlier = ("wavetrail data add x", "wavetrail data status", "closed data", "open data",
               "meanstructure=TRUE", "orthogonal=True", 'information="observed"', "forest.method: score",
               "method: score", "-p/--project PATH", "used_features", '"format": "wavetrail-forest/1"',
               "standin", "Stand-In-Data", "verify_data", "chen", "BagIt-Version: 0.97",
               "wavetrail pack --data stand-in", "results/reports/figures")
    for text in earlier:
        assert _hits(text, EARLIER_NAMES), text
    for text in ("see DESIGN 2.3", "recorded in NOTES.md", "by the issue author", "in the design)",
                 "the issue notes", "/work/shared/x", "shared/NOTES.md"):
        assert _hits(text, OUTSIDE_DOCUMENTS), text
    # and today's names pass
    for text in ("wavetrail data register", "wavetrail data compare", "kept private", "shareable",
                 "se_from=", "means=", "uncorrelated=", "forest.split: scores", "stand-in", "Stand-in",
                 "confirm_raw_hashes", "decision_all_indices", "Chen (2007)", "BagIt-Version: 1.0",
                 "wavetrail pack --raw stand-in", "wavetrail new p --data panel.csv"):
        assert not _hits(text, EARLIER_NAMES), text


def test_cli_help_uses_todays_names():
    text = _cli_help()
    assert "register" in text and "compare" in text and "--raw" in text and "--json-to" in text
    assert _hits(text, EARLIER_NAMES) == []


def test_settings_schema_uses_todays_names():
    from wavetrail.config import config_schema

    schema = config_schema()
    assert "split" in schema["properties"]["forest"]["properties"]
    assert "method" not in schema["properties"]["forest"]["properties"]
    assert schema["properties"]["forest"]["properties"]["max_depth"]["default"] == 3
    assert _hits(json.dumps(schema), EARLIER_NAMES) == []


@pytest.mark.parametrize("source", ["docs", "template"])
def test_docs_and_template_use_todays_names(source):
    files = _docs() if source == "docs" else _template()
    assert files
    found = {name: _hits(text, EARLIER_NAMES) for name, text in files.items()}
    assert {k: v for k, v in found.items() if v} == {}


def _project_files() -> list[Path]:
    """The repository's own files: tracked by git when it is a clone, else every file outside
    hidden folders (virtual environments such as .ci-venv hold other projects' text)."""
    try:
        out = subprocess.run(["git", "ls-files", "-z"], cwd=ROOT, capture_output=True, check=True).stdout
        tracked = [ROOT / name for name in out.decode("utf-8").split("\0") if name]
        if tracked:
            return sorted(tracked)
    except (OSError, subprocess.CalledProcessError):
        pass
    return sorted(p for p in ROOT.rglob("*")
                  if not any(part.startswith(".") or part == "__pycache__" or "venv" in part
                             for part in p.relative_to(ROOT).parts))


def test_no_file_points_at_documents_outside_the_repository():
    this = Path(__file__).resolve()
    found = {}
    for p in _project_files():
        if (not p.is_file() or p.resolve() == this
                or p.suffix not in {".py", ".md", ".smk", ".json", ".yaml", ".ipynb", ".toml", ".txt", ""}):
            continue
        try:
            text = p.read_text(encoding="utf-8")
        except (UnicodeDecodeError, OSError):
            continue
        hits = _hits(text, OUTSIDE_DOCUMENTS)
        if hits:
            found[str(p.relative_to(ROOT))] = hits
    assert found == {}


def test_glossary_lists_each_concept_once():
    text = (ROOT / "docs" / "glossary.md").read_text(encoding="utf-8")
    names = re.findall(r"^\| ([^|]+?) \|", text, flags=re.M)
    names = [n for n in names if n not in ("name", "---")]
    assert len(names) >= 20
    assert len(names) == len(set(names)), [n for n in names if names.count(n) > 1]
    for concept in ("registry", "split test (`split`)", "predictor", "stand-in", "schema"):
        assert concept in names


def test_the_earlier_settings_key_is_read_with_a_warning_naming_file_and_line(tmp_path):
    from wavetrail.config import SettingRenamed, load_config

    path = tmp_path / "config.yaml"
    path.write_text("forest:\n  enabled: true\n  method: likelihood\n", encoding="utf-8")
    with pytest.warns(SettingRenamed, match=r"config\.yaml, line 3: forest\.method is renamed forest\.split"):
        cfg = load_config(path)
    assert cfg["forest"]["split"] == "likelihood_ratio" and "method" not in cfg["forest"]
    path.write_text("forest:\n  split: scores\n", encoding="utf-8")
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        assert load_config(path)["forest"]["split"] == "scores"


def test_both_the_earlier_and_todays_key_is_refused(tmp_path):
    from wavetrail.config import load_config
    from wavetrail.errors import ConfigError

    path = tmp_path / "config.yaml"
    path.write_text("forest:\n  split: scores\n  method: likelihood\n", encoding="utf-8")
    with pytest.raises(ConfigError, match=r"line 3: forest\.method .* both are set"):
        load_config(path)


def test_earlier_sem_argument_names_warn_and_give_the_same_fit():
    import numpy as np
    import pandas as pd

    from wavetrail.sem import fit_cfa

    rng = np.random.default_rng(3)
    f = rng.normal(size=(300, 2))
    data = pd.DataFrame({f"x{i}": f[:, i // 3] * 0.8 + rng.normal(scale=0.6, size=300) for i in range(6)})
    factors = {"a": ["x0", "x1", "x2"], "b": ["x3", "x4", "x5"]}
    new = fit_cfa(data, factors, uncorrelated=True, se_from="expected", means=False)
    with pytest.warns(DeprecationWarning, match="renamed"):
        old = fit_cfa(data, factors, orthogonal=True, information="expected", meanstructure=False)
    assert new.fit["loglik"] == pytest.approx(old.fit["loglik"], abs=1e-12)
    assert new.fit["aic"] == pytest.approx(old.fit["aic"], abs=1e-9)
    assert np.allclose(new.estimates["se"], old.estimates["se"], equal_nan=True)
    assert new.fit["se_type"] == "expected"
    # the uncorrelated model has one parameter fewer than the correlated one
    assert fit_cfa(data, factors, se_from="expected", means=False).fit["k"] == new.fit["k"] + 1
    with pytest.raises(TypeError, match="unexpected keyword"):
        fit_cfa(data, factors, orthogonl=True)


def test_the_cli_prints_the_renamed_setting_as_one_note(tmp_path, capsys, monkeypatch):
    from wavetrail.cli import main
    from wavetrail.project import new_project

    root = new_project(tmp_path / "p", author="Test <t@example.org>")
    cfg = root / "config" / "config.yaml"
    text = cfg.read_text(encoding="utf-8")
    lines = text.splitlines()
    at = next(i for i, line in enumerate(lines) if line.startswith("forest:"))
    lines.insert(at + 1, "  method: score")
    cfg.write_text("\n".join(lines) + "\n", encoding="utf-8")
    main(["check", str(root)])
    err = capsys.readouterr().err
    assert f"note: {cfg}, line {at + 2}: forest.method is renamed forest.split; write 'split: scores'" in err
    assert "warnings.warn" not in err and "config.py" not in err


def test_earlier_command_spellings_still_work_with_a_note(tmp_path, capsys, monkeypatch):
    from wavetrail.cli import main
    from wavetrail.project import new_project

    root = new_project(tmp_path / "p", author="Test <t@example.org>")
    (root / "data" / "raw").mkdir(parents=True, exist_ok=True)
    (root / "data" / "raw" / "panel.csv").write_text("id,wave,x\n1,1,2\n", encoding="utf-8")
    monkeypatch.chdir(tmp_path)
    # today's spelling: the project is found from the file, then compared by its PATH
    assert main(["data", "register", "p/data/raw/panel.csv"]) == 0
    assert "data/SHA256SUMS" not in capsys.readouterr().err
    assert main(["data", "compare", "p"]) == 0
    # the earlier spellings, with a note each
    assert main(["data", "status", "-p", "p"]) == 0
    err = capsys.readouterr().err
    assert "`wavetrail data status` is now `wavetrail data compare`" in err and "-p/--project" in err
    (root / "data" / "raw" / "panel.csv").write_text("id,wave,x\n1,1,3\n", encoding="utf-8")
    assert main(["data", "compare", "p"]) == 1
    assert main(["data", "add", "p/data/raw/panel.csv"]) == 0
    assert "is now `wavetrail data register`" in capsys.readouterr().err
    assert main(["data", "compare", "p"]) == 0


def test_the_bag_declares_bagit_1_0_and_still_validates(tmp_path):
    import bagit

    from wavetrail.archive.bag import make_bag, validate_bag

    staging = tmp_path / "bag"
    staging.mkdir()
    (staging / "results.csv").write_text("a,b\n1,2\n", encoding="utf-8")
    make_bag(staging, {"Project-Title": "t"}, date="2026-01-01", agent="wavetrail test")
    assert (staging / "bagit.txt").read_bytes() == b"BagIt-Version: 1.0\nTag-File-Character-Encoding: UTF-8\n"
    bag = bagit.Bag(str(staging))
    assert bag.version_info == (1, 0)
    bag.validate()  # the tag manifest carries the new bagit.txt hash
    assert validate_bag(staging, "bag") == []
    # control: a bagit.txt edited after the fact no longer matches the tag manifest
    (staging / "bagit.txt").write_bytes(b"BagIt-Version: 0.97\nTag-File-Character-Encoding: UTF-8\n")
    with pytest.raises(bagit.BagValidationError):
        bagit.Bag(str(staging)).validate()


def test_max_depth_has_one_default_in_settings_and_python():
    import inspect

    from wavetrail.config import default_config
    from wavetrail.forest import grow_forest, grow_tree

    assert default_config()["forest"]["max_depth"] == 3
    assert inspect.signature(grow_tree).parameters["max_depth"].default == 3
    assert inspect.signature(grow_forest).parameters["max_depth"].default == 3
    assert default_config()["forest"]["split"] == "scores"
    assert inspect.signature(grow_tree).parameters["split"].default == "scores"
