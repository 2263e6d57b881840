"""The software environment of a build: installed distributions, their lock text and its hash.

The lock (``environment/requirements.lock``) lists every installed
distribution as ``name==version``, one per line, sorted by normalised name,
after two comment lines naming the Python version and the platform. The
environment *fingerprint* is the sha256 of exactly that text, so
``sha256(environment/requirements.lock)`` equals the fingerprint of the
environment that wrote it, and a ledger record's ``lock_sha256`` tells
whether a job ran in the locked environment or in another one.

Everything comes from :mod:`importlib.metadata`; nothing touches the network.
"""

from __future__ import annotations

import importlib.metadata as metadata
import platform
import re
import sys
from pathlib import Path

import pandas as pd

from wavetrail._io import sha256_bytes
from wavetrail.errors import WavetrailError

#: where a project keeps its lock, relative to the project root
LOCK_PATH = "environment/requirements.lock"

_NORMALISE = re.compile(r"[-_.]+")
_LINE = re.compile(r"^(?P<name>[A-Za-z0-9][A-Za-z0-9._-]*)==(?P<version>\S+)$")


def normalise_name(name: str) -> str:
    """Canonical distribution name: lower case, runs of ``-_.`` become one ``-``."""
    return _NORMALISE.sub("-", name).lower()


def installed_distributions() -> dict[str, str]:
    """Every distribution importable from this interpreter: ``{normalised name: version}``.

    When the same name is found twice on ``sys.path`` the first one wins, as it
    does for imports.
    """
    found: dict[str, str] = {}
    for dist in metadata.distributions():
        name = dist.metadata["Name"] if dist.metadata else None
        if not name:
            continue
        key = normalise_name(name)
        if key not in found:
            found[key] = dist.version
    return dict(sorted(found.items()))


def package_versions(names) -> dict[str, str | None]:
    """Installed versions of ``names`` (normalised); ``None`` for a package that is not installed."""
    out: dict[str, str | None] = {}
    for name in names:
        try:
            out[normalise_name(name)] = metadata.version(name)
        except metadata.PackageNotFoundError:
            out[normalise_name(name)] = None
    return out


def interpreter() -> str:
    """``"<implementation> <version>"`` of the running Python, e.g. ``"CPython 3.11.7"``."""
    return f"{platform.python_implementation()} {platform.python_version()}"


def platform_tag() -> str:
    """Operating system and machine, e.g. ``"linux-x86_64"`` (no kernel release: it changes too often)."""
    return f"{sys.platform}-{platform.machine() or 'unknown'}"


def lock_text(distributions: dict[str, str] | None = None) -> str:
    """The text of ``requirements.lock`` for ``distributions`` (default: the installed set)."""
    dists = installed_distributions() if distributions is None else distributions
    lines = [f"# python: {interpreter()}", f"# platform: {platform_tag()}"]
    lines += [f"{normalise_name(n)}=={v}" for n, v in sorted((normalise_name(n), v) for n, v in dists.items())]
    return "\n".join(lines) + "\n"


def fingerprint(text: str | None = None) -> str:
    """sha256 of a lock text (default: of the running environment's lock text)."""
    return sha256_bytes((lock_text() if text is None else text).encode("utf-8"))


def parse_lock(text: str, source: str = "requirements.lock") -> tuple[dict[str, str], dict[str, str]]:
    """Split a lock text into ``({name: version}, {header key: value})``.

    Raises
    ------
    WavetrailError
        On a line that is neither a comment nor ``name==version`` (names the line).
    """
    packages: dict[str, str] = {}
    header: dict[str, str] = {}
    for number, raw in enumerate(text.splitlines(), start=1):
        line = raw.strip()
        if not line:
            continue
        if line.startswith("#"):
            key, sep, value = line[1:].partition(":")
            if sep:
                header[key.strip()] = value.strip()
            continue
        match = _LINE.match(line)
        if not match:
            raise WavetrailError(
                f"{source}, line {number}: expected 'name==version', found {raw!r}",
                hint="rebuild the lock with `wavetrail build` (rule lock_environment) instead of editing it",
            )
        packages[normalise_name(match["name"])] = match["version"]
    return packages, header


def read_lock(path: str | Path) -> tuple[dict[str, str], dict[str, str]]:
    """Read and parse a lock file (see :func:`parse_lock`)."""
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise WavetrailError(f"no environment lock at {path}",
                             hint="run `wavetrail build` to write environment/requirements.lock") from None
    return parse_lock(text, source=str(path))


def compare_locks(old_text: str, new_text: str) -> pd.DataFrame:
    """What differs between two lock texts.

    Returns
    -------
    DataFrame
        Columns ``item, old, new, change`` (``change`` is ``added``, ``removed``
        or ``changed``), sorted by item. Items are package names plus
        ``python`` and ``platform`` from the header. Empty when equal.
    """
    old_pk, old_hd = parse_lock(old_text, "old lock")
    new_pk, new_hd = parse_lock(new_text, "new lock")
    rows = []
    for key in ("python", "platform"):
        a, b = old_hd.get(key), new_hd.get(key)
        if a != b:
            rows.append({"item": key, "old": a, "new": b, "change": "changed"})
    for name in sorted(set(old_pk) | set(new_pk)):
        a, b = old_pk.get(name), new_pk.get(name)
        if a == b:
            continue
        change = "added" if a is None else "removed" if b is None else "changed"
        rows.append({"item": name, "old": a, "new": b, "change": change})
    return pd.DataFrame(rows, columns=["item", "old", "new", "change"], dtype=object)


def compare_with_installed(lock_path: str | Path) -> pd.DataFrame:
    """Differences between a project's lock file and the running environment (see :func:`compare_locks`)."""
    lock_path = Path(lock_path)
    read_lock(lock_path)  # clean error when missing or malformed
    return compare_locks(lock_path.read_text(encoding="utf-8"), lock_text())
