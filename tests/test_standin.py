"""Stand-in rows: never a real row or id; codebook types, ranges, levels, missing rates, wave
structure and (within stated tolerances) the real correlations are kept."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from test_archive_helpers import CODEBOOK, ITEMS, make_panel
from wavetrail.archive.standin import LABEL, nearest_correlation, normal_scores, pairwise_corr, synthesize
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
