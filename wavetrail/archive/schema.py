"""What ``wavetrail verify`` accepts from an archive before it uses any of it.

Everything an archive says about itself is untrusted input: the archive
description (``wavetrail-archive.json``), the ledger records, ``bag-info.txt``
and every path any of them names. This module holds the JSON Schemas they
must satisfy and the path rule every named file must pass before it is
opened:

- a path is relative, POSIX, without ``..``, backslash, NUL, drive letter or
  ``~``, and not empty;
- it resolves inside the extracted payload;
- no part of it is a link, and the file itself is a regular file (never a
  device, FIFO or socket, which could block or never end).

Each violation is a :class:`PathProblem` whose text names the path and why.
"""

from __future__ import annotations

import os
import re
import stat
from pathlib import Path, PurePosixPath

import jsonschema

_HEX64 = {"type": "string", "pattern": "^[0-9a-f]{64}$"}
_PATH = {"type": "string", "minLength": 1, "maxLength": 4096}

#: one file of a ledger record
_ENTRY = {
    "type": "object",
    "required": ["path", "sha256"],
    "properties": {"path": _PATH, "sha256": _HEX64, "size": {"type": ["integer", "null"], "minimum": 0}},
}

#: a ledger record as ``wavetrail verify`` needs it (``results/ledger/*.json``)
LEDGER_SCHEMA = {
    "type": "object",
    "required": ["schema", "step", "wildcards", "inputs", "outputs", "params", "seed", "git", "wavetrail"],
    "properties": {
        "schema": {"const": "wavetrail-ledger/1"},
        "step": {"type": "string", "pattern": r"^\w+$"},
        "wildcards": {"type": "object", "additionalProperties": {"type": "string"}},
        "inputs": {"type": "array", "items": _ENTRY},
        "outputs": {"type": "array", "items": _ENTRY},
        "params": {"type": "object"},
        "seed": {"type": ["integer", "null"]},
        "lock_sha256": {"type": ["string", "null"]},
        "git": {"type": "object", "properties": {"commit": {"type": ["string", "null"]},
                                                 "dirty": {"type": ["boolean", "null"]}}},
        "wavetrail": {"type": ["string", "null"]},
    },
}

_KEPT = {"type": "object", "required": ["sha256"],
         "properties": {"sha256": {"anyOf": [_HEX64, {"type": "null"}]},
                        "size": {"type": ["integer", "null"]}, "reason": {"type": "string"}}}

#: the archive's own description (``wavetrail-archive.json``)
ARCHIVE_SCHEMA = {
    "type": "object",
    "required": ["schema", "title", "commit", "wavetrail", "mode", "registry", "withheld", "stand-in",
                 "altered", "disclosure", "state"],
    "properties": {
        "schema": {"const": "wavetrail-archive/1"},
        "title": {"type": "string"},
        "commit": {"type": "string", "pattern": "^[0-9a-f]{40}$"},
        "committed": {"type": "string"},
        "wavetrail": {"type": "string", "pattern": r"^[0-9A-Za-z.+!-]{1,40}$"},
        "mode": {"enum": ["include", "exclude", "stand-in"]},
        "registry": {"type": "object", "additionalProperties": _HEX64},
        "withheld": {"type": "object", "additionalProperties": _KEPT},
        "altered": {"type": "object", "additionalProperties": _KEPT},
        "stand-in": {"anyOf": [{"type": "null"}, {
            "type": "object", "required": ["path", "sha256"],
            "properties": {"path": _PATH, "sha256": _HEX64, "replaces": {"type": "array", "items": _PATH},
                           "closeness": {"type": "object"}}}]},
        "disclosure": {"type": "object", "properties": {
            "min_cell": {"type": "integer"},
            "findings": {"type": "array", "items": {"type": "object", "properties": {
                "severity": {"type": "string"}, "file": {"type": ["string", "null"]},
                "message": {"type": "string"}}}},
            "allowed": {"type": "boolean"}}},
        "state": {"type": "object", "properties": {
            "problems": {"type": "array", "items": {"type": "string"}}, "allowed": {"type": "boolean"}}},
    },
}

#: keys of bag-info.txt that must agree with the archive description
#: bag-info.txt label of a stand-in archive (BagIt labels are capitalised words joined by hyphens)
STAND_IN_LABEL = "Stand-in"

BAG_INFO_KEYS = {"Project-Commit": "commit", "Raw-Data-Mode": "mode", "Wavetrail-Version": "wavetrail",
                 "Project-Title": "title"}


def schema_problems(value, schema: dict, where: str) -> list[str]:
    """Every way ``value`` breaks ``schema``, each naming the key (``where: key: problem``)."""
    validator = jsonschema.Draft202012Validator(schema)
    out = []
    for err in sorted(validator.iter_errors(value), key=lambda e: [str(p) for p in e.absolute_path]):
        key = "/".join(str(p) for p in err.absolute_path) or "(top)"
        message = err.message if len(err.message) < 200 else err.message[:200] + "..."
        out.append(f"{where}: {key}: {message}")
    return out


class PathProblem(Exception):
    """A path named by the archive that must not be opened."""


_DRIVE = re.compile(r"^[A-Za-z]:")


def check_rel(rel) -> str:
    """``rel`` as a clean project-relative POSIX path, or :class:`PathProblem`."""
    if not isinstance(rel, str) or not rel:
        raise PathProblem(f"{rel!r}: not a path")
    if "\x00" in rel or "\\" in rel:
        raise PathProblem(f"{rel!r}: NUL or backslash in the path")
    if rel.startswith(("/", "~")) or _DRIVE.match(rel) or PurePosixPath(rel).is_absolute():
        raise PathProblem(f"{rel!r}: absolute path (only paths inside the archive are read)")
    parts = PurePosixPath(rel).parts
    if ".." in parts:
        raise PathProblem(f"{rel!r}: '..' in the path (only paths inside the archive are read)")
    if any(p in ("", ".") for p in rel.split("/")):
        raise PathProblem(f"{rel!r}: empty or '.' path part")
    return rel


def payload_file(payload: Path, rel) -> Path | None:
    """The regular file ``rel`` inside ``payload``; ``None`` when absent.

    Raises
    ------
    PathProblem
        When ``rel`` is unsafe, leaves the payload, passes through a link or
        names something other than a regular file.
    """
    rel = check_rel(rel)
    here = Path(payload)
    for part in PurePosixPath(rel).parts:
        here = here / part
        try:
            st = os.lstat(here)
        except FileNotFoundError:
            return None
        except OSError as err:
            raise PathProblem(f"{rel!r}: cannot be inspected ({err.strerror})") from None
        if stat.S_ISLNK(st.st_mode):
            raise PathProblem(f"{rel!r}: passes through a link (refused)")
    if stat.S_ISDIR(st.st_mode):
        return None
    if not stat.S_ISREG(st.st_mode):
        raise PathProblem(f"{rel!r}: not a regular file (device, FIFO or socket refused)")
    real = os.path.realpath(here)
    base = os.path.realpath(payload)
    if os.path.commonpath([real, base]) != base:
        raise PathProblem(f"{rel!r}: resolves outside the archive")
    return here
