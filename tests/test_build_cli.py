"""Terminal output of build, ledger and plan: square brackets are text, `build -- ARGS` needs no path."""

from __future__ import annotations

from test_archive_helpers import make_project
from wavetrail.cli import main


def _out(capsys) -> str:
    captured = capsys.readouterr()
    return " ".join((captured.out + captured.err).split())


def test_ledger_shows_wildcards_in_brackets(tmp_path, capsys, monkeypatch):
    monkeypatch.setenv("COLUMNS", "200")
    root = make_project(tmp_path / "proj", n=60, email=False)
    assert main(["ledger", str(root)]) == 0
    assert "describe [outcome=sd]" in _out(capsys)


def test_plan_diff_keeps_the_brackets_of_a_key(tmp_path, capsys, monkeypatch):
    from wavetrail.plan import freeze_plan

    monkeypatch.setenv("COLUMNS", "200")
    root = make_project(tmp_path / "proj", n=60, email=False)
    freeze_plan(root, commit=False)
    cb = root / "config/codebook.yaml"
    cb.write_text(cb.read_text().replace("scale: sd, reverse: true}", "scale: sd, reverse: false}"))
    main(["plan", "diff", str(root)])
    assert "variables[it3].reverse" in _out(capsys)


def test_build_double_dash_arguments_go_to_snakemake_without_a_path(tmp_path, capsys, monkeypatch):
    """`wavetrail build -- --version`: the words after `--` reach Snakemake; the project is the current folder."""
    import wavetrail.build as build_mod

    seen = {}

    def fake_build(path, cores=1, profile=None, extra=(), progress=None):
        seen.update(path=str(path), extra=list(extra))
        return build_mod.BuildResult(project=tmp_path, jobs=["render_report"], dry_run=True)

    monkeypatch.setattr(build_mod, "build_project", fake_build)
    assert main(["build", "--", "--dry-run", "--quiet"]) == 0
    assert seen == {"path": ".", "extra": ["--dry-run", "--quiet"]}
    assert "dry run: nothing was built; 1 job would run: render_report" in _out(capsys)
    assert main(["build", str(tmp_path), "--", "--unlock"]) == 0
    assert seen == {"path": str(tmp_path), "extra": ["--unlock"]}
