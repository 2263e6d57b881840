"""Drafting a codebook from data files: find the layout, the id and the waves.

:func:`draft_text` is what :func:`wavetrail.codebook.draft_codebook` returns: YAML
text for a person to review. It finds

* the layout: a long file (an id column and a wave column that together
  identify the rows, the wave column having few distinct values), a wide file
  (columns named by a pattern such as ``name.suffix``, ``name_suffix``,
  ``nameN``, with numeric or text suffixes), or one file per wave;
* the wave labels and their time scores: numeric labels keep their own spacing
  (days, ages, decimals; calendar years count from the first year), text labels
  with a number and a unit (``2m``, ``6 months``, ``fu12m``, ``wave 3``) are
  parsed when every label is;
* each variable's type, range or levels, declared missing codes, and the waves
  it is measured at (a variable that never changes within a person is drafted
  as measured once, at the first wave).

Two kinds of notes are written. ``# review: ...`` marks a harmless guess (an
observed range). A comment holding :data:`GUESS_MARK` marks a guess that
changes results if wrong (the id column, the time scores of labels that could
not be parsed): :func:`wavetrail.codebook.load_codebook` refuses a codebook that
still holds one, naming the file and line, until the person has checked the
value and deleted the comment.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
import yaml

from wavetrail.errors import CodebookError

__all__ = ["GUESS_MARK", "draft_text", "unchecked_guesses", "parse_wave_label", "time_scores_for", "time_unit_for"]

#: the comment text that marks a drafted guess to check before the first build
GUESS_MARK = "UNCHECKED GUESS"
_GUESS_RX = re.compile(r"(?:^|\s)#\s*" + GUESS_MARK + r"\b:?\s*(?P<note>.*)$")

_ID_NAMES = ("id", "pid", "person", "personid", "participant", "participantid", "subject", "subjectid",
             "case", "caseid", "respondent", "respondentid", "child", "patient", "patientid", "student",
             "studentid", "individual", "nr", "idno", "idnr")
_WAVE_NAMES = ("wave", "waves", "occasion", "round", "visit", "time", "t", "w", "year", "yr", "age", "day",
               "days", "week", "weeks", "month", "months", "session", "period", "phase", "timepoint", "tp",
               "measurement", "assessment", "grade", "semester", "wavenr", "waveno", "visitno")
_ROW_NAMES = ("rownames", "rowname", "row", "rownr", "rowid", "index", "unnamed0", "x", "obs", "")
_IDENTIFYING = ("email", "e_mail", "mail", "name", "phone", "address", "street", "postcode", "zip",
                "birth", "dob", "ssn")
#: most distinct values of a wave column (common practice for panels; more is a measurement)
MAX_WAVES = 40
#: most distinct text values for a text column to be drafted as a category
MAX_TEXT_LEVELS = 12

# text wave labels -------------------------------------------------------------------------------
_UNITS = {"d": "day", "day": "day", "days": "day",
          "w": "week", "wk": "week", "wks": "week", "week": "week", "weeks": "week",
          "m": "month", "mo": "month", "mos": "month", "mon": "month", "month": "month", "months": "month",
          "y": "year", "yr": "year", "yrs": "year", "year": "year", "years": "year",
          "h": "hour", "hr": "hour", "hrs": "hour", "hour": "hour", "hours": "hour"}
#: words before an occasion number ("wave 3", "t2", "visit4"): the number counts occasions
_OCCASION_WORDS = ("wave", "w", "t", "time", "visit", "v", "round", "r", "session", "occasion", "tp",
                   "timepoint", "assessment", "measurement", "phase", "p")
#: words before a number with a unit ("fu6m", "followup 12 months", "after 2w")
_DELAY_WORDS = ("fu", "followup", "follow_up", "follow-up", "follow", "after", "post", "at", "")
#: labels of the first occasion when the other labels count time from it
_BASELINE_WORDS = ("pre", "baseline", "base", "bl", "start", "intake", "entry", "before", "screening")
#: days per unit, to put mixed units on one scale
_DAYS = {"hour": 1 / 24, "day": 1.0, "week": 7.0, "month": 365.25 / 12, "year": 365.25}
_LABEL_RX = re.compile(r"^(?P<word>[A-Za-z][A-Za-z_\- ]*?)?[\s_\-.]*(?P<num>\d+(?:\.\d+)?)\s*[_\-]?\s*(?P<unit>[A-Za-z]*)$")


@dataclass
class Label:
    """What a wave label says about time: a number, its unit (or None) and its kind."""

    text: str
    value: float | None
    unit: str | None = None
    kind: str = "unparsed"  # number, occasion, delay, baseline, unparsed


def parse_wave_label(text) -> Label:
    """Read one text wave label: ``"6 months"`` -> 6 month, ``"wave 3"`` -> occasion 3.

    ``kind`` is ``number`` (a bare number), ``occasion`` (an occasion count such as
    ``t2``), ``delay`` (a number with a time unit), ``baseline`` (``pre``,
    ``baseline``: the first occasion when the others carry units) or ``unparsed``.
    """
    s = str(text).strip()
    low = s.lower()
    if low in _BASELINE_WORDS:
        return Label(s, 0.0, None, "baseline")
    try:
        return Label(s, float(low), None, "number")
    except ValueError:
        pass
    m = _LABEL_RX.match(low)
    if not m:
        return Label(s, None)
    word = (m.group("word") or "").strip(" _-")
    num = float(m.group("num"))
    unit = m.group("unit")
    if unit:
        if unit in _UNITS and word in _DELAY_WORDS:
            return Label(s, num, _UNITS[unit], "delay")
        return Label(s, None)
    if word in _OCCASION_WORDS:
        return Label(s, num, None, "occasion")
    if word in _UNITS and len(word) > 2:  # "month 6", "day 3", "week 2" (not "y2010")
        return Label(s, num, _UNITS[word], "delay")
    return Label(s, None)


def time_scores_for(waves: list) -> tuple[list, list, str, bool]:
    """Order wave labels and give each a time score.

    Returns
    -------
    (ordered waves, time scores, note, is_guess)
        ``is_guess`` is True when the labels could not all be read and the
        scores (and, for text labels, the order) are only a placeholder.
    """
    if all(_is_number(w) for w in waves):
        ordered = sorted(waves, key=float)
        values = [float(w) for w in ordered]
        if all(float(v).is_integer() and 1800 <= v <= 2200 for v in values) and len(values) > 1:
            first = values[0]
            scores = [_num(v - first) for v in values]
            return ordered, scores, f"calendar years counted from {_num(first)}, spacing kept", False
        first = values[0]
        if first == 0:
            return ordered, [_num(v) for v in values], "the wave labels themselves, spacing kept", False
        # counted from the first label: the intercept is the level at the first wave, not at
        # label 0 (day 0 of days 152-258 is far outside the data, and such a distant origin
        # makes the growth factors nearly collinear: no standard errors, a lower maximum found)
        scores = [_num(round(v - first, 10)) for v in values]
        note = (f"the wave labels counted from the first ({_num(first)} -> 0), spacing kept, so the intercept "
                f"is the level at the first wave; to put time 0 at label 0 instead, use the labels themselves")
        return ordered, scores, note, False
    labels = [parse_wave_label(w) for w in waves]
    kinds = {lab.kind for lab in labels}
    if "unparsed" not in kinds:
        if kinds <= {"delay", "baseline"} and "delay" in kinds:
            units = {lab.unit for lab in labels if lab.kind == "delay"}
            if len(units) == 1:
                (unit,) = units
                scores = [lab.value for lab in labels]
                note = f"{unit}s, read from the labels"
            else:  # put mixed units on the largest unit used
                unit = max(units, key=lambda u: _DAYS[u])
                scores = [round(lab.value * _DAYS[lab.unit] / _DAYS[unit], 4) if lab.unit else 0.0
                          for lab in labels]
                note = f"{unit}s, read from the labels (other units converted)"
            if len(set(scores)) == len(scores):
                order = sorted(range(len(waves)), key=lambda i: scores[i])
                return ([waves[i] for i in order], [_num(scores[i]) for i in order], note, False)
        elif kinds <= {"occasion", "number"}:
            scores = [lab.value for lab in labels]
            if len(set(scores)) == len(scores):
                order = sorted(range(len(waves)), key=lambda i: scores[i])
                note = "occasion numbers read from the labels (equal spacing between occasions)"
                return ([waves[i] for i in order], [_num(scores[i]) for i in order], note, False)
    unread = [lab.text for lab in labels if lab.kind == "unparsed"] or list(map(str, waves))
    note = (f"wave label(s) {', '.join(map(repr, unread))} say no time: the waves are in the order they "
            "appear and scored 0, 1, 2, ...; set the order and the real spacing")
    return list(waves), list(range(len(waves))), note, True


def time_unit_for(waves: list) -> str | None:
    """The unit of the time scores :func:`time_scores_for` gives, when the wave labels say it.

    Calendar years give ``years``; labels with a time unit (``6m``, ``week 2``) give the
    unit the scores are in (the largest one used, plural); other labels give None.

    >>> time_unit_for([2019, 2021]), time_unit_for(["baseline", "6m", "12m"]), time_unit_for([1, 2])
    ('years', 'months', None)
    """
    if all(_is_number(w) for w in waves):
        values = [float(w) for w in waves]
        if len(values) > 1 and all(v.is_integer() and 1800 <= v <= 2200 for v in values):
            return "years"
        return None
    labels = [parse_wave_label(w) for w in waves]
    units = {lab.unit for lab in labels if lab.kind == "delay"}
    if units and {lab.kind for lab in labels} <= {"delay", "baseline"}:
        return max(units, key=lambda u: _DAYS[u]) + "s"
    return None


def unchecked_guesses(text: str) -> list[tuple[int, str]]:
    """(line, note) of every comment holding :data:`GUESS_MARK` in codebook text."""
    out = []
    for i, line in enumerate(text.splitlines(), start=1):
        if GUESS_MARK not in line:
            continue
        m = _GUESS_RX.search(line)
        if m:
            out.append((i, m.group("note").strip()))
    return out


# layout -----------------------------------------------------------------------------------------


@dataclass
class Layout:
    kind: str  # long, wide, per-wave
    id: str
    wave: str | None = None
    pattern: str | None = None
    wide_map: dict = field(default_factory=dict)  # column -> (name, wave label)
    waves: list = field(default_factory=list)
    id_note: str | None = None  # a note on the id line
    id_guess: bool = False
    wave_note: str | None = None
    wave_guess: bool = False
    row_numbers: list = field(default_factory=list)
    hinted: bool = False  # the id or the wave column reads as one by its name


def _norm(name) -> str:
    return re.sub(r"[^a-z0-9]", "", str(name).lower())


def _is_number(v) -> bool:
    if isinstance(v, bool):
        return False
    if isinstance(v, (int, float, np.integer, np.floating)):
        return bool(np.isfinite(v))
    return False


def _num(x):
    f = float(x)
    return int(f) if f.is_integer() else f


def _is_row_number(col: pd.Series) -> bool:
    """A column numbering the rows 1..n (or 0..n-1): a row index, not a measurement."""
    if not pd.api.types.is_numeric_dtype(col) or col.isna().any() or len(col) < 2:
        return False
    x = col.to_numpy(dtype=float)
    return bool(np.all(np.diff(x) == 1) and x[0] in (0.0, 1.0))


def _constant_within(frame: pd.DataFrame, by: str, cols) -> int:
    g = frame.groupby(by, sort=False, dropna=True)
    n = 0
    for c in cols:
        if (g[c].nunique(dropna=True) <= 1).all():
            n += 1
    return n


def _hinted_id(name) -> bool:
    n = _norm(name)
    return n in _ID_NAMES or (n.endswith("id") and len(n) > 2)


def find_long(frame: pd.DataFrame, id: str | None = None, wave: str | None = None) -> Layout | None:
    """The (id, wave) column pair of a long file, or None when no pair identifies the rows.

    A pair qualifies when no (id, wave) combination appears twice, most id values
    appear in more than one row, the wave column has 2 to :data:`MAX_WAVES`
    distinct values, and its most common value is shared by at least 30% of the
    ids (the waves are common to the people, not a measurement that happens to
    be unique). Among qualifying pairs, names that read as an id or a wave win,
    then an id with more distinct values than the wave column, then the id
    within which the most other columns stay constant.
    """
    n = len(frame)
    if n < 2:
        return None
    cols = list(frame.columns)
    rows = [c for c in cols if _norm(c) in _ROW_NAMES and _is_row_number(frame[c])]
    nunique = {c: int(frame[c].nunique(dropna=True)) for c in cols}
    wave_cands = [c for c in cols if c not in rows and frame[c].notna().all()
                  and 2 <= nunique[c] <= min(MAX_WAVES, max(2, n // 2))]
    id_cands = []
    for c in cols:
        if c in rows or frame[c].isna().any() or nunique[c] < 2 or nunique[c] >= n:
            continue
        col = frame[c]
        if pd.api.types.is_float_dtype(col) and not np.all(col.to_numpy(dtype=float) % 1 == 0):
            continue
        if (col.value_counts() >= 2).mean() < 0.5:  # most values of an id repeat over waves
            continue
        id_cands.append(c)
    if id is not None:
        id_cands = [id] if id in cols and id not in rows else []
    if wave is not None:
        wave_cands = [wave] if wave in cols else []
    pairs = []
    for w in wave_cands:
        for i in id_cands:
            if i == w or frame.duplicated([i, w]).any():
                continue
            if frame.groupby(w, sort=False)[i].nunique().max() < 0.3 * nunique[i]:
                continue
            pairs.append((i, w))
    if not pairs:  # few repeats: accept a pair that reads as id and wave by name
        for w in ([wave] if wave is not None else [c for c in cols if _norm(c) in _WAVE_NAMES]):
            for i in ([id] if id is not None else [c for c in cols if _hinted_id(c)]):
                if (i != w and i in cols and w in cols and frame[i].notna().all() and frame[w].notna().all()
                        and 1 <= nunique[w] <= MAX_WAVES and not frame.duplicated([i, w]).any()):
                    lay = Layout(kind="long", id=i, wave=w, row_numbers=rows)  # a wide pattern wins
                    lay.id_note = "few people appear at more than one wave: check the id and wave columns"
                    return lay
        return None
    others = [c for c in cols if c not in rows]

    def rank(pair):
        i, w = pair
        return (_hinted_id(i), _norm(w) in _WAVE_NAMES, nunique[i] > nunique[w],
                _constant_within(frame, i, [c for c in others if c not in pair]), -nunique[w], -cols.index(i))

    ranked = sorted(((rank(p), p) for p in pairs), reverse=True)
    top, best = ranked[0]
    lay = Layout(kind="long", id=best[0], wave=best[1], row_numbers=rows)
    lay.hinted = id is not None or wave is not None or top[0] or top[1]
    alt_ids = [(r, p[0]) for r, p in ranked[1:] if p[1] == best[1] and p[0] != best[0]]
    alt_waves = [(r, p[1]) for r, p in ranked[1:] if p[0] == best[0] and p[1] != best[1]]
    if id is None and alt_ids:
        names = ", ".join(repr(a) for _, a in alt_ids[:4])
        if alt_ids[0][0][:4] == top[:4]:
            lay.id_guess = True
            lay.id_note = (f"the person id column was chosen among {best[0]!r}, {names} (each identifies the "
                           "rows together with the wave column)")
        elif not top[0]:
            lay.id_note = f"chosen over {names}, which also identify the rows with the wave column"
    elif id is None and not top[0]:
        lay.id_note = "the only column that identifies the rows together with the wave column"
    if wave is None and alt_waves:
        names = ", ".join(repr(a) for _, a in alt_waves[:4])
        if not top[1] and alt_waves[0][0][1] == top[1]:
            lay.wave_guess = True
            lay.wave_note = (f"the wave column was chosen among {best[1]!r}, {names} "
                             "(the one with the fewest distinct values)")
        else:
            lay.wave_note = f"also possible: {names}"
    return lay


def _wide_candidates(columns: list[str]):
    """Split column names by each naming pattern; yield (pattern, {column: (name, label)})."""
    splitters = []
    for sep in (".", "_", "-"):
        rx = re.compile("^(?P<name>.+)" + re.escape(sep) + r"(?P<wave>[^" + re.escape(sep) + "]+)$")
        splitters.append((sep, rx))
    splitters.append(("", re.compile(r"^(?P<name>.*[A-Za-z_])(?P<wave>\d+)$")))
    for sep, rx in splitters:
        found = {}
        for c in columns:
            m = rx.match(str(c))
            if m:
                found[c] = (m.group("name"), m.group("wave"))
        by_name: dict[str, set] = {}
        for name, w in found.values():
            by_name.setdefault(name, set()).add(w)
        found = {c: nw for c, nw in found.items() if len(by_name[nw[0]]) >= 2}
        labels = {w for _, w in found.values()}
        if len(labels) < 2:
            continue
        # a common letter prefix before numbers ("w1", "t2") belongs to the pattern
        prefix = _common_prefix(labels)
        if prefix and all(re.fullmatch(r"\d+(\.\d+)?", w[len(prefix):]) for w in labels):
            pattern = "{name}" + sep + prefix + "{wave}"
            found = {c: (n, w[len(prefix):]) for c, (n, w) in found.items()}
        else:
            pattern = "{name}" + sep + "{wave}"
        yield pattern, found


def _common_prefix(labels) -> str:
    labels = list(labels)
    p = labels[0]
    for w in labels[1:]:
        while not w.startswith(p):
            p = p[:-1]
    m = re.match(r"[A-Za-z_]*", p)
    return m.group(0) if m else ""


def _label_value(text: str):
    """Wave label as int or float when it is written as one (``1``, ``1.5``; not ``01``), else the text."""
    if re.fullmatch(r"-?(0|[1-9]\d*)", text):
        return int(text)
    if re.fullmatch(r"-?(0|[1-9]\d*)\.\d*[1-9]", text):
        return float(text)
    return text


def find_wide(frame: pd.DataFrame, id: str | None = None) -> Layout | None:
    """The naming pattern of a wide file, or None when no column name pattern repeats."""
    cols = list(frame.columns)
    rows = [c for c in cols if _norm(c) in _ROW_NAMES and _is_row_number(frame[c])]
    best = None
    for pattern, found in _wide_candidates([c for c in cols if c != id]):
        score = len(found)
        if best is None or score > best[0]:
            best = (score, pattern, found)
    if best is None:
        return None
    _, pattern, found = best
    wide_map = {c: (n, _label_value(w)) for c, (n, w) in found.items()}
    seen = list(dict.fromkeys(w for _, w in wide_map.values()))
    lay = Layout(kind="wide", id="", pattern=pattern, wide_map=wide_map, waves=seen, row_numbers=rows)
    _choose_single_id(frame, lay, exclude=set(wide_map), id=id)
    return lay


def _repeated_person(frame: pd.DataFrame, exclude: set):
    """A person id that repeats over the rows of a file without a wave column, or None.

    Returns ``(column, fewest rows, most rows, numeric columns that change within persons)``
    for a column named like an id (or, failing that, the one with the most distinct
    values) whose values mostly come 2 to ``MAX_WAVES`` times each.
    """
    found = []
    for c in frame.columns:
        if c in exclude or frame[c].isna().any():
            continue
        col = frame[c]
        if pd.api.types.is_float_dtype(col) and not np.all(col.to_numpy(dtype=float) % 1 == 0):
            continue
        counts = col.value_counts()
        if len(counts) < 5 or counts.max() > MAX_WAVES or (counts >= 2).mean() < 0.5:
            continue
        named = _norm(c) in _ID_NAMES or _norm(c).endswith("id")
        found.append((not named, -len(counts), c, int(counts.min()), int(counts.max())))
    if not found:
        return None
    _, _, person, lo, hi = min(found)
    times = [c for c in frame.columns if c != person and c not in exclude
             and pd.api.types.is_numeric_dtype(frame[c]) and _norm(c) in _WAVE_NAMES
             and frame.groupby(person, sort=False)[c].nunique().max() > 1]
    return person, lo, hi, times


def _time_column_means(frame: pd.DataFrame, lay: Layout, ordered) -> tuple[str, list] | None:
    """A numeric column named like time (age, days, ...) that changes within persons and grows
    over the waves: (name, its mean at each wave, rounded), or None."""
    if lay.wave not in frame.columns:
        return None
    codes, uniq = pd.factorize(frame[lay.wave])  # each distinct wave value read once, not each row
    if len(uniq) == 0:
        return None
    labels = np.empty(len(uniq), dtype=object)
    labels[:] = [_label_value(str(v)) if isinstance(v, str) else _num(v) for v in uniq]
    key = pd.Series(np.where(codes >= 0, labels[np.maximum(codes, 0)], None), index=frame.index)
    for c in frame.columns:
        if c in (lay.id, lay.wave) or _norm(c) not in _WAVE_NAMES or not pd.api.types.is_numeric_dtype(frame[c]):
            continue
        means = frame[c].groupby(key).mean()
        if not all(w in means.index for w in ordered):
            continue
        m = [round(float(means[w]), 3) for w in ordered]
        if len(m) >= 2 and all(np.isfinite(m)) and all(b > a for a, b in zip(m, m[1:])):
            return str(c), m
    return None


def _choose_single_id(frame: pd.DataFrame, lay: Layout, exclude: set, id: str | None) -> None:
    """The id of a wide file or of per-wave files: a column unique in every row."""
    if id is not None:
        lay.id = id
        return
    cands = [c for c in frame.columns if c not in exclude and frame[c].notna().all()
             and frame[c].nunique() == len(frame)
             and not (pd.api.types.is_float_dtype(frame[c])
                      and not np.all(frame[c].to_numpy(dtype=float) % 1 == 0))]
    named = [c for c in cands if _norm(c) in _ID_NAMES or _norm(c).endswith("id")]
    if named:
        lay.id = named[0]
        if lay.id in lay.row_numbers:
            lay.row_numbers.remove(lay.id)
        return
    plain = [c for c in cands if c not in lay.row_numbers]
    if len(plain) == 1:
        lay.id = plain[0]
        lay.id_note = "the only column (besides a row number) unique in every row"
    elif plain:
        lay.id = plain[0]
        lay.id_guess = True
        lay.id_note = f"the person id column was chosen among {', '.join(map(repr, plain))} (each unique in every row)"
    elif cands:
        lay.id = cands[0]
        lay.row_numbers = [c for c in lay.row_numbers if c != lay.id]
        lay.id_note = "a row number is the only column unique in every row: one row per person assumed"
    else:
        lay.id = str(frame.columns[0])
        lay.id_guess = True
        lay.id_note = "no column is unique in every row; the first column was taken"


# drafting ---------------------------------------------------------------------------------------


def _y(value) -> str:
    """One YAML flow scalar or collection."""
    text = yaml.safe_dump(value, default_flow_style=True, allow_unicode=True, width=10_000).strip()
    if text.endswith("\n..."):
        text = text[:-4].strip()
    if text.endswith("..."):
        text = text[:-3].strip()
    return text


def _guess(note: str) -> str:
    return f"  # {GUESS_MARK}: {note}; check it, then delete this comment"


def _review(note: str) -> str:
    return f"  # review: {note}"


def _stata_letters(col: pd.Series) -> set | None:
    """Stata's extended missing values (.a to .z) arrive as the letters a-z in a numeric column."""
    if pd.api.types.is_numeric_dtype(col):
        return None
    text = [str(v).strip() for v in col.dropna().tolist()]
    letters = {t for t in text if re.fullmatch(r"[a-z]", t)}
    if not letters:
        return None
    rest = [t for t in text if t not in letters]
    try:
        [float(t) for t in rest]
    except ValueError:
        return None
    return letters


