"""Stand-in rows: never a real row or id; codebook types, ranges, levels, missing rates, wave
structure and (within stated tolerances) the real correlations are kept."""

from __future__ import annotations

import re

import numpy as np
import pandas as pd
import pytest

from test_archive_helpers import CODEBOOK, ITEMS, make_panel
from wavetrail.archive.stand_in import LABEL, nearest_correlation, normal_scores, pairwise_corr, synthesize
from wavetrail.codebook import parse_codebook
from wavetrail.panel import load_panel

N = 800  # people, the size of the demo panel


@pytest.fixture(scope="module")
def made():
    cb = parse_codebook(CODEBOOK)
    real = load_panel(make_panel(N, seed=5), cb)
    stand = synthesize(real, seed=99)
    again = load_panel(stand.frame, cb)  # the stand-in reads back through the normal loader
    return cb, real, stand, again


def _keys(long: pd.DataFrame, names: list[str]) -> set:
    parts = []
    for n in names:
        col = long[n]
        parts.append(col.astype(object).where(col.notna(), None).map(lambda v: None if v is None else f"{float(v):.10g}"
                                                                      if not isinstance(v, str) else v).tolist())
    return set(zip(*parts))


def test_no_stand_in_row_equals_a_real_row(made):
    cb, real, stand, again = made
    names = ["wave", *ITEMS, "screen", "start", "sex"]
    overlap = _keys(real.long, names) & _keys(again.long, names)
    assert overlap == set()
    # the guard had real work to do: with 6 five-point items many natural draws repeat a real row
    assert stand.redrawn > 0


def test_no_real_id_and_labelled_identifiers(made):
    cb, real, stand, again = made
    assert set(real.long["pid"]) & set(again.long["pid"]) == set()
    assert again.long["pid"].nunique() == real.long["pid"].nunique()
    emails = set(real.long["email"].dropna())
    assert not emails & set(stand.frame["email"].dropna())
    assert stand.frame["email"].str.contains(LABEL).all()


def test_types_ranges_and_levels_follow_the_codebook(made):
    cb, real, stand, again = made
    for item in ITEMS:
        values = again.long[item].dropna()
        assert values.between(1, 5).all() and (values == values.round()).all()
    screen = again.long["screen"].dropna()
    lo, hi = real.long["screen"].min(), real.long["screen"].max()
    assert screen.between(lo, hi).all() and screen.between(0, 12).all()
    assert (screen == screen.round(1)).all()  # recorded with the real data's one decimal
    assert set(again.long["start"].dropna().unique()) <= {1, 2, 3}
    # first-wave-only variables stay first-wave-only
    assert again.long.loc[again.long["wave"] != 1, ["screen", "start"]].isna().all().all()
    # sex never changes within a person, as in the real data
    assert (again.long.groupby("pid")["sex"].nunique() == 1).all()


def test_margins_missing_rates_and_codes(made):
    cb, real, stand, again = made
    for w in (1, 2, 3):
        r = real.long[real.long["wave"] == w]
        s = again.long[again.long["wave"] == w]
        for item in ITEMS:
            # missing share among the rows present at that wave: drawn exactly, then at most a few
            # cells move when a row had to be changed; tolerance 0.02
            assert abs(r[item].isna().mean() - s[item].isna().mean()) <= 0.02, (w, item)
            # means of the 1-5 items: sampling error of ~600 draws is ~0.05; tolerance 0.15
            assert abs(r[item].mean() - s[item].mean()) <= 0.15, (w, item)
    # the reasons keep their mix: -98 only where the codebook allows it, shares within 0.05
    real_codes = real.missing_reasons.groupby("variable")["code"].value_counts(normalize=True)
    fake_codes = again.missing_reasons.groupby("variable")["code"].value_counts(normalize=True)
    assert set(fake_codes.index) <= set(real_codes.index)
    joined = pd.concat([real_codes, fake_codes], axis=1, keys=["real", "fake"]).fillna(0)
    assert (joined["real"] - joined["fake"]).abs().max() <= 0.1
    for cat in ("start", "sex"):
        r = real.long[cat].value_counts(normalize=True).sort_index()
        s = again.long[cat].value_counts(normalize=True).sort_index()
        assert (r - s).abs().max() <= 0.05, cat


