"""Workflow steps of the audit trail: check raw data against the registry, lock the environment."""

from __future__ import annotations

from wavetrail._io import atomic_write_text, write_table
from wavetrail.environment import lock_text
from wavetrail.registry import verify_registered


def _as_list(value) -> list[str]:
    if value is None:
        return []
    return [str(v) for v in value] if isinstance(value, (list, tuple)) else [str(value)]


def confirm_raw_hashes(job) -> None:
    """Rule ``confirm_raw_hashes``: refuse to go on when a raw file differs from data/SHA256SUMS.

    Inputs ``data`` (raw files) and ``registry`` (data/SHA256SUMS); output
    ``registry`` = results/checks/data_registry.csv with columns
    ``file, sha256, size, state``.

    Raises
    ------
    RegistryError
        Naming each changed, missing or unregistered file, the expected and
        actual hash, and the command that accepts the change.
    """
    table = verify_registered(job.project, _as_list(job.input["data"]), registry=job.input.get("registry"))
    write_table(job.path(job.output["registry"]), table)


def lock_environment(job) -> None:
    """Rule ``lock_environment``: write environment/requirements.lock (every installed distribution).

    The rule's params carry :func:`wavetrail.environment.fingerprint`, so
    Snakemake reruns this job when the environment changes; the lock file's
    sha256 then equals that fingerprint.
    """
    atomic_write_text(job.path(job.output["lock"]), lock_text())
