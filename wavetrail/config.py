"""Project settings: load ``config/config.yaml`` and validate it against the JSON Schema.

The schema (``wavetrail/schemas/config.schema.json``) gives every key a type, a
description and a default. :func:`validate_config` fills the defaults and refuses an
unknown or mistyped key, naming the key, the file and the YAML line, and suggesting the
nearest known key when the name looks like a typo.
"""

from __future__ import annotations

import copy
import difflib
import json
from functools import lru_cache
from pathlib import Path
from typing import Any

import yaml

from wavetrail.errors import ConfigError

__all__ = ["CONFIG_FILE", "load_config", "validate_config", "config_schema", "default_config", "read_yaml",
           "resolve_outcomes", "check_names", "outcome_candidates"]

#: where a project keeps its settings, relative to the project folder
CONFIG_FILE = "config/config.yaml"

_SCHEMA_PATH = Path(__file__).resolve().parent / "schemas" / "config.schema.json"


@lru_cache(maxsize=1)
def _schema_text() -> str:
    return _SCHEMA_PATH.read_text(encoding="utf-8")


def config_schema() -> dict:
    """The JSON Schema of ``config/config.yaml`` (a fresh copy)."""
    return json.loads(_schema_text())


def default_config() -> dict:
    """The settings that an empty ``config.yaml`` stands for."""
    return _fill_defaults({}, config_schema())


# --------------------------------------------------------------------------- YAML


def read_yaml(path: str | Path) -> tuple[Any, dict[tuple, int]]:
    """Read a YAML file; return its content and the line (1-based) of every key path.

    Raises
    ------
    ConfigError
        The file is missing or is not valid YAML (the message names file and line).
    """
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise ConfigError(f"settings file {path} is missing",
                          hint="create it (wavetrail new writes one) or run the command inside a project") from None
    except UnicodeDecodeError as err:
        raise ConfigError(f"{path} is not UTF-8 text ({err.reason} at byte {err.start})") from None
    try:
        node = yaml.compose(text, Loader=yaml.SafeLoader)
        content = yaml.safe_load(text)
    except yaml.MarkedYAMLError as err:
        mark = err.problem_mark or err.context_mark
        where = f"{path}, line {mark.line + 1}, column {mark.column + 1}" if mark else str(path)
        problem = err.problem or err.context or "malformed YAML"
        raise ConfigError(f"{where}: cannot read the YAML: {problem}",
                          hint="fix the indentation or quoting on that line (YAML uses spaces, not tabs)") from None
    except yaml.YAMLError as err:
        raise ConfigError(f"{path}: cannot read the YAML: {err}") from None
    lines: dict[tuple, int] = {}
    if node is not None:
        _collect_lines(node, (), lines)
    return content, lines


def _collect_lines(node, prefix: tuple, lines: dict[tuple, int]) -> None:
    lines.setdefault(prefix, node.start_mark.line + 1)
    if isinstance(node, yaml.MappingNode):
        for key_node, value_node in node.value:
            key = key_node.value
            lines[prefix + (key,)] = key_node.start_mark.line + 1
            _collect_lines(value_node, prefix + (key,), lines)
    elif isinstance(node, yaml.SequenceNode):
        for i, item in enumerate(node.value):
            lines[prefix + (i,)] = item.start_mark.line + 1
            _collect_lines(item, prefix + (i,), lines)


# --------------------------------------------------------------------------- validation


def load_config(project: str | Path) -> dict:
    """Load and validate the settings of a project (or a settings file given directly).

    Parameters
    ----------
    project
        The project folder (its ``config/config.yaml`` is read) or a YAML file.

    Returns
    -------
    dict
        The validated settings with every default filled in.
    """
    path = Path(project)
    if path.is_dir():
        path = path / CONFIG_FILE
    content, lines = read_yaml(path)
    return validate_config(content, source=path, lines=lines)