def test_wave_structure_is_kept(made):
    cb, real, stand, again = made
    for w in (1, 2, 3):
        r = real.long.loc[real.long["wave"] == w, "pid"].nunique() / real.long["pid"].nunique()
        s = again.long.loc[again.long["wave"] == w, "pid"].nunique() / again.long["pid"].nunique()
        assert abs(r - s) <= 0.05, w  # participation share per wave


def _wide(long: pd.DataFrame) -> pd.DataFrame:
    w = long.pivot(index="pid", columns="wave", values=ITEMS)
    w.columns = [f"{a}_{b}" for a, b in w.columns]
    base = long[long["wave"] == 1].set_index("pid")[["screen"]]
    return w.join(base)


def test_correlations_are_close(made):
    cb, real, stand, again = made
    a = _wide(real.long).corr(method="spearman").to_numpy()
    b = _wide(again.long).corr(method="spearman").to_numpy()
    off = ~np.eye(len(a), dtype=bool)
    diff = np.abs(a - b)[off]
    # tolerance: mean absolute difference of Spearman correlations <= 0.05, largest <= 0.2
    # (pairs across waves rest on ~400 people each: sampling error ~0.04 per pair)
    assert diff.mean() <= 0.05
    assert diff.max() <= 0.2
    # and the copula's own measure: normal-score correlations of every column pair
    d = np.abs(stand.target_corr - stand.achieved_corr)
    assert d.mean() <= 0.05
    # the structure is really there to be kept: items correlate about .5 across waves
    assert np.median(a[off]) > 0.3


def test_same_seed_same_rows_other_seed_other_rows():
    cb = parse_codebook(CODEBOOK)
    real = load_panel(make_panel(200, seed=3), cb)
    one = synthesize(real, seed=1).frame
    two = synthesize(real, seed=1).frame
    three = synthesize(real, seed=2).frame
    pd.testing.assert_frame_equal(one, two)
    assert not one.equals(three)


def test_normal_scores_and_correlation_repair():
    x = np.array([3.0, 1.0, np.nan, 2.0, 2.0])
    z = normal_scores(x)
    assert np.isnan(z[2])
    # mid-ranks 4, 1, 2.5, 2.5 of n = 4 -> Phi^-1(r / 5)
    from scipy.stats import norm
    np.testing.assert_allclose(z[[0, 1, 3, 4]], norm.ppf(np.array([4, 1, 2.5, 2.5]) / 5))
    bad = np.array([[1, 0.9, -0.9], [0.9, 1, 0.9], [-0.9, 0.9, 1]])  # not positive definite
    assert np.linalg.eigvalsh(bad).min() < 0
    fixed = nearest_correlation(bad)
    assert np.linalg.eigvalsh(fixed).min() > 0
    np.testing.assert_allclose(np.diag(fixed), 1.0)
    rng = np.random.default_rng(0)
    y = rng.multivariate_normal([0, 0], [[1, 0.6], [0.6, 1]], size=4000)
    y[rng.random(4000) < 0.3, 1] = np.nan
    r = pairwise_corr(y)
    assert abs(r[0, 1] - np.corrcoef(y[~np.isnan(y[:, 1])].T)[0, 1]) < 1e-12


# ---------------------------------------------------------------- wide raw data
WIDE_CODEBOOK = CODEBOOK.replace("  wave: wave\n", '  wide: "{name}_w{wave}"\n').replace(
    "  - {name: wave, label: Wave, type: integer}\n", "")


def _to_wide(raw: pd.DataFrame, cb) -> pd.DataFrame:
    """The invented long rows as a wide file: one row per person, ``{name}_w{wave}`` columns."""
    out = pd.DataFrame({"pid": pd.unique(raw["pid"])}).set_index("pid")
    for w in cb.study.waves:
        at = raw[raw["wave"] == w].set_index("pid")
        for v in cb.data_variables():
            if v.name != "pid" and v.measured_at(w):
                out[cb.study.wide_column(v.name, w)] = at[v.name]
    return out.reset_index()


@pytest.fixture(scope="module")
def made_wide(tmp_path_factory):
    from wavetrail._io import write_table

    cb = parse_codebook(WIDE_CODEBOOK)
    assert cb.layout == "wide"
    raw = _to_wide(make_panel(N, seed=5), cb)
    real = load_panel(raw, cb)
    stand = synthesize(real, seed=99)
    # written as packing writes it, and read back through the normal loader in the wide layout
    path = tmp_path_factory.mktemp("wide") / "panel-standin.csv"
    write_table(path, stand.frame)
    again = load_panel(path, cb)
    return cb, raw, real, stand, again


