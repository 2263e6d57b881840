"""Codebook loading: the documented format, schema errors with line numbers, drafting."""

import textwrap

import numpy as np
import pandas as pd
import pytest

from wavetrail.codebook import draft_codebook, load_codebook, parse_codebook
from wavetrail.errors import CodebookError, WavetrailError

EXAMPLE = textwrap.dedent("""\
    study:
      id: pid                      # person id column
      wave: wave
      waves: [1, 2, 3, 4, 5]
      time_scores: [0, 1, 2, 3, 4]
    variables:
      - name: pid
        label: Study number (pseudonymous)
        type: integer
      - name: slp1
        label: Trouble falling asleep
        type: integer
        range: [1, 5]
        missing: {-99: refused, -98: do not know}
        scale: sleep_difficulty
      - name: slp4
        label: Wakes up rested
        type: integer
        range: [1, 5]
        missing: {-99: refused, -98: do not know}
        scale: sleep_difficulty
        reverse: true
      - name: start_time
        label: School start time
        type: category
        levels: {1: before 8:00, 2: 8:00 to 8:29, 3: 8:30 or later}
        ordered: true
        waves: [1]
      - name: email
        type: text
        identifier: true           # never in an output or an archive
    scales:
      sleep_difficulty: {label: Sleep difficulty, min_share: 0.8}
    """)


def write(tmp_path, text, name="codebook.yaml"):
    p = tmp_path / name
    p.write_text(text, encoding="utf-8")
    return p


def test_documented_example_loads(tmp_path):
    cb = load_codebook(write(tmp_path, EXAMPLE))
    assert cb.study.id == "pid" and cb.study.wave == "wave" and cb.layout == "long"
    assert cb.study.waves == (1, 2, 3, 4, 5)
    assert cb.study.time_scores == (0.0, 1.0, 2.0, 3.0, 4.0)
    slp1 = cb.variables["slp1"]
    assert slp1.range == (1, 5) and slp1.missing == {-99: "refused", -98: "do not know"}
    assert slp1.line == 10
    st = cb.variables["start_time"]
    assert st.type == "category" and st.ordered and st.levels[2] == "8:00 to 8:29" and st.waves == (1,)
    sc = cb.scales["sleep_difficulty"]
    assert sc.items == ("slp1", "slp4") and sc.reverse == ("slp4",) and sc.min_share == 0.8
    assert sc.bounds(cb) == (1, 5)
    assert cb.identifiers == ["email"]


def test_wide_pattern(tmp_path):
    text = EXAMPLE.replace("  wave: wave\n", '  wide: "{name}_w{wave}"\n')
    cb = load_codebook(write(tmp_path, text))
    assert cb.layout == "wide" and cb.study.wide_column("slp1", 3) == "slp1_w3"
    bad = EXAMPLE.replace("  wave: wave\n", '  wide: "{name}_w"\n')
    with pytest.raises(CodebookError, match=r"codebook.yaml:\d+: .*wide.*\{name\} and \{wave\}"):
        load_codebook(write(tmp_path, bad))


@pytest.mark.parametrize("mutate, line, pattern", [
    (lambda t: t.replace("    range: [1, 5]\n    missing: {-99: refused, -98: do not know}\n    scale: sleep_difficulty\n  - name: slp4",
                         "    rnage: [1, 5]\n    missing: {-99: refused, -98: do not know}\n    scale: sleep_difficulty\n  - name: slp4"),
     10, r"variable slp1: unknown key\(s\) 'rnage'"),
    (lambda t: t.replace("type: category", "type: factor"), 25, r"'factor' is not one of"),
    (lambda t: t.replace("min_share: 0.8", "min_share: 1.5"), 33, r"min_share.*1.5"),
    (lambda t: t.replace("  id: pid                      # person id column\n", ""), 1, r"'id' is required"),
])
def test_schema_errors_name_the_line(tmp_path, mutate, line, pattern):
    with pytest.raises(CodebookError) as info:
        load_codebook(write(tmp_path, mutate(EXAMPLE)))
    msg = str(info.value)
    assert f"codebook.yaml:{line}:" in msg, msg
    assert pytest.importorskip("re").search(pattern, msg), msg


def test_column_named_twice_is_one_clear_message(tmp_path):
    text = EXAMPLE.replace("  - name: email\n", "  - name: slp1\n    type: integer\n  - name: email\n")
    with pytest.raises(CodebookError) as info:
        load_codebook(write(tmp_path, text))
    msg = str(info.value)
    assert "variable 'slp1' is named twice" in msg and "first on line 10" in msg
    assert "codebook.yaml:29:" in msg
    assert "Traceback" not in msg