def draft_text(tables, *, id=None, wave=None, waves=None) -> str:
    """Draft codebook YAML from read tables (see :func:`wavetrail.codebook.draft_codebook`)."""
    frames = [t.frame for t in tables]
    columns = list(dict.fromkeys(c for f in frames for c in f.columns))
    for given, what in ((id, "id"), (wave, "wave")):
        if given is not None and given not in columns:
            raise CodebookError(f"the {what} column {given!r} is not in the data",
                                hint=f"columns: {', '.join(map(str, columns[:20]))}")
    if not columns or all(len(f) == 0 for f in frames):
        raise CodebookError(f"{', '.join(t.name for t in tables)}: no data rows to draft a codebook from",
                            hint="check that the file holds a header line and at least one data row")
    allrows = pd.concat(frames, ignore_index=True, sort=False) if len(frames) > 1 else frames[0]
    lay = find_long(allrows, id=id, wave=wave)
    if wave is None and len(frames) == 1 and (lay is None or not lay.hinted):
        wide = find_wide(frames[0], id=id)
        if wide is not None:
            lay = wide
    if lay is None and len(frames) > 1 and wave is None:
        lay = Layout(kind="per-wave", id="", wave="wave", waves=list(range(1, len(frames) + 1)),
                     row_numbers=[c for c in columns if _norm(c) in _ROW_NAMES and _is_row_number(frames[0][c])])
        _choose_single_id(frames[0], lay, exclude=set(), id=id)
    if lay is None:
        if wave is not None:
            raise CodebookError(f"the id and wave column {wave!r} do not identify the rows: some id appears "
                                "twice at one wave", hint="name the id column, or fix the repeated rows")
        lay = Layout(kind="single", id="", wave="wave", waves=[1])
        lay.row_numbers = [c for c in columns if _norm(c) in _ROW_NAMES and _is_row_number(frames[0][c])]
        repeated = _repeated_person(frames[0], exclude=set(lay.row_numbers)) if id is None else None
        lay.wave_guess = True
        lay.wave_note = ("no wave column and no repeated column names were found: the file is drafted as "
                         "one wave; name the wave column or the naming pattern")
        if repeated is not None:
            person, lo, hi, times = repeated
            lay.id, lay.id_guess = person, True
            lay.id_note = f"repeats over rows ({lo} to {hi} rows per value): taken as the person id"
            changing = f", and {', '.join(map(repr, times))} changes within persons (it may hold the time)" \
                if times else ""
            lay.wave_note = (f"no wave column was found, but the rows look like repeated measures of {person!r} "
                             f"({lo} to {hi} rows per value){changing}: add a column to the data that numbers "
                             "each person's occasions (1, 2, ...), then draft again or name it here with its "
                             "waves and time scores")
        else:
            _choose_single_id(frames[0], lay, exclude=set(), id=id)

    # wave labels and time scores
    if lay.kind == "long":
        labels = list(dict.fromkeys(_label_value(str(v)) if isinstance(v, str) else _num(v)
                                    for v in allrows[lay.wave].dropna().tolist()))
    else:
        labels = lay.waves
    ordered, scores, time_note, time_guess = time_scores_for(labels)
    if waves is not None:
        ordered = list(waves)
        scores = [_num(w) for w in ordered] if all(_is_number(w) for w in ordered) else list(range(len(ordered)))
        time_guess = not all(_is_number(w) for w in ordered)
        time_note = "the given wave labels" if not time_guess else "occasions 0, 1, 2, ... in the given order"
    first = ordered[0]
    if lay.kind == "long" and waves is None and not time_guess:
        clock = _time_column_means(allrows, lay, ordered)
        if clock is not None:
            name, means = clock
            time_note += (f"; {name!r} averages {_y(means)} at these waves: to count time in its units from the "
                          f"first wave use {_y([round(m - means[0], 3) for m in means])}")

    out = ["# Draft codebook written by wavetrail from: " + ", ".join(t.name for t in tables),
           f"# Check every line that carries a `{GUESS_MARK}` comment, then delete that comment:",
           "# the build refuses the codebook while one is left. Lines marked `review` are",
           "# notes on harmless guesses (observed ranges) and may stay (docs/codebook.md).",
           "study:"]
    id_line = f"  id: {_y(lay.id)}"
    if lay.id_guess:
        id_line += _guess(lay.id_note)
    elif lay.id_note:
        id_line += _review(lay.id_note)
    out.append(id_line)
    if lay.kind == "wide":
        out.append(f"  wide: {_y(lay.pattern)}  # review: column names are the variable name, then the wave label")
    else:
        line = f"  wave: {_y(lay.wave)}"
        if lay.kind == "per-wave":
            line += _review("one file per wave, in wave order; no file holds a wave column")
        elif lay.wave_guess:
            line += _guess(lay.wave_note)
        elif lay.wave_note:
            line += _review(lay.wave_note)
        out.append(line)
    out.append(f"  waves: {_y(list(ordered))}")
    ts = f"  time_scores: {_y(list(scores))}"
    ts += _guess(time_note) if time_guess else _review(f"{time_note}; in the growth model's time unit")
    out.append(ts)
    unit = time_unit_for(labels) if waves is None and not time_guess else None
    if unit:
        out.append(f"  time_unit: {unit}" + _review("read from the wave labels; the figures' time axis names it"))
    if lay.row_numbers:
        out.append(f"  left_out: {_y(list(lay.row_numbers))}"
                   + _review("numbers the rows 1, 2, 3, ...: a row index, not a measurement; read by no step"))
    if lay.kind == "single" and lay.wave_guess:
        out.append(f"  # {GUESS_MARK}: {lay.wave_note}; check it, then delete this comment")
    out.append("variables:")

    # values of each variable over every file and wave
    skip = {lay.id, lay.wave, *lay.row_numbers}
    values: dict[str, list] = {}
    at_waves: dict[str, set] = {}
    for k, t in enumerate(tables):
        f = t.frame
        for c in f.columns:
            if c in skip:
                continue
            if c in lay.wide_map:
                base, w = lay.wide_map[c]
                if f[c].notna().any():
                    at_waves.setdefault(base, set()).add(w)
            else:
                base = c
            values.setdefault(base, []).append(f[c])
            if lay.kind == "per-wave" and f[c].notna().any():
                at_waves.setdefault(base, set()).add(ordered[k] if k < len(ordered) else k + 1)
    labels_, value_labels, user_missing = {}, {}, {}
    for t in tables:
        for c, lab in t.labels.items():
            base = lay.wide_map[c][0] if c in lay.wide_map else c
            labels_.setdefault(base, lab)
        for c, vl in t.value_labels.items():
            base = lay.wide_map[c][0] if c in lay.wide_map else c
            value_labels.setdefault(base, {}).update(vl)
        for c, um in t.user_missing.items():
            base = lay.wide_map[c][0] if c in lay.wide_map else c
            user_missing.setdefault(base, {}).update(um)
    wide_bases = {n for n, _ in lay.wide_map.values()}
    stata = any(getattr(t, "format", None) == "stata" for t in tables)

    for name, cols in values.items():
        series = pd.concat(cols, ignore_index=True)
        vwaves = None
        note = None
        if lay.kind == "long":
            seen = allrows.loc[allrows[name].notna(), lay.wave] if name in allrows.columns else pd.Series([])
            seen_keys = {_wave_key(v) for v in seen.tolist()}
            present = [w for w in ordered if _wave_key(w) in seen_keys]
            if _constant_within_persons(allrows, lay.id, name):
                vwaves = [first]
                note = "the same value at every wave of each person: drafted as measured once"
            elif present and len(present) < len(ordered):
                vwaves = present
        elif lay.kind == "wide":
            if name in wide_bases:
                w = at_waves.get(name, set())
                if w and len(w) < len(ordered):
                    vwaves = [x for x in ordered if x in w]
            else:
                vwaves = [first]
                note = "a column without a wave suffix: drafted as measured once"
        elif lay.kind == "per-wave":
            w = at_waves.get(name, set())
            if w and len(w) < len(ordered):
                vwaves = [x for x in ordered if x in w]
        letters = _stata_letters(series) if stata else None
        um = dict(user_missing.get(name, {}))
        if letters:
            vl = value_labels.get(name, {})
            for letter in sorted(letters):
                um.setdefault(letter, vl.get(letter) or f"missing (.{letter} in the Stata file)")
            series = pd.to_numeric(series.where(~series.astype(str).str.strip().isin(letters)), errors="coerce")
        out += draft_variable(name, series, labels_.get(name, ""), value_labels.get(name, {}), um, vwaves,
                              note=note)
    out.append("# scales:  (name each scale here and set `scale:` on its items)")
    out.append("#   my_scale: {label: My scale, min_share: 0.8}")
    return "\n".join(out) + "\n"


