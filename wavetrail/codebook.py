"""The codebook: what every variable of a panel study is, loaded from YAML.

:func:`load_codebook` reads ``config/codebook.yaml``, validates it against
``wavetrail/schemas/codebook.schema.json`` and returns a :class:`Codebook`.
Every error names the file and the line of the offending key.
:func:`draft_codebook` writes a first codebook from data files for a human to
review.
"""

from __future__ import annotations

import json
import math
import os
from dataclasses import dataclass, field
from functools import lru_cache
from pathlib import Path
from typing import Any, Iterable

import yaml

from wavetrail.errors import CodebookError

__all__ = [
    "Study",
    "Variable",
    "Scale",
    "Codebook",
    "load_codebook",
    "parse_codebook",
    "codebook_schema",
    "draft_codebook",
    "TYPES",
    "TRANSFORMS",
    "DEFAULT_MIN_SHARE",
]

#: value types a variable may declare
TYPES = ("integer", "number", "category", "text", "date")
#: least share of a scale's items that must be answered for a score (common practice)
DEFAULT_MIN_SHARE = 0.8
#: declared transformations of a derived variable -> what they compute
TRANSFORMS = {
    "log": "natural logarithm log(x); needs x > 0",
    "log1p": "log(1 + x); needs x > -1",
    "sqrt": "square root; needs x >= 0",
    "standardise_wave": "(x - mean) / sd within each wave (sd with n - 1)",
    "standardise_all": "(x - mean) / sd over all waves together (sd with n - 1)",
}


@dataclass(frozen=True)
class Study:
    """The study block: id column, how waves are told apart, wave time scores."""

    id: str
    waves: tuple
    wave: str | None = None
    wide: str | None = None
    time_scores: tuple | None = None
    title: str | None = None
    #: unit of the time scores (``years``, ``months``), None when the codebook does not say
    time_unit: str | None = None
    #: columns of the data files that are not variables (row index, notes): no step reads them
    left_out: tuple = ()

    def wide_column(self, name: str, wave) -> str:
        """The wide-file column of variable ``name`` at ``wave``."""
        if not self.wide:
            raise CodebookError("the study block names no wide pattern (study.wide)")
        return self.wide.format(name=name, wave=wave)


@dataclass(frozen=True)
class Variable:
    """One codebook entry."""

    name: str
    label: str = ""
    type: str = "integer"
    range: tuple | None = None
    levels: dict | None = None
    ordered: bool = False
    missing: dict = field(default_factory=dict)
    waves: tuple | None = None
    scale: str | None = None
    reverse: bool = False
    identifier: bool = False
    line: int | None = None
    unit: str | None = None
    derived_from: str | None = None
    transform: str | None = None

    @property
    def derived(self) -> bool:
        """True for a variable computed from another one (not read from the data file)."""
        return self.derived_from is not None

    @property
    def numeric(self) -> bool:
        """True for integer and number variables."""
        return self.type in ("integer", "number")

    def measured_at(self, wave) -> bool:
        """True when the variable is measured at ``wave`` (all waves when ``waves`` is unset)."""
        return self.waves is None or wave in self.waves


@dataclass(frozen=True)
class Scale:
    """A questionnaire scale: its items in codebook order."""

    name: str
    label: str = ""
    min_share: float = DEFAULT_MIN_SHARE
    items: tuple = ()
    reverse: tuple = ()

    def bounds(self, codebook: "Codebook") -> tuple | None:
        """The common (low, high) range of the items, or None when they differ or lack one."""
        ranges = {codebook.variables[i].range for i in self.items}
        if len(ranges) == 1:
            (r,) = ranges
            return r
        return None