@pytest.mark.parametrize("text, pattern", [
    ("study: {id: pid, wave: wave, waves: [1]\nvariables: []\n", r"codebook.yaml:\d+: not valid YAML"),
    ("study:\n  id: pid\n  id: person\n", r"codebook.yaml:3: key 'id' appears twice \(first on line 2\)"),
    ("", r"the codebook is empty"),
    (EXAMPLE.replace("    scale: sleep_difficulty\n    reverse: true\n", "    scale: sleep\n    reverse: true\n"),
     r"codebook.yaml:16: variable slp4 names scale 'sleep'"),
    (EXAMPLE.replace("    range: [1, 5]\n    missing: {-99: refused, -98: do not know}\n    scale: sleep_difficulty\n    reverse",
                     "    missing: {-99: refused, -98: do not know}\n    scale: sleep_difficulty\n    reverse"),
     r"codebook.yaml:16: variable slp4 is reverse-keyed but has no range"),
    (EXAMPLE.replace("    waves: [1]\n", "    waves: [7]\n"), r"wave\(s\) \[7\] are not in study.waves"),
    (EXAMPLE.replace("[0, 1, 2, 3, 4]", "[0, 1, 2]"), r"codebook.yaml:5: study.time_scores has 3 values"),
    (EXAMPLE.replace("  wave: wave\n", ""), r"needs `wave`"),
    (EXAMPLE.replace("range: [1, 5]", "range: [5, 1]", 1), r"low end above its high end"),
])
def test_inconsistent_codebooks(tmp_path, text, pattern):
    with pytest.raises(CodebookError, match=pattern):
        load_codebook(write(tmp_path, text))


def test_missing_and_non_utf8_codebook(tmp_path):
    with pytest.raises(CodebookError, match="does not exist"):
        load_codebook(tmp_path / "nope.yaml")
    p = tmp_path / "latin.yaml"
    p.write_bytes(EXAMPLE.replace("Wakes up rested", "R\u00e9veil").encode("latin-1"))
    with pytest.raises(CodebookError, match=r"latin.yaml:17: the codebook is not UTF-8"):
        load_codebook(p)


def test_errors_are_wavetrail_errors():
    with pytest.raises(WavetrailError):
        parse_codebook("variables: 3\n")


def test_draft_from_csv_round_trips(tmp_path):
    rng = np.random.default_rng(1)
    n = 60
    df = pd.DataFrame({"pid": np.repeat(np.arange(1, 21), 3), "wave": np.tile([1, 2, 3], 20),
                       "slp1": rng.integers(1, 6, n), "score": rng.normal(size=n).round(3),
                       "sex": rng.choice(["f", "m"], n), "email": [f"p{i}@x.org" for i in range(n)]})
    df.loc[[3, 7], "slp1"] = -99
    path = tmp_path / "panel.csv"
    df.to_csv(path, index=False)
    text = draft_codebook(path)
    assert "-99: unknown  # review: guessed missing code" in text
    cb = parse_codebook(text)
    assert cb.study.id == "pid" and cb.study.wave == "wave" and cb.study.waves == (1, 2, 3)
    assert cb.variables["slp1"].type == "integer" and cb.variables["slp1"].range == (1, 5)
    assert cb.variables["slp1"].missing == {-99: "unknown"}
    assert cb.variables["score"].type == "number"
    assert cb.variables["sex"].type == "category" and set(cb.variables["sex"].levels) == {"f", "m"}
    assert cb.variables["email"].identifier
    from wavetrail.checks import run_checks
    findings = run_checks(path, cb)
    assert not (findings["severity"] == "error").any(), findings


def test_draft_from_wide_frame():
    df = pd.DataFrame({"id": [1, 2, 3, 4], "x_w1": [1, 2, 3, 4], "x_w2": [2, 3, 4, 5], "age": [12, 13, 12, 14]})
    cb = parse_codebook(draft_codebook(df))
    assert cb.layout == "wide" and cb.study.wide == "{name}_w{wave}" and cb.study.waves == (1, 2)
    # the id column is not a variable; a column without a wave suffix is measured once
    assert set(cb.variables) == {"x", "age"}
    assert cb.variables["age"].waves == (1,)


def test_draft_from_labelled_sav_carries_labels(tmp_path):
    pyreadstat = pytest.importorskip("pyreadstat")
    df = pd.DataFrame({"pid": [1.0, 2.0, 3.0, 4.0], "wave": [1.0, 1.0, 2.0, 2.0],
                       "slp1": [1.0, -99.0, 5.0, -98.0], "start": [1.0, 2.0, 3.0, 1.0]})
    path = tmp_path / "labelled.sav"
    pyreadstat.write_sav(df, str(path), column_labels={"slp1": "Trouble falling asleep", "start": "School start"},
                         variable_value_labels={"start": {1: "before 8:00", 2: "8:00 to 8:29", 3: "later"},
                                                "slp1": {-99: "refused", -98: "do not know"}},
                         missing_ranges={"slp1": [-99, -98]})
    cb = parse_codebook(draft_codebook(path))
    slp1 = cb.variables["slp1"]
    assert slp1.label == "Trouble falling asleep"
    assert slp1.missing == {-99: "refused", -98: "do not know"}
    start = cb.variables["start"]
    assert start.label == "School start" and start.type == "category"
    assert start.levels == {1: "before 8:00", 2: "8:00 to 8:29", 3: "later"}