def validate_config(config: Any, source: str | Path | None = None, lines: dict[tuple, int] | None = None) -> dict:
    """Check settings against the schema and return them with the defaults filled in.

    Parameters
    ----------
    config
        The parsed settings (a mapping; ``None`` stands for an empty file).
    source
        The file they came from, named in messages; when given and ``lines`` is not,
        the file is re-read to find the line of the offending key.
    lines
        Key path -> line, as returned by :func:`read_yaml`.

    Raises
    ------
    ConfigError
        Listing every problem: the key path, the line, what is wrong and what is allowed.
    """
    import jsonschema

    if config is None:
        config = {}
    config = _plain(config)
    where = str(source) if source is not None else "the settings"
    if lines is None and source is not None and Path(source).is_file():
        try:
            _, lines = read_yaml(source)
        except ConfigError:
            lines = {}
    lines = lines or {}
    if not isinstance(config, dict):
        raise ConfigError(f"{where}: the settings must be a mapping of keys to values, not {type(config).__name__}")
    config = _renamed_settings(config, where, lines)
    schema = config_schema()
    validator = jsonschema.Draft202012Validator(schema)
    problems = []
    for error in sorted(validator.iter_errors(config), key=lambda e: (list(map(str, e.absolute_path)), e.message)):
        problems.extend(_describe(error, schema, lines))
    if problems:
        problems = sorted(set(problems), key=lambda p: (p[0], p[1]))
        body = "\n".join(f"  {where}{_line(line)}: {text}" for line, text in problems)
        n = len(problems)
        raise ConfigError(f"{n} problem{'s' if n > 1 else ''} in the settings:\n{body}",
                          hint="each key, its type and its default are listed in docs/project-layout.md")
    return _fill_defaults(config, schema)


#: settings renamed in 0.x that are still read, with a warning, for one version:
#: (section, old key) -> (new key, old value -> new value)
RENAMED_SETTINGS = {
    ("forest", "method"): ("split", {"score": "scores", "likelihood": "likelihood_ratio"}),
}


class SettingRenamed(FutureWarning):
    """A settings key was written with its earlier name (read this version, refused later)."""


def _renamed_settings(config: dict, where: str, lines: dict[tuple, int]) -> dict:
    """Rewrite keys of their earlier names to today's, warning with the file and line of each."""
    import warnings

    for (section, old), (new, values) in RENAMED_SETTINGS.items():
        part = config.get(section)
        if not isinstance(part, dict) or old not in part:
            continue
        line = _line(_line_of(lines, (section, old)))
        if new in part:
            raise ConfigError(f"{where}{line}: {section}.{old} is the earlier name of {section}.{new}, "
                              f"and both are set", hint=f"delete {section}.{old}")
        value = part[old]
        value = values.get(value, value) if isinstance(value, str) else value
        warnings.warn(f"{where}{line}: {section}.{old} is renamed {section}.{new}; write "
                      f"'{new}: {value}' (the earlier name is read this version only)", SettingRenamed, stacklevel=2)
        part = {(new if k == old else k): (value if k == old else v) for k, v in part.items()}
        config = {**config, section: part}
    return config


def _line(line: int) -> str:
    return f", line {line}" if line else ""


def _key_name(path) -> str:
    return ".".join(str(p) for p in path) if path else "(top level)"


def _line_of(lines: dict[tuple, int], path: tuple) -> int:
    path = tuple(path)
    while path:
        if path in lines:
            return lines[path]
        path = path[:-1]
    return lines.get((), 0)


def _subschema(schema: dict, path) -> dict:
    node = schema
    for part in path:
        props = node.get("properties", {})
        if isinstance(part, str) and part in props:
            node = props[part]
        elif isinstance(part, int) and isinstance(node.get("items"), dict):
            node = node["items"]
        else:
            return {}
    return node