@dataclass(frozen=True)
class Codebook:
    """A loaded codebook: study block, variables (name -> Variable), scales (name -> Scale)."""

    study: Study
    variables: dict
    scales: dict
    path: Path | None = None

    @property
    def layout(self) -> str:
        """``"long"`` (a wave column) or ``"wide"`` (a naming pattern)."""
        return "wide" if self.study.wide and not self.study.wave else "long"

    @property
    def identifiers(self) -> list[str]:
        """Names of the columns marked ``identifier: true``."""
        return [v.name for v in self.variables.values() if v.identifier]

    def data_variables(self) -> list[Variable]:
        """Every variable except the id and wave columns, in codebook order."""
        skip = {self.study.id, self.study.wave}
        return [v for v in self.variables.values() if v.name not in skip]

    def file_variables(self) -> list[Variable]:
        """The data variables read from the data files (derived variables left out)."""
        return [v for v in self.data_variables() if not v.derived]

    def repeated_measures(self) -> list[str]:
        """Numeric variables measured at two or more waves (each can be a growth outcome)."""
        n = len(self.study.waves)
        return [v.name for v in self.data_variables()
                if v.numeric and not v.identifier and len(v.waves if v.waves is not None else range(n)) >= 2]

    def sources_of(self, name: str) -> set[str]:
        """The raw variables an outcome (scale or variable) is made of, itself included.

        A scale: its items; a derived variable: itself and, recursively, what it is
        derived from.
        """
        out: set[str] = set()
        todo = list(self.scales[name].items) if name in self.scales else [name]
        while todo:
            n = todo.pop()
            if n in out:
                continue
            out.add(n)
            var = self.variables.get(n)
            if var is not None and var.derived_from:
                todo.append(var.derived_from)
        return out

    def first_wave_predictors(self, outcome: str | None = None) -> list[str]:
        """The candidate predictors that ``predictors: wave1`` stands for.

        Every variable measured at the first wave outside the scales, not an
        identifier, text or date, and not one of the outcome's own raw variables
        (:meth:`sources_of`, and anything else derived from those).
        """
        first = self.study.waves[0]
        own = self.sources_of(outcome) if outcome else set()
        own |= {v.name for v in self.variables.values() if v.derived and v.derived_from in own}
        return [v.name for v in self.data_variables()
                if v.measured_at(first) and not v.scale and not v.identifier
                and v.type not in ("text", "date") and v.name not in own]

    def where(self, name: str) -> str:
        """``file:line`` of a variable's entry, for messages."""
        var = self.variables.get(name)
        place = str(self.path) if self.path else "codebook"
        if var is not None and var.line:
            return f"{place}:{var.line}"
        return place


# --------------------------------------------------------------------------- loading


@lru_cache(maxsize=1)
def codebook_schema() -> dict:
    """The JSON Schema (2020-12) of a codebook."""
    with open(Path(__file__).parent / "schemas" / "codebook.schema.json", encoding="utf-8") as fh:
        return json.load(fh)


def load_codebook(path: str | os.PathLike, *, allow_guesses: bool = False) -> Codebook:
    """Load and validate a codebook YAML file.

    Parameters
    ----------
    path : path-like
        The codebook file (usually ``config/codebook.yaml``).
    allow_guesses : bool
        Accept a drafted guess that is still marked ``UNCHECKED GUESS`` (only
        for reading a fresh draft; every check and build refuses one).

    Returns
    -------
    Codebook

    Raises
    ------
    CodebookError
        The file is missing, is not YAML, breaks the schema, or is inconsistent
        (a variable named twice, a reverse item without a range, ...) or
        still holds an unchecked drafted guess; the message names the file
        and line.
    """
    path = Path(path)
    try:
        raw = path.read_bytes()
    except FileNotFoundError:
        raise CodebookError(f"codebook {path} does not exist",
                            hint="create it, or draft one with `wavetrail new --data FILE`") from None
    except OSError as exc:
        raise CodebookError(f"codebook {path} cannot be read: {exc.strerror}") from None
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        line = raw[: exc.start].count(b"\n") + 1
        raise CodebookError(f"{path}:{line}: the codebook is not UTF-8 text",
                            hint="save it as UTF-8") from None
    return parse_codebook(text, source=path, allow_guesses=allow_guesses)


def parse_codebook(text: str, source: str | os.PathLike | None = None, *,
                   allow_guesses: bool = False) -> Codebook:
    """Parse codebook YAML text (see :func:`load_codebook`)."""
    where = str(source) if source is not None else "codebook"
    if not allow_guesses:
        _refuse_guesses(text, where)
    try:
        node = yaml.compose(text, Loader=yaml.SafeLoader)
        data = yaml.safe_load(text)
    except yaml.MarkedYAMLError as exc:
        mark = exc.problem_mark or exc.context_mark
        line = mark.line + 1 if mark is not None else "?"
        raise CodebookError(f"{where}:{line}: not valid YAML: {exc.problem or exc}",
                            hint="fix the indentation or quoting on that line") from None
    except yaml.YAMLError as exc:
        raise CodebookError(f"{where}: not valid YAML: {exc}") from None
    if node is None or data is None:
        raise CodebookError(f"{where}: the codebook is empty",
                            hint="it needs a study block and a variables list")
    _refuse_duplicate_keys(node, where)
    lines = _LineIndex(node)
    _validate_schema(data, lines, where)
    return _build(data, lines, Path(source) if source is not None else None, where)