def test_wide_stand_in_keeps_the_layout_and_never_a_real_row_or_id(made_wide):
    cb, raw, real, stand, again = made_wide
    assert list(stand.frame.columns)[0] == "pid" and "wave" not in stand.frame.columns
    assert set(stand.frame.columns) == set(raw.columns)
    assert stand.frame["pid"].is_unique and len(stand.frame) == real.long["pid"].nunique()
    assert set(real.long["pid"]) & set(again.long["pid"]) == set()
    assert stand.frame["email_w1"].dropna().str.contains(LABEL).all()
    names = ["wave", *ITEMS, "screen", "start", "sex"]
    assert _keys(real.long, names) & _keys(again.long, names) == set()
    # nor does a whole wide row repeat a real person's row
    cols = [c for c in raw.columns if c != "pid" and not c.startswith("email")]
    real_rows = set(raw[cols].astype(str).itertuples(index=False, name=None))
    assert not real_rows & set(stand.frame[cols].astype(str).itertuples(index=False, name=None))


def test_wide_stand_in_ranges_rates_waves_and_correlations(made_wide):
    cb, raw, real, stand, again = made_wide
    for w in (1, 2, 3):
        r = real.long[real.long["wave"] == w]
        s = again.long[again.long["wave"] == w]
        # participation share per wave within 0.05
        assert abs(len(r) / real.long["pid"].nunique() - len(s) / again.long["pid"].nunique()) <= 0.05
        for item in ITEMS:
            values = s[item].dropna()
            assert values.between(1, 5).all() and (values == values.round()).all()
            # same tolerances as for long data: missing share 0.02, item mean 0.15
            assert abs(r[item].isna().mean() - s[item].isna().mean()) <= 0.02, (w, item)
            assert abs(r[item].mean() - s[item].mean()) <= 0.15, (w, item)
    assert again.long.loc[again.long["wave"] != 1, ["screen", "start"]].isna().all().all()
    a = _wide(real.long).corr(method="spearman").to_numpy()
    b = _wide(again.long).corr(method="spearman").to_numpy()
    off = ~np.eye(len(a), dtype=bool)
    diff = np.abs(a - b)[off]
    # tolerance as for long data: mean absolute difference <= 0.05, largest <= 0.2
    assert diff.mean() <= 0.05 and diff.max() <= 0.2


# ----------------------------------------------------------------------------- closeness to real rows


def _brute_nearest(real_enc: pd.DataFrame, fake_enc: pd.DataFrame, wave: str = "wave") -> np.ndarray:
    """Each stand-in row's distance (differing cells) to its nearest real row of the same wave, by loops."""
    cols = [c for c in real_enc.columns if c not in (wave, "__row")]
    out = []
    for _, f in fake_enc.iterrows():
        same = real_enc[real_enc[wave] == f[wave]]
        out.append(min(int(sum(f[c] != r[c] for c in cols)) for _, r in same.iterrows()))
    return np.array(out)


def test_closeness_recovers_known_distances():
    from wavetrail.archive.stand_in import closeness

    # wave 1: real rows 0 and 1 lie one cell apart (not isolated); wave 2: one real row (isolated)
    real = pd.DataFrame({"wave": ["1", "1", "2"], "a": ["1", "2", "3"], "b": ["1", "1", "NA"], "c": ["5", "5", "5"]})
    fake = pd.DataFrame({"wave": ["1", "1", "2", "2"], "a": ["1", "3", "3", "1"], "b": ["2", "2", "NA", "1"],
                         "c": ["5", "4", "4", "5"]})
    near = closeness(real, fake, "wave")
    expected = _brute_nearest(real, fake)
    assert list(expected) == [1, 3, 1, 2]
    assert near["within_one"] == 2 and near["share_within_one"] == 0.5
    assert near["min_distance"] == 1 and near["median_distance"] == 1.5 and near["cells"] == 3
    assert near["equal"] == 0
    assert closeness(real, real.iloc[[0, 2]], "wave")["equal"] == 2
    # real rows within one cell of another real row: 2 of 3; allowance = 0.10 + 3 binomial SEs over 4 rows
    assert near["real_share_within_one"] == pytest.approx(2 / 3)
    assert near["allowed_share"] == pytest.approx(min(1.0, 2 / 3 + 0.10 + 3 * np.sqrt(2 / 9 / 4)))