def _describe(error, schema: dict, lines: dict[tuple, int]) -> list[tuple[int, str]]:
    path = tuple(error.absolute_path)
    if error.validator == "additionalProperties":
        known = sorted(error.schema.get("properties", {}))
        extra = sorted(set(error.instance) - set(known))
        out = []
        for key in extra:
            full = path + (key,)
            close = difflib.get_close_matches(str(key), known, n=1, cutoff=0.6)
            hint = f"did you mean {'.'.join(map(str, path + (close[0],)))!r}?" if close else \
                f"known keys here: {', '.join(known)}"
            out.append((_line_of(lines, full), f"unknown key {_key_name(full)!r}; {hint}"))
        return out
    name = _key_name(path)
    sub = _subschema(schema, path)
    allowed = _allowed(sub) if sub else ""
    if error.validator in ("type", "enum", "const", "oneOf", "anyOf"):
        text = f"key {name!r} has the value {error.instance!r}, which is not allowed; expected {allowed or error.message}"
    elif error.validator in ("minimum", "maximum", "exclusiveMinimum", "exclusiveMaximum"):
        text = f"key {name!r}: {error.message}"
    elif error.validator in ("minItems", "uniqueItems", "minLength", "maxItems"):
        text = f"key {name!r}: {error.message}"
    else:
        text = f"key {name!r}: {error.message}"
    if sub.get("description"):
        text += f" ({sub['description']})"
    return [(_line_of(lines, path), text)]


def _allowed(sub: dict) -> str:
    if "enum" in sub:
        return "one of " + ", ".join(map(str, sub["enum"]))
    if "const" in sub:
        return repr(sub["const"])
    if "oneOf" in sub:
        parts = []
        for option in sub["oneOf"]:
            if "const" in option:
                parts.append(repr(option["const"]))
            elif option.get("type") == "array":
                parts.append("a list of names")
            else:
                parts.append(str(option.get("type", "a value")))
        return " or ".join(parts)
    kind = sub.get("type")
    if isinstance(kind, list):
        kind = " or ".join(kind)
    if kind == "array" and "items" in sub and "enum" in sub["items"]:
        return "a list of " + ", ".join(map(str, sub["items"]["enum"]))
    return {"integer": "a whole number", "number": "a number", "string": "a text",
            "boolean": "true or false", "array": "a list", "object": "a mapping"}.get(kind, kind or "")


def _fill_defaults(instance: Any, schema: dict) -> Any:
    if not isinstance(instance, dict) or schema.get("type") != "object":
        return instance
    out = dict(instance)
    for key, sub in schema.get("properties", {}).items():
        if key not in out and "default" in sub:
            out[key] = copy.deepcopy(sub["default"])
        if key in out:
            out[key] = _fill_defaults(out[key], sub)
    return out