def _refuse_guesses(text: str, where: str) -> None:
    """Refuse a drafted guess that nobody has checked yet (its marker comment is still there)."""
    from wavetrail.drafting import GUESS_MARK, unchecked_guesses

    found = unchecked_guesses(text)
    if not found:
        return
    shown = "\n  ".join(f"{where}:{line}: {note or 'a drafted guess'}" for line, note in found[:5])
    more = f"\n  ({len(found) - 5} more)" if len(found) > 5 else ""
    raise CodebookError(
        f"the codebook still holds {len(found)} drafted guess(es) nobody has checked:\n  {shown}{more}",
        hint=f"check the value on each line named, correct it if needed, then delete its "
             f"'# {GUESS_MARK}' comment (docs/codebook.md, drafting)")


class _LineIndex:
    """Line numbers of YAML nodes by their key path."""

    def __init__(self, root):
        self.root = root

    def line(self, path: Iterable) -> int:
        node = self.root
        line = node.start_mark.line + 1
        for key in path:
            child = None
            if isinstance(node, yaml.MappingNode):
                for k, v in node.value:
                    if str(k.value) == str(key) or _scalar_equal(k, key):
                        child = (k, v)
                        break
                if child is None:
                    return line
                line = child[0].start_mark.line + 1
                node = child[1]
            elif isinstance(node, yaml.SequenceNode):
                if not isinstance(key, int) or key >= len(node.value):
                    return line
                node = node.value[key]
                line = node.start_mark.line + 1
            else:
                return line
        return line


def _scalar_equal(k, key) -> bool:
    try:
        return yaml.safe_load(k.value) == key
    except yaml.YAMLError:
        return False


def _refuse_duplicate_keys(node, where: str) -> None:
    if isinstance(node, yaml.MappingNode):
        seen: dict[str, int] = {}
        for k, v in node.value:
            key = str(k.value)
            if key in seen:
                raise CodebookError(
                    f"{where}:{k.start_mark.line + 1}: key {key!r} appears twice "
                    f"(first on line {seen[key]})",
                    hint="keep one of them")
            seen[key] = k.start_mark.line + 1
            _refuse_duplicate_keys(v, where)
    elif isinstance(node, yaml.SequenceNode):
        for item in node.value:
            _refuse_duplicate_keys(item, where)


def _jsonable(obj):
    """YAML data -> JSON data for schema validation (mapping keys as strings)."""
    if isinstance(obj, dict):
        return {str(k): _jsonable(v) for k, v in obj.items()}
    if isinstance(obj, list):
        return [_jsonable(v) for v in obj]
    if isinstance(obj, float) and math.isnan(obj):
        return None
    if hasattr(obj, "isoformat"):
        return obj.isoformat()
    return obj


def _validate_schema(data, lines: _LineIndex, where: str) -> None:
    import jsonschema

    validator = jsonschema.Draft202012Validator(codebook_schema())
    errors = sorted(validator.iter_errors(_jsonable(data)),
                    key=lambda e: (lines.line(list(e.absolute_path)), list(map(str, e.absolute_path))))
    if not errors:
        return
    messages = []
    for err in errors[:5]:
        path = list(err.absolute_path)
        key = _key_text(path, data)
        messages.append(f"{where}:{lines.line(path)}: {key}: {_schema_message(err)}")
    more = f"\n  ({len(errors) - 5} more problems)" if len(errors) > 5 else ""
    raise CodebookError("the codebook does not follow the codebook format:\n  " + "\n  ".join(messages) + more,
                        hint="see docs/codebook.md for every key")


