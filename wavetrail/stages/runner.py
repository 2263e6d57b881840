"""Run one workflow step from a Snakemake job and record it in the ledger.

The only place that touches the ``snakemake`` object: it is read duck-typed
(``input``, ``output``, ``params``, ``wildcards``, ``log``, ``config``, ``rule``)
and turned into a plain :class:`Job`, so the library never imports Snakemake.
"""

from __future__ import annotations

import importlib
import logging
import sys
import traceback
from dataclasses import dataclass, field
from datetime import datetime, timezone
from pathlib import Path
from typing import Any, Callable

from wavetrail.errors import WavetrailError
from wavetrail.seeds import derive_seed
from wavetrail.stages import STEPS


@dataclass
class Job:
    """One workflow job as a step function sees it.

    ``input`` and ``output`` map the rule's names to paths (a list where the rule
    gives several files under one name); paths are relative to ``project``.
    ``seed`` is derived from the master seed, the step name and the wildcards,
    never from the order in which jobs run.
    """

    step: str
    project: Path
    input: dict[str, Any]
    output: dict[str, Any]
    params: dict[str, Any] = field(default_factory=dict)
    config: dict[str, Any] = field(default_factory=dict)
    wildcards: dict[str, str] = field(default_factory=dict)
    log: Path | None = None
    seed: int = 0
    started: str = ""

    def path(self, p: str | Path) -> Path:
        """Absolute path of a project-relative path."""
        p = Path(p)
        return p if p.is_absolute() else self.project / p


def _named(io_obj) -> dict[str, Any]:
    """Snakemake's Namedlist -> {name: str | [str, ...]}."""
    out: dict[str, Any] = {}
    for name in io_obj.keys():
        value = getattr(io_obj, name)
        out[name] = [str(v) for v in value] if isinstance(value, (list, tuple)) else str(value)
    return out


def job_seed(master: int, step: str, wildcards: dict[str, str]) -> int:
    parts: list[str | int] = [step]
    for key in sorted(wildcards):
        parts.append(f"{key}={wildcards[key]}")
    return derive_seed(int(master), *parts)


def job_from_snakemake(smk) -> Job:
    wildcards = {k: str(getattr(smk.wildcards, k)) for k in smk.wildcards.keys()}
    config = dict(smk.config)
    params = {k: getattr(smk.params, k) for k in smk.params.keys()}
    logs = list(smk.log)
    return Job(
        step=smk.rule,
        project=Path.cwd(),
        input=_named(smk.input),
        output=_named(smk.output),
        params=params,
        config=config,
        wildcards=wildcards,
        log=Path(logs[0]) if logs else None,
        seed=job_seed(config.get("seed", 0), smk.rule, wildcards),
    )


def resolve(step: str) -> Callable[[Job], None]:
    try:
        target = STEPS[step]
    except KeyError:
        raise WavetrailError(f"no wavetrail step is registered for rule {step!r}") from None
    module, func = target.split(":")
    return getattr(importlib.import_module(module), func)


def run_job(job: Job) -> None:
    """Run a step and, when it succeeds, write its ledger record."""
    job.started = datetime.now(timezone.utc).isoformat(timespec="seconds")
    resolve(job.step)(job)
    try:
        from wavetrail import ledger
    except ImportError:  # the ledger module lands with the audit-trail work
        return
    ledger.record_job(job)


def run_from_snakemake(smk) -> None:
    """Entry point of ``rules/scripts/run_step.py``: run, log, exit 1 on a user error."""
    job = job_from_snakemake(smk)
    handler = None
    if job.log is not None:
        job.path(job.log).parent.mkdir(parents=True, exist_ok=True)
        handler = logging.FileHandler(job.path(job.log), mode="w", encoding="utf-8")
        handler.setFormatter(logging.Formatter("%(asctime)s %(levelname)s %(name)s: %(message)s"))
        logging.getLogger("wavetrail").addHandler(handler)
        logging.getLogger("wavetrail").setLevel(logging.INFO)
    # progress of long steps (e.g. trees grown per forest shard) on the console; Snakemake
    # passes a job's stderr through. Logged lines never enter a result file.
    console = logging.StreamHandler(sys.stderr)
    console.setFormatter(logging.Formatter("%(message)s"))
    progress = logging.getLogger("wavetrail.progress")
    progress.addHandler(console)
    progress.setLevel(logging.INFO)
    try:
        run_job(job)
    except WavetrailError as err:
        message = f"wavetrail step {job.step} failed: {err}"
        logging.getLogger("wavetrail").error(message)
        print(message, file=sys.stderr)
        sys.exit(1)
    except Exception:
        logging.getLogger("wavetrail").error("unexpected error\n%s", traceback.format_exc())
        raise
    finally:
        progress.removeHandler(console)
        if handler is not None:
            logging.getLogger("wavetrail").removeHandler(handler)
            handler.close()