def test_stand_in_rows_are_not_closer_to_real_rows_than_real_rows_are_to_each_other(made):
    from wavetrail.archive.stand_in import _comparable_real, _encoded_frame, closeness, closeness_problems

    cb, real, stand, again = made
    vars_out = [v for v in cb.variables.values() if v.name not in ("pid", "wave")]
    real_enc = _comparable_real(real.long, cb, "pid", "wave", vars_out)
    fake_enc = _encoded_frame(again.long, cb, vars_out, "wave")
    near = closeness(real_enc, fake_enc, "wave")
    assert near == {k: stand.closeness[k] for k in near}  # the figures pack prints are these
    assert near["equal"] == 0 and near["min_distance"] >= 1
    assert near["share_within_one"] <= near["allowed_share"]
    assert closeness_problems(near) == []
    # an independent count by loops over a sample of stand-in rows: the same distances
    sample = fake_enc.sample(60, random_state=3)
    nearest = _brute_nearest(real_enc, sample)
    assert nearest.min() >= near["min_distance"]
    # with 7 to 9 five-level cells per row, closeness is natural: real rows are often one cell apart
    assert near["real_share_within_one"] > 0.2
    # a copy of real rows is refused by the same measure
    copy = closeness(real_enc, real_enc.drop(columns="__row", errors="ignore"), "wave")
    assert copy["equal"] == len(real_enc)
    assert any("copy the real ones" in p for p in closeness_problems(copy))


CODEBOOK_TEXT = CODEBOOK.replace(
    "  - {name: email, label: Email, type: text, identifier: true}\n",
    "  - {name: email, label: Email, type: text, identifier: true}\n"
    "  - {name: remark, label: Remark at intake, type: text, waves: [1]}\n")


def test_placeholders_follow_the_real_waves_and_fill_rates():
    cb = parse_codebook(CODEBOOK_TEXT)
    raw = make_panel(400, seed=8)
    rng = np.random.default_rng(4)
    first = raw["wave"] == 1
    raw["remark"] = None
    pick = raw.index[first][rng.random(int(first.sum())) < 0.10]
    raw.loc[pick, "remark"] = "asked to skip item 3"
    gone = rng.random(len(raw)) < 0.3
    raw.loc[gone, "email"] = None
    real = load_panel(raw, cb)
    stand = synthesize(real, seed=5).frame
    w = stand["wave"].to_numpy()
    remark = stand["remark"].notna().to_numpy()
    assert not remark[w != 1].any()  # measured once: written once
    real_share = float(raw.loc[first, "remark"].notna().mean())
    assert abs(remark[w == 1].mean() - real_share) < 1.0 / (w == 1).sum() + 1e-9
    for wave in (1, 2, 3):
        real_rate = float(raw.loc[raw["wave"] == wave, "email"].notna().mean())
        made_rate = float(stand.loc[w == wave, "email"].notna().mean())
        assert abs(made_rate - real_rate) <= 1.0 / (w == wave).sum() + 1e-9, (wave, made_rate, real_rate)
    assert stand["remark"].dropna().str.startswith("[STAND-IN text").all()


def test_pack_prints_the_closeness_and_refuses_above_the_threshold(tmp_path, capsys, monkeypatch):
    import zipfile

    from test_archive_helpers import make_project
    from wavetrail.archive import stand_in as standin_mod
    from wavetrail.cli import main

    root = make_project(tmp_path / "proj", n=150, email=False)
    assert main(["pack", str(root), "--raw", "stand-in", "-o", str(tmp_path / "s.zip")]) == 0
    out = " ".join(capsys.readouterr().out.split())
    assert re.search(r"stand-in closeness: \d+ of \d+ stand-in rows", out) and "0 equal a real row" in out
    with zipfile.ZipFile(tmp_path / "s.zip") as zf:
        readme = zf.read("proj-stand-in/data/ARCHIVE-README.md").decode()
    assert "stand-in closeness:" in readme and "0 equal a real row" in readme
    monkeypatch.setattr(standin_mod, "FIT_MARGIN", -1.0)  # the allowance now lies below any share
    code = main(["pack", str(root), "--raw", "stand-in", "-o", str(tmp_path / "t.zip")])
    text = " ".join(capsys.readouterr().err.split())
    assert code == 1 and "too close to the real rows" in text and "Traceback" not in text
    assert not (tmp_path / "t.zip").exists()