def _key_text(path: list, data) -> str:
    """A readable name of a key path: ``variable slp1 / range``, ``study / waves``."""
    parts = []
    node = data
    for depth, key in enumerate(path):
        if depth == 0 and key == "variables":
            node = node.get("variables") if isinstance(node, dict) else None
            continue
        if depth == 1 and path[0] == "variables" and isinstance(node, list) and isinstance(key, int):
            item = node[key] if key < len(node) else None
            name = item.get("name") if isinstance(item, dict) else None
            parts.append(f"variable {name}" if isinstance(name, str) else f"variables[{key}]")
            node = item
            continue
        if isinstance(node, list) and isinstance(key, int):  # an entry of a list: key[i]
            if parts:
                parts[-1] += f"[{key}]"
            else:
                parts.append(f"[{key}]")
            node = node[key] if key < len(node) else None
            continue
        parts.append(str(key))
        if isinstance(node, dict):
            node = node.get(key, node.get(_maybe_number(key)))
        else:
            node = None
    return " / ".join(parts) if parts else "top level"


def _maybe_number(key):
    try:
        return int(key)
    except (TypeError, ValueError):
        return key


def _schema_message(err) -> str:
    if err.validator == "additionalProperties":
        extra = sorted(set(err.instance) - set(err.schema.get("properties", {})))
        return f"unknown key(s) {', '.join(map(repr, extra))}"
    if err.validator == "required":
        return err.message.replace("is a required property", "is required")
    if err.validator == "enum":
        return f"{err.instance!r} is not one of {', '.join(map(str, err.validator_value))}"
    if err.validator == "type":
        return f"{err.instance!r} should be of type {err.validator_value}"
    if err.validator == "pattern" and err.absolute_path and err.absolute_path[-1] == "wide":
        return f"{err.instance!r} must contain both {{name}} and {{wave}}"
    return err.message


