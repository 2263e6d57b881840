"""Where the bundled folders (template/, rules/, examples/) are.

In a wheel they are installed under ``wavetrail/_bundled/``; in an editable
install or a source checkout they are the top-level folders of the repository.
"""

from __future__ import annotations

from pathlib import Path

_PKG = Path(__file__).resolve().parent


def bundled(name: str) -> Path:
    """Path of a bundled folder: ``template``, ``rules`` or ``examples``."""
    for candidate in (_PKG / "_bundled" / name, _PKG.parent / name):
        if candidate.is_dir():
            return candidate
    raise FileNotFoundError(
        f"wavetrail's bundled folder {name!r} is missing from the installation; reinstall wavetrail"
    )


def template_dir() -> Path:
    return bundled("template")


def rules_dir() -> Path:
    return bundled("rules")


def examples_dir() -> Path:
    return bundled("examples")
