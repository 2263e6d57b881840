"""The error tree. Every user-facing failure is a :class:`WavetrailError`.

A message says what happened, where (file, line, row, key) and what to do.
The CLI catches :class:`WavetrailError`, prints its message without a
traceback and exits with ``exit_code`` (1: a finding that blocks; 2: bad usage).
"""

from __future__ import annotations


class WavetrailError(Exception):
    """Base of every error wavetrail raises on purpose."""

    exit_code = 1

    def __init__(self, message: str, *, hint: str | None = None):
        super().__init__(message)
        self.message = message
        self.hint = hint

    def __str__(self) -> str:  # message, then what to do
        return self.message if not self.hint else f"{self.message}\n  -> {self.hint}"


class UsageError(WavetrailError):
    """The command was called wrongly (bad option value, missing argument)."""

    exit_code = 2


class ConfigError(WavetrailError):
    """config/config.yaml is malformed or breaks the schema (names file, line or key)."""


class CodebookError(WavetrailError):
    """config/codebook.yaml is malformed or inconsistent (names file, line or variable)."""


class DataError(WavetrailError):
    """A data file cannot be read or does not match the codebook (names file and row)."""


class ProjectError(WavetrailError):
    """The folder is not a wavetrail project, or cannot become one."""


class RegistryError(WavetrailError):
    """A raw data file differs from its registered hash in data/SHA256SUMS."""


class BuildError(WavetrailError):
    """A workflow job failed; the message names the rule and the end of its log."""


class ArchiveError(WavetrailError):
    """A reviewer archive is unsafe, incomplete or does not verify (names the member)."""


class ModelError(WavetrailError):
    """A statistical model cannot be fitted as specified (too few people, constant wave, ...)."""