def _build(data: dict, lines: _LineIndex, path: Path | None, where: str) -> Codebook:
    s = data["study"]
    if not s.get("wave") and not s.get("wide"):
        raise CodebookError(f"{where}:{lines.line(['study'])}: the study block needs `wave` "
                            "(long data: the wave column) or `wide` (a naming pattern such as "
                            "\"{name}_w{wave}\")")
    waves = tuple(s["waves"])
    time_scores = s.get("time_scores")
    if time_scores is not None and len(time_scores) != len(waves):
        raise CodebookError(f"{where}:{lines.line(['study', 'time_scores'])}: study.time_scores has "
                            f"{len(time_scores)} values but study.waves has {len(waves)}",
                            hint="give one time score per wave")
    if time_scores is not None:
        values = [float(t) for t in time_scores]
        bad = [t for t in values if not math.isfinite(t)]
        if bad:
            raise CodebookError(f"{where}:{lines.line(['study', 'time_scores'])}: study.time_scores holds "
                                f"{bad[0]!r}; every time score must be a finite number",
                                hint="give each wave its time in the growth model's unit (e.g. years since the first wave)")
        for k in range(1, len(values)):
            if values[k] <= values[k - 1]:
                raise CodebookError(
                    f"{where}:{lines.line(['study', 'time_scores'])}: study.time_scores [{', '.join(str(_num(t)) for t in values)}] "
                    f"are not strictly increasing (wave {waves[k]!r} has {_num(values[k])}, after "
                    f"{_num(values[k - 1])} at wave {waves[k - 1]!r})",
                    hint="list the waves in time order under study.waves and give each a later time score")
    study = Study(id=str(s["id"]), waves=waves, wave=s.get("wave"), wide=s.get("wide"),
                  time_scores=tuple(float(t) for t in time_scores) if time_scores is not None else None,
                  title=s.get("title"), time_unit=s.get("time_unit"),
                  left_out=tuple(str(c) for c in s.get("left_out") or ()))

    variables: dict[str, Variable] = {}
    for i, v in enumerate(data["variables"]):
        line = lines.line(["variables", i])
        name = v["name"]
        if name in variables:
            raise CodebookError(f"{where}:{line}: variable {name!r} is named twice "
                                f"(first on line {variables[name].line})",
                                hint="give each column one entry")
        vtype = v.get("type", "number" if v.get("derived_from") is not None else "integer")
        rng = v.get("range")
        if rng is not None:
            lo, hi = rng
            if lo > hi:
                raise CodebookError(f"{where}:{lines.line(['variables', i, 'range'])}: variable {name}: "
                                    f"range [{lo}, {hi}] has its low end above its high end")
            if vtype not in ("integer", "number"):
                raise CodebookError(f"{where}:{lines.line(['variables', i, 'range'])}: variable {name}: "
                                    f"a range needs type integer or number, not {vtype}")
            rng = (_num(lo), _num(hi))
        levels = v.get("levels")
        if levels is not None and vtype != "category":
            raise CodebookError(f"{where}:{lines.line(['variables', i, 'levels'])}: variable {name}: "
                                f"levels need type category, not {vtype}")
        if vtype == "category" and not levels:
            raise CodebookError(f"{where}:{line}: variable {name}: a category needs `levels` "
                                "(code: label)")
        vwaves = v.get("waves")
        if vwaves is not None:
            unknown = [w for w in vwaves if w not in waves]
            if unknown:
                raise CodebookError(f"{where}:{lines.line(['variables', i, 'waves'])}: variable {name}: "
                                    f"wave(s) {unknown} are not in study.waves {list(waves)}")
            vwaves = tuple(vwaves)
        if v.get("reverse") and rng is None:
            raise CodebookError(f"{where}:{line}: variable {name} is reverse-keyed but has no range",
                                hint="add `range: [low, high]` so it can be keyed as low + high - x")
        if v.get("scale") and vtype not in ("integer", "number"):
            raise CodebookError(f"{where}:{line}: variable {name}: scale items must be integer or number")
        missing = {}
        for code, reason in (v.get("missing") or {}).items():
            missing[code] = str(reason)
        _refuse_valid_missing(name, missing, rng, levels, lines.line(["variables", i, "missing"]), where)
        derived_from, transform = v.get("derived_from"), v.get("transform")
        if (derived_from is None) != (transform is None):
            raise CodebookError(f"{where}:{line}: variable {name}: `derived_from` and `transform` go together",
                                hint=f"give both, e.g. `derived_from: wage` and `transform: log` "
                                     f"(transforms: {', '.join(TRANSFORMS)})")
        if derived_from is not None and vtype not in ("integer", "number"):
            raise CodebookError(f"{where}:{lines.line(['variables', i, 'type'])}: variable {name}: a derived "
                                f"variable has type number, not {vtype}")
        if derived_from is not None and (missing or v.get("scale")):
            key = "missing" if missing else "scale"
            raise CodebookError(f"{where}:{lines.line(['variables', i, key])}: variable {name}: a derived variable "
                                f"takes no `{key}` (its missing values are those of {derived_from})",
                                hint="declare missing codes on the variable it is derived from")
        if v.get("identifier") and v.get("scale"):
            raise CodebookError(f"{where}:{line}: variable {name} is an identifier and a scale item")
        variables[name] = Variable(
            name=name, label=str(v.get("label", "")), type=vtype, range=rng,
            levels=dict(levels) if levels else None, ordered=bool(v.get("ordered", False)),
            missing=missing, waves=vwaves, scale=v.get("scale"), reverse=bool(v.get("reverse", False)),
            identifier=bool(v.get("identifier", False)), line=line,
            unit=str(v["unit"]) if v.get("unit") is not None else None,
            derived_from=str(derived_from) if derived_from is not None else None, transform=transform)

    for name, var in list(variables.items()):
        if not var.derived:
            continue
        i = next(k for k, v in enumerate(data["variables"]) if v.get("name") == name)
        src = variables.get(var.derived_from)
        at = f"{where}:{lines.line(['variables', i, 'derived_from'])}"
        if src is None:
            import difflib
            close = difflib.get_close_matches(var.derived_from, list(variables), n=1)
            raise CodebookError(f"{at}: variable {name} is derived from {var.derived_from!r}, which the codebook "
                                "does not list",
                                hint=f"did you mean {close[0]!r}?" if close else "add that variable's entry")
        if not src.numeric or src.name in (s["id"], s.get("wave")):
            raise CodebookError(f"{at}: variable {name} is derived from {src.name}, which is not a numeric "
                                f"variable (type {src.type})", hint="derive only from an integer or number variable")
        if src.derived:
            raise CodebookError(f"{at}: variable {name} is derived from {src.name}, itself derived; derive "
                                f"from the raw variable {src.derived_from}")
        if var.waves is None and src.waves is not None:
            variables[name] = _replace(var, waves=src.waves)

    if study.wave and study.wave == study.id:
        raise CodebookError(f"{where}:{lines.line(['study'])}: study.id and study.wave name the same column")

    declared = data.get("scales") or {}
    scales: dict[str, Scale] = {}
    members: dict[str, list[str]] = {}
    for var in variables.values():
        if var.scale:
            if var.scale not in declared:
                raise CodebookError(f"{where}:{var.line}: variable {var.name} names scale "
                                    f"{var.scale!r}, which the scales block does not declare",
                                    hint=f"add `{var.scale}: {{label: ...}}` under `scales:`")
            members.setdefault(var.scale, []).append(var.name)
    for sname, settings in declared.items():
        items = members.get(sname, [])
        if len(items) < 2:
            raise CodebookError(f"{where}:{lines.line(['scales', sname])}: scale {sname!r} has "
                                f"{len(items)} item(s); a scale needs at least two",
                                hint="set `scale:` on its items, or remove the scale: a single measure needs no "
                                     "scale, name the variable itself in growth.outcomes")
        settings = settings or {}
        scales[sname] = Scale(name=sname, label=str(settings.get("label", sname)),
                              min_share=float(settings.get("min_share", DEFAULT_MIN_SHARE)),
                              items=tuple(items),
                              reverse=tuple(i for i in items if variables[i].reverse))
    return Codebook(study=study, variables=variables, scales=scales, path=path)


