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

__all__ = ["CONFIG_FILE", "load_config", "validate_config", "config_schema", "default_config", "read_yaml"]

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