def _wave_key(v) -> str:
    from wavetrail.panel import wave_key

    return wave_key(v)


def _constant_within_persons(frame: pd.DataFrame, id: str, name: str) -> bool:
    """True when no person has two different values of ``name`` (and some have two rows)."""
    if name not in frame.columns:
        return False
    sub = frame[[id, name]].dropna()
    if sub.empty:
        return False
    sizes = frame.groupby(id, sort=False).size()
    if (sizes < 2).all():
        return False
    return bool((sub.groupby(id, sort=False)[name].nunique() <= 1).all())


def draft_variable(name, series, label, value_labels, user_missing, var_waves, note=None) -> list[str]:
    """Codebook lines of one variable drafted from its values."""
    from wavetrail.checks import looks_like_missing_code

    lines = [f"  - name: {_y(name)}", f"    label: {_y(str(label or ''))}"]
    filled = series.dropna()
    numeric = pd.api.types.is_numeric_dtype(series)
    missing = {k: (v or "missing (user-defined in the file)") for k, v in user_missing.items()}
    guessed = {}
    x = np.array([])
    if numeric and len(filled):
        x = filled.to_numpy(dtype=float)
        declared = np.isin(x, [float(k) for k in missing if _is_number(k)])
        codelike = looks_like_missing_code(x) & ~declared
        rest = x[~declared & ~codelike]
        if len(rest):
            lo, hi = rest.min(), rest.max()
            span = max(hi - lo, 1.0)
            for v in np.unique(x[codelike]):
                if (v < 0 and lo >= 0) or v > hi + span:
                    guessed[_num(v)] = "unknown"
        keep = ~declared & ~np.isin(x, [float(g) for g in guessed])
        x = x[keep]
    levels = {k: v for k, v in (value_labels or {}).items() if k not in missing}
    if numeric:
        present = {_num(v) for v in x}
        known = {_num(k) if _is_number(k) else k for k in levels}
    else:
        present = {str(v) for v in filled}
        known = {str(k) for k in levels}
    covered = bool(levels) and present <= known
    if levels and covered:
        lines.append("    type: category" + _review("levels from the file's value labels; "
                                                      "integer if it is a scale item"))
        lines.append(f"    levels: {_y(levels)}")
    elif numeric:
        if len(filled) == 0:
            lines.append("    type: number" + _review("no values seen"))
        else:
            integral = bool(np.all(x == np.round(x))) if len(x) else True
            lines.append(f"    type: {'integer' if integral else 'number'}")
            if len(x):
                lines.append(f"    range: {_y([_num(x.min()), _num(x.max())])}" + _review("observed range"))
        if levels:
            shown = ", ".join(f"{_num(k) if _is_number(k) else k} = {v}" for k, v in list(levels.items())[:6])
            lines.append(f"    # value labels cover only some values ({shown}): kept as a number")
    else:
        text = filled.astype(str)
        uniq = sorted(set(text))
        if len(uniq) and all(_is_date(v) for v in uniq[:50]):
            lines.append("    type: date")
        elif 0 < len(uniq) <= MAX_TEXT_LEVELS and len(text) >= 2 * len(uniq):
            order, why = level_order(text)
            lines.append("    type: category" + _review("guessed from few distinct values"))
            lines.append(f"    levels: {_y({u: u for u in order})}"
                         + _review(f"the first level, {order[0]!r}, is the reference of comparisons ({why}); "
                                   "to change it, put another level first"))
        else:
            lines.append("    type: text")
    if missing or guessed:
        lines.append("    missing:")
        for code, reason in missing.items():
            lines.append(f"      {_y(_num(code) if isinstance(code, float) else code)}: {_y(str(reason))}")
        for code, reason in guessed.items():
            lines.append(f"      {_y(code)}: {_y(reason)}" + _review("guessed missing code, not declared in the file"))
    if var_waves:
        line = f"    waves: {_y(list(var_waves))}"
        if note:
            line += _review(note)
        lines.append(line)
    if any(part in str(name).lower() for part in _IDENTIFYING) and not numeric:
        lines.append("    identifier: true" + _review("looks like a direct identifier"))
    return lines