def _num(x):
    f = float(x)
    return int(f) if f.is_integer() else f


def _replace(var: Variable, **changes) -> Variable:
    from dataclasses import replace

    return replace(var, **changes)


def _same_code(a, b) -> bool:
    """Codes equal as numbers (1, 1.0, "1") or as text."""
    try:
        return float(a) == float(b)
    except (TypeError, ValueError):
        return str(a).strip() == str(b).strip()


def _refuse_valid_missing(name: str, missing: dict, rng, levels, line: int, where: str) -> None:
    """A missing code must not be a valid answer: inside the range or equal to a level."""
    for code, reason in missing.items():
        if rng is not None and isinstance(code, (int, float)) and not isinstance(code, bool) \
                and rng[0] <= code <= rng[1]:
            raise CodebookError(
                f"{where}:{line}: variable {name}: missing code {_num(code)} ({reason}) lies inside the range "
                f"[{_num(rng[0])}, {_num(rng[1])}], so every valid answer {_num(code)} would become missing",
                hint=f"use a code outside the range for {reason!r} (e.g. -97), or narrow the range if "
                     f"{_num(code)} is never a valid answer")
        for level, label in (levels or {}).items():
            if _same_code(code, level):
                raise CodebookError(
                    f"{where}:{line}: variable {name}: missing code {code!r} ({reason}) is also the level "
                    f"{level!r} ({label}), so every answer {label!r} would become missing",
                    hint="remove the level if the code means 'missing', or remove the missing code")


# --------------------------------------------------------------------------- drafting


def draft_codebook(frames_or_paths, *, id: str | None = None, wave: str | None = None,
                   waves: list | None = None) -> str:
    """Draft a codebook from data, as YAML text for a human to review.

    Parameters
    ----------
    frames_or_paths : path, DataFrame, or a list of them
        Data files (any format :func:`wavetrail.readers.read_table` reads) or
        DataFrames. Several files are taken as one file per wave, in order.
    id, wave : str, optional
        The id and wave columns; found from the data when not given (the pair
        that identifies the rows, the wave column having few distinct values).
    waves : list, optional
        The wave labels; taken from the wave column or the wide naming pattern,
        else from the file count.

    Returns
    -------
    str
        YAML text: the study block (time scores keep the spacing of numeric wave
        labels; text labels with a number and a unit are read), one entry per
        variable with type, observed range or levels and waves (a value that
        never changes within a person is measured once, at the first wave).
        Harmless guesses carry a ``# review`` note; a guess that changes results
        if wrong carries a comment with ``UNCHECKED GUESS``, which
        :func:`load_codebook` refuses until it is deleted. Labelled SPSS /
        Stata files give their variable labels, value labels (as levels, when
        they cover every value present) and user-defined or extended missing
        values as declared missing codes. See :mod:`wavetrail.drafting`.
    """
    return _draft_text(frames_or_paths, id=id, wave=wave, waves=waves)


def _draft_text(frames_or_paths, *, id=None, wave=None, waves=None) -> str:
    import pandas as pd

    from wavetrail.drafting import draft_text
    from wavetrail.readers import read_table, table_from_frame

    items = list(frames_or_paths) if isinstance(frames_or_paths, (list, tuple)) else [frames_or_paths]
    if not items:
        raise CodebookError("draft_codebook needs at least one data file or table")
    tables = [table_from_frame(x) if isinstance(x, pd.DataFrame) else read_table(x) for x in items]
    return draft_text(tables, id=id, wave=wave, waves=waves)