def _plain(obj: Any) -> Any:
    """Snakemake hands over its own mapping types; turn them into plain dicts and lists."""
    if isinstance(obj, dict) or (hasattr(obj, "items") and hasattr(obj, "keys")):
        return {k: _plain(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_plain(v) for v in obj]
    return obj


# --------------------------------------------------------------------------- names against the codebook


def outcome_candidates(codebook) -> list[str]:
    """Every name that can be a growth or forest outcome: the scales, then the numeric
    variables measured at two or more waves (a single item, a measured value, a total)."""
    names = list(codebook.scales)
    names += [n for n in codebook.repeated_measures() if n not in codebook.scales]
    return names


def _no_outcome_message(codebook) -> str:
    measures = codebook.repeated_measures()
    if measures:
        return ("the codebook declares no scale, so there is no default growth outcome; name one or more of "
                f"the numeric repeated variables under growth.outcomes: {', '.join(measures)}")
    return ("the codebook declares no scale and no numeric variable measured at two or more waves, so there "
            "is nothing to model over the waves")


def resolve_outcomes(config: dict, codebook) -> tuple[list[str], str | None]:
    """The growth outcomes and the forest outcome the settings stand for.

    ``growth.outcomes: []`` means every scale of the codebook; with no scale it is
    refused unless the forest is disabled too (then nothing is modelled and the
    build stops at the checks and the report). ``forest.outcome: null`` means the
    first growth outcome. The
    forest outcome is ``None`` when the forest is disabled.

    Raises
    ------
    ConfigError
        No outcome can be found (the message lists the names that could be given).
    """
    growth = config.get("growth") or {}
    forest = config.get("forest") or {}
    outcomes = [str(o) for o in (growth.get("outcomes") or [])]
    if not outcomes:
        outcomes = list(codebook.scales)
    if not outcomes and not forest.get("enabled", True):
        # nothing to model yet (a fresh draft without --outcome): the build checks the
        # data and writes the report, which lists the variables that could be named
        return [], None
    if not outcomes:
        raise ConfigError(f"{CONFIG_FILE}: growth.outcomes is empty and " + _no_outcome_message(codebook),
                          hint="e.g. `growth: {outcomes: [NAME]}`; the forest models the first one unless "
                               "forest.outcome names another")
    forest_outcome = None
    if forest.get("enabled", True):
        forest_outcome = str(forest.get("outcome") or outcomes[0])
    return outcomes, forest_outcome


def _growth_names(growth: dict, codebook) -> list[str]:
    """growth.outcomes, or every scale when empty (names only; validity is checked elsewhere)."""
    return [str(o) for o in (growth.get("outcomes") or list(codebook.scales))]


def check_names(config: dict, codebook, source: str | Path = CONFIG_FILE,
                lines: dict[tuple, int] | None = None) -> tuple[list[str], str | None]:
    """Resolve every name of the settings against the codebook, before anything runs.

    Checks growth.outcomes, growth.predictors, forest.outcome, forest.predictors (a list),
    forest.interaction_pairs, forest.confirm (a list, when forest.holdout > 0) and
    invariance.scales, and that a default outcome
    exists. Returns :func:`resolve_outcomes`.

    Raises
    ------
    ConfigError
        Listing every unknown or unusable name with the file, the line and the key,
        and the closest known names.
    """
    lines = lines or {}
    where = str(source)
    problems: list[tuple[int, str]] = []
    candidates = outcome_candidates(codebook)
    variables = codebook.variables
    study = codebook.study

    def line(*path) -> int:
        return _line_of(lines, path)

    def close(name, choices) -> str:
        near = difflib.get_close_matches(str(name), [str(c) for c in choices], n=3, cutoff=0.6)
        return f"; did you mean {', '.join(map(repr, near))}?" if near else ""

    def why_not_outcome(name) -> str:
        var = variables.get(name)
        if var is None:
            return f"is not a scale or variable of the codebook{close(name, candidates)}"
        if name in (study.id, study.wave):
            return "is the id or wave column"
        if var.identifier:
            return "is an identifier"
        if not var.numeric:
            return f"has type {var.type}; an outcome is a number measured at two or more waves"
        return (f"is measured at {len(var.waves or ())} wave(s) ({', '.join(map(str, var.waves or ()))}); "
                "an outcome needs two or more")

    growth = config.get("growth") or {}
    for i, name in enumerate(growth.get("outcomes") or []):
        if name not in candidates:
            problems.append((line("growth", "outcomes", i),
                             f"growth.outcomes[{i}] {name!r} {why_not_outcome(name)}"))
    forest = config.get("forest") or {}
    if forest.get("enabled", True):
        name = forest.get("outcome")
        if name is not None and name not in candidates:
            problems.append((line("forest", "outcome"), f"forest.outcome {name!r} {why_not_outcome(name)}"))
        predictors = forest.get("predictors", "wave1")
        eligible = [v.name for v in codebook.data_variables() if not v.identifier]
        if isinstance(predictors, list):
            for i, p in enumerate(predictors):
                if p not in variables:
                    problems.append((line("forest", "predictors", i),
                                     f"forest.predictors[{i}] {p!r} is not a variable of the codebook"
                                     f"{close(p, eligible)}"))
                elif p not in eligible:
                    problems.append((line("forest", "predictors", i),
                                     f"forest.predictors[{i}] {p!r} is an identifier or the id/wave column and "
                                     "can never be a predictor"))
            pool = set(predictors)
        else:
            first = study.waves[0]
            pool = {v.name for v in codebook.data_variables() if v.measured_at(first) and not v.scale
                    and not v.identifier and v.type not in ("text", "date")}
            target = name or ((growth.get("outcomes") or list(codebook.scales) or [None])[0])
            if target in candidates:  # wave1 leaves out the outcome's own raw variables
                own = codebook.sources_of(target)
                own |= {v.name for v in variables.values() if v.derived and v.derived_from in own}
                pool -= own

        def outside_pool(p) -> str:
            if p not in variables:
                return "is not a variable of the codebook"
            if isinstance(predictors, list):
                return "is not among forest.predictors"
            return ("is not a candidate predictor of the forest (a first-wave variable outside the scales and "
                    "the outcome's own raw variables, not an identifier, text or date)")

        for i, pair in enumerate(forest.get("interaction_pairs") or []):
            for j, p in enumerate(pair):
                if p not in pool:
                    problems.append((line("forest", "interaction_pairs", i, j),
                                     f"forest.interaction_pairs[{i}] names {p!r}, which {outside_pool(p)}"
                                     f"{close(p, pool)}"))
    if forest.get("enabled", True) and float(forest.get("holdout", 0) or 0) > 0:
        confirm = forest.get("confirm", 5)
        if isinstance(confirm, list):
            for i, p in enumerate(confirm):
                if p not in pool:
                    problems.append((line("forest", "confirm", i),
                                     f"forest.confirm[{i}] names {p!r}, which {outside_pool(p)}{close(p, pool)}"))
    eligible_growth = [v.name for v in codebook.data_variables()
                       if not v.identifier and v.name not in (study.id, study.wave) and v.type not in ("text", "date")]
    for i, p in enumerate(growth.get("predictors") or []):
        if p not in variables:
            problems.append((line("growth", "predictors", i),
                             f"growth.predictors[{i}] {p!r} is not a variable of the codebook"
                             f"{close(p, eligible_growth)}"))
        elif p not in eligible_growth:
            problems.append((line("growth", "predictors", i),
                             f"growth.predictors[{i}] {p!r} is an identifier, the id/wave column, free text or a "
                             "date and cannot predict growth"))
        elif p in set().union(*(codebook.sources_of(o) for o in _growth_names(growth, codebook))):
            problems.append((line("growth", "predictors", i),
                             f"growth.predictors[{i}] {p!r} is part of a growth outcome (the outcome itself or "
                             "one of its items) and cannot predict its own growth"))
    scales = (config.get("invariance") or {}).get("scales", "all")
    if isinstance(scales, list):
        for i, name in enumerate(scales):
            if name not in codebook.scales:
                extra = (" (invariance is tested for multi-item scales only; a single measure has none)"
                         if name in variables else close(name, codebook.scales))
                problems.append((line("invariance", "scales", i),
                                 f"invariance.scales[{i}] {name!r} is not a scale of the codebook{extra}"))
    forest_on = (config.get("forest") or {}).get("enabled", True)
    if not (growth.get("outcomes") or []) and not codebook.scales and forest_on:
        problems.append((line("growth", "outcomes") or line("growth"),
                         "growth.outcomes is empty and " + _no_outcome_message(codebook)))
    forest_cfg = config.get("forest") or {}
    if forest_on and isinstance(forest_cfg.get("predictors", "wave1"), str):
        target = (forest_cfg.get("outcome") or next(iter(growth.get("outcomes") or []), None)
                  or next(iter(codebook.scales), None))
        if target is not None and (target in codebook.scales or target in variables) \
                and not codebook.first_wave_predictors(str(target)):
            problems.append((line("forest", "predictors") or line("forest"),
                             f"forest.predictors {forest_cfg.get('predictors', 'wave1')!r} names no variable: the "
                             f"codebook has no first-wave variable besides {target!r} and its own items to screen; "
                             "add predictors measured at the first wave to the codebook, list them under "
                             "forest.predictors, or set forest.enabled: false"))
    if problems:
        problems = sorted(set(problems))
        body = "\n".join(f"  {where}{_line(n)}: {text}" for n, text in problems)
        cb = f" ({codebook.path})" if codebook.path else ""
        k = len(problems)
        raise ConfigError(f"{k} problem{'s' if k > 1 else ''} with the names in the settings, checked against "
                          f"the codebook{cb}:\n{body}",
                          hint="outcomes are scales or numeric variables measured at two or more waves "
                               f"(here: {', '.join(candidates) or 'none'}); predictors are codebook variables")
    return resolve_outcomes(config, codebook)