#: level names that usually mark the comparison group (compared case-insensitively)
REFERENCE_WORDS = ("control", "controls", "placebo", "none", "no", "never", "normal", "untreated",
                   "usual care", "standard", "standard care", "reference", "baseline", "absent",
                   "negative", "healthy", "sham", "waitlist", "wait list", "not treated")
#: level names with an order of their own (each tuple from lowest to highest)
ORDERED_WORDS = (("none", "low", "medium", "high"), ("none", "low", "moderate", "high"),
                 ("low", "middle", "high"), ("low", "mid", "high"), ("no", "yes"),
                 ("never", "rarely", "sometimes", "often", "always"), ("small", "medium", "large"),
                 ("mild", "moderate", "severe"))


def level_order(values: pd.Series) -> tuple[list, str]:
    """The drafted order of a text category's levels and why its first level comes first.

    The first level is the reference of every comparison (conditional growth models, the
    forest's dependence tables), so it is chosen, in this order: the order of level names
    that have one (``low``, ``medium``, ``high``; ``no``, ``yes``; ``never`` ... ``always``);
    a level whose name marks a comparison group (:data:`REFERENCE_WORDS`: ``control``,
    ``placebo``, ``none`` ...), the others following alphabetically; else the most frequent
    level (ties: the one seen first), the others following alphabetically.

    >>> level_order(pd.Series(["ozone", "ozone", "control"]))
    (['control', 'ozone'], 'a usual name of a comparison group')
    >>> level_order(pd.Series(["high", "low", "low", "medium"]))[0]
    ['low', 'medium', 'high']
    >>> level_order(pd.Series(["b", "a", "b"]))
    (['b', 'a'], 'the most frequent level')
    """
    text = values.dropna().astype(str)
    uniq = sorted(set(text))
    lower = {u.strip().lower(): u for u in uniq}
    if len(lower) == len(uniq):
        for seq in ORDERED_WORDS:
            if set(lower) <= set(seq) and len(lower) >= 2:
                return [lower[w] for w in seq if w in lower], "the order of the level names"
    for word in REFERENCE_WORDS:
        if word in lower:
            ref = lower[word]
            return [ref] + [u for u in uniq if u != ref], "a usual name of a comparison group"
    counts = text.value_counts(sort=False)
    first_seen = {v: i for i, v in enumerate(dict.fromkeys(text.tolist()))}
    ref = min(uniq, key=lambda u: (-int(counts[u]), first_seen[u]))
    return [ref] + [u for u in uniq if u != ref], "the most frequent level"


def _is_date(text: str) -> bool:
    return bool(re.fullmatch(r"\d{4}-\d{2}-\d{2}", text))
