"""``wavetrail build``: run the project's Snakemake workflow and report what happened.

Snakemake is started as a subprocess of the same interpreter
(``sys.executable -m snakemake``), because only its command line reads profiles
(``workflow/profiles/default`` automatically, another one with ``--profile NAME``).
The settings are validated and the data files looked for before Snakemake starts,
so a user mistake gives one clean message. A failed job is reported by rule name
with the end of its log; failing data checks are reported as such, naming the
findings table.

A build holds an advisory lock on ``.snakemake/wavetrail-build.guard`` (shared
with its Snakemake process) so that the lock Snakemake leaves behind when a build
is killed can be told apart from a running build and lifted automatically.
"""

from __future__ import annotations

import os
import re
import subprocess
import sys
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable, Sequence

from wavetrail.errors import BuildError, DataError, UsageError

__all__ = ["BuildResult", "build_project", "snakemake_command", "BUILD_LOG"]

#: the full Snakemake output of the last build, relative to the project
BUILD_LOG = "logs/wavetrail-build.log"

_RULE = re.compile(r"^\s*(?:local)?rule (\w+):\s*$")
_PROGRESS = re.compile(r"(\d+) of (\d+) steps \((\d+(?:\.\d+)?)%\) done")
_ERROR_RULE = re.compile(r"Error in rule (\w+):")
_LOG_LINE = re.compile(r"^\s*log:\s*(\S+)")
_TOTAL = re.compile(r"^total\s+(\d+)\s*$")
_FINISHED = re.compile(r"Finished jobid: \d+ \(Rule: (\w+)\)")
#: a forest shard's own progress line (written to the job's stderr by the forest step)
_TREES = re.compile(r"^forest shard (\d+) of (\d+): (\d+) of (\d+) trees grown\s*$")
_STEP_FAILED = re.compile(r"wavetrail step (\w+) failed: (.*)")
#: Snakemake options that mean "list the jobs, run nothing"
_DRY_RUN = ("-n", "--dry-run", "--dryrun")
#: Snakemake options with which build does not add reruns of its own
_NO_FORCE = ("--unlock", "--forceall", "-F", "--cleanup-metadata", "--list-rules", "--lint", "--delete-all-output")
#: words of the message with which a step refuses findings that hold an error
_CHECKS_FAILED = "with severity error, listed in"


@dataclass
class BuildResult:
    """What one build did.

    Attributes
    ----------
    project : Path
        The project root.
    jobs : list of str
        The rule of every job that ran, in the order they started (empty when the
        project was up to date).
    seconds : float
        Wall-clock time of the Snakemake run.
    returncode : int
        Snakemake's exit status (0 here; a failure raises :class:`BuildError`).
    log : Path
        The full Snakemake output (``logs/wavetrail-build.log``).
    dry_run : bool
        Snakemake only listed the jobs (``-- --dry-run``): ``jobs`` would run, nothing was built.
    forced : list of str
        Steps rerun because the ledger says they no longer match the committed project
        (hand-edited, or recorded at a commit whose settings or workflow differ), with why.
    """

    project: Path
    jobs: list = field(default_factory=list)
    seconds: float = 0.0
    returncode: int = 0
    log: Path | None = None
    dry_run: bool = False
    forced: list = field(default_factory=list)

    @property
    def up_to_date(self) -> bool:
        return not self.jobs

    @property
    def report(self) -> Path | None:
        path = self.project / "results" / "write-up" / "report.html"
        return path if path.is_file() else None

    @property
    def summary(self) -> str:
        """A few lines for the terminal."""
        if self.up_to_date:
            head = f"nothing to do: every output of {self.project} is up to date ({self.seconds:.1f} s)"
        elif self.dry_run:
            counts = {}
            for rule in self.jobs:
                counts[rule] = counts.get(rule, 0) + 1
            ran = ", ".join(f"{r}" + (f" x{c}" if c > 1 else "") for r, c in counts.items())
            head = (f"dry run: nothing was built; {len(self.jobs)} job{'s' if len(self.jobs) != 1 else ''} "
                    f"would run: {ran}")
        else:
            counts: dict[str, int] = {}
            for rule in self.jobs:
                counts[rule] = counts.get(rule, 0) + 1
            ran = ", ".join(f"{r}" + (f" x{c}" if c > 1 else "") for r, c in counts.items())
            head = f"built {len(self.jobs)} job{'s' if len(self.jobs) != 1 else ''} in {self.seconds:.1f} s: {ran}"
        lines = [head]
        if self.forced:
            lines.append("rerun because the ledger no longer matched the committed project: "
                         + "; ".join(self.forced[:5]) + (" ..." if len(self.forced) > 5 else ""))
        if self.report is not None and not self.dry_run:
            lines.append(f"report: {self.report}")
        return "\n".join(lines)


def snakemake_command(root: Path, cores: int = 1, profile: str | None = None,
                      extra: Sequence[str] = ()) -> list[str]:
    """The Snakemake command line of a build (run with the project as working folder)."""
    cmd = [sys.executable, "-m", "snakemake", "--snakefile", "workflow/Snakefile", "--cores", str(int(cores))]
    if profile:
        cmd += ["--workflow-profile", str(_profile_dir(root, profile))]
    cmd += list(extra)
    return cmd


def _profile_dir(root: Path, profile: str) -> Path:
    candidate = Path(profile).expanduser()
    if not candidate.is_absolute():
        named = root / "workflow" / "profiles" / profile
        candidate = named if named.is_dir() else (Path.cwd() / candidate)
    if not (candidate / "config.yaml").is_file():
        known = sorted(p.name for p in (root / "workflow" / "profiles").glob("*") if (p / "config.yaml").is_file())
        raise UsageError(f"no profile {profile!r}: {candidate / 'config.yaml'} does not exist",
                         hint=f"profiles of this project: {', '.join(known) or 'none'} (folders under workflow/profiles/)")
    return candidate.resolve()


def _check_inputs(root: Path) -> dict:
    """Validate the settings and look for the data files before Snakemake starts."""
    from wavetrail.config import CONFIG_FILE, load_config, read_yaml

    config = load_config(root)
    _, lines = read_yaml(root / CONFIG_FILE)
    for i, name in enumerate(config["data"]):
        if not (root / name).is_file():
            line = lines.get(("data", i)) or lines.get(("data",))
            where = f"{CONFIG_FILE}, line {line}" if line else CONFIG_FILE
            raise DataError(f"data file {name} does not exist (listed under `data` in {where})",
                            hint="copy the raw file there and register it with `wavetrail data register`, "
                                 "or correct the path in config/config.yaml")
    if not (root / config["codebook"]).is_file():
        raise DataError(f"codebook {config['codebook']} does not exist (key `codebook` in {CONFIG_FILE})",
                        hint="write one, or draft it with `wavetrail new --data FILE` in a fresh folder")
    check_settings(root, config, lines)
    return config


def check_settings(root: Path, config: dict, lines: dict) -> tuple[list[str], str | None]:
    """What must hold before any job runs: the codebook loads, every name of the
    settings resolves against it, and no data file is empty (a header without rows).

    Returns the growth outcomes and the forest outcome the settings stand for.
    """
    from wavetrail.codebook import load_codebook
    from wavetrail.config import CONFIG_FILE, check_names

    codebook = load_codebook(root / config["codebook"])
    resolved = check_names(config, codebook, source=CONFIG_FILE, lines=lines)
    for i, name in enumerate(config["data"]):
        if not _has_records(root / name):
            raise DataError(f"data file {name} has a header but no data rows (listed under `data` in "
                            f"{CONFIG_FILE}, line {lines.get(('data', i)) or lines.get(('data',), '?')})",
                            hint="copy the full data file again (the export may have stopped after the header), "
                                 "then register it with `wavetrail data register`")
    return resolved


_TEXT_SUFFIXES = (".csv", ".tsv", ".tab", ".txt")


def _has_records(path: Path) -> bool:
    """A data file holds a record below its header (text files: from the first lines only,
    without importing pandas, so an up-to-date build stays quick)."""
    if path.suffix.lower() in _TEXT_SUFFIXES:
        from wavetrail._textscan import count_nonblank_lines

        seen = count_nonblank_lines(path)
        if seen >= 2:
            return True
        if seen == 1:
            return False
    from wavetrail.readers import has_records

    return has_records(path)


def build_project(
    path: str | Path = ".",
    cores: int = 1,
    profile: str | None = None,
    extra: Sequence[str] = (),
    *,
    progress: Callable[[str], None] | None = None,
    check: bool = True,
) -> BuildResult:
    """Bring every output of a project up to date with Snakemake.

    Parameters
    ----------
    path
        The project folder (or a folder inside it).
    cores
        Cores Snakemake may use at once.
    profile
        A profile folder under ``workflow/profiles/`` (e.g. ``slurm``) or a path to one;
        ``None`` uses ``workflow/profiles/default``.
    extra
        More arguments for Snakemake (``wavetrail build -- ARGS``).
    progress
        Called with a short line ("[3/14] fit_growth") whenever a job starts or a step
        completes; the CLI prints them.
    check
        Validate the settings and look for the data files first.

    Returns
    -------
    BuildResult

    Raises
    ------
    ProjectError, ConfigError, DataError, UsageError
        Before Snakemake starts: not a project, bad settings, a missing file, no such profile.
    BuildError
        A job failed: the message names the rule and ends with the end of its log.
    """
    from wavetrail.project import find_project

    root = find_project(path)
    if cores < 1:
        raise UsageError(f"--cores must be at least 1, not {cores}")
    if check:
        _check_inputs(root)
    extra = list(extra)
    forced = []
    if not any(a in _NO_FORCE for a in extra):
        from wavetrail.ledger import rerun_targets
        from wavetrail.registry import open_repo

        forced = rerun_targets(root, open_repo(root))
        if forced:
            # outputs Snakemake sees as up to date that the ledger says are not (hand-edited, or
            # computed before a committed change of settings, plan or workflow code): rerun their
            # jobs and everything downstream
            extra += ["--forcerun", *[step for step, _ in forced]]
    cmd = snakemake_command(root, cores=cores, profile=profile, extra=extra)
    env = dict(os.environ)
    bindir = str(Path(sys.executable).parent)
    env["PATH"] = bindir + os.pathsep + env.get("PATH", "")  # `python` in any shell command = this one
    env.setdefault("MPLBACKEND", "Agg")
    env["PYTHONUNBUFFERED"] = "1"
    log_path = root / BUILD_LOG
    log_path.parent.mkdir(parents=True, exist_ok=True)
    with _BuildLock(root) as guard:
        if guard.stale_pid is not None and _snakemake_locked(root) and "--unlock" not in extra:
            # the last build of this folder was killed (its guard file says running, and no
            # process holds it any more): Snakemake's own lock is stale, so lift it
            _unlock(root, env)
            if progress:
                progress(f"removed the Snakemake lock left by a build that was killed (pid {guard.stale_pid})")
        result = _run(root, cmd, env, log_path, progress, guard)
    result.dry_run = any(a in _DRY_RUN for a in extra)
    result.forced = [f"{step} ({why})" for step, why in forced]
    return result


def _run(root: Path, cmd: list[str], env: dict, log_path: Path, progress, guard) -> BuildResult:
    jobs: list[str] = []
    output: list[str] = []
    total = None
    started = time.monotonic()
    with open(log_path, "w", encoding="utf-8") as log:
        proc = subprocess.Popen(cmd, cwd=root, env=env, stdout=subprocess.PIPE, stderr=subprocess.STDOUT,
                                text=True, encoding="utf-8", errors="replace", bufsize=1,
                                pass_fds=guard.fds)  # Snakemake holds the guard as long as it lives
        assert proc.stdout is not None
        finished_rule = None
        shown: dict[str, int] = {}
        for line in proc.stdout:
            log.write(line)
            output.append(line.rstrip("\n"))
            m = _RULE.match(line)
            if m:
                if m.group(1) != "all":
                    jobs.append(m.group(1))
                    if progress:
                        progress(f"[{_done_count(output)}/{total or '?'}] started  {m.group(1)}")
                continue
            m = _TOTAL.match(line)
            if m and total is None:
                total = int(m.group(1))
                continue
            m = _FINISHED.search(line)
            if m:
                finished_rule = m.group(1)
                continue
            m = _TREES.match(line)
            if m:
                # forwarded at each quarter of a shard's trees, so the console shows a
                # long forest moving without a line per tree
                shard, done, trees = m.group(1), int(m.group(3)), int(m.group(4))
                quarter = 4 * done // max(trees, 1)
                if progress and quarter > shown.get(shard, 0):
                    shown[shard] = quarter
                    progress(f"      forest shard {shard} of {m.group(2)}: {done} of {trees} trees grown")
                continue
            m = _PROGRESS.search(line)
            if m:
                total = int(m.group(2))
                if progress and finished_rule != "all":
                    progress(f"[{m.group(1)}/{m.group(2)}] finished {finished_rule or ''}".rstrip())
        returncode = proc.wait()
    seconds = time.monotonic() - started
    if returncode != 0:
        raise BuildError(_failure_message(root, output, returncode))
    return BuildResult(project=root, jobs=jobs, seconds=seconds, returncode=0, log=log_path)


#: held (flock) by a running `wavetrail build` and the Snakemake process it starts
GUARD_FILE = ".snakemake/wavetrail-build.guard"


class _BuildLock:
    """An advisory lock on the project folder, held while a build runs.

    The operating system releases it when the last process holding it ends, however
    it ends (SIGKILL included); the file says ``running <pid>`` until the build
    returns, then ``done``. So ``running`` in a file nobody holds means the build
    was killed and whatever Snakemake lock it left is stale. Windows has no
    ``fcntl``: there the guard is skipped and a stale lock is reported as before.
    """

    def __init__(self, root: Path):
        self.path = root / GUARD_FILE
        self.fd: int | None = None
        self.stale_pid: int | None = None

    @property
    def fds(self) -> tuple[int, ...]:
        return (self.fd,) if self.fd is not None else ()

    def __enter__(self) -> "_BuildLock":
        try:
            import fcntl
        except ImportError:  # pragma: no cover - not POSIX
            return self
        self.path.parent.mkdir(parents=True, exist_ok=True)
        fd = os.open(self.path, os.O_RDWR | os.O_CREAT, 0o644)
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except OSError:
            os.close(fd)
            holder = _read_guard(self.path)
            raise BuildError("another `wavetrail build` of this project is running"
                             + (f" (pid {holder})" if holder else "")
                             + "\n  -> wait for it to finish, then build again") from None
        self.fd = fd
        self.stale_pid = _read_guard(self.path)
        self._write(f"running {os.getpid()}\n")
        return self

    def _write(self, text: str) -> None:
        os.ftruncate(self.fd, 0)
        os.pwrite(self.fd, text.encode("ascii"), 0)
        os.fsync(self.fd)

    def __exit__(self, *exc) -> None:
        if self.fd is None:
            return
        try:
            self._write("done\n")
        finally:
            os.close(self.fd)  # releases the flock once Snakemake has ended too
            self.fd = None


def _read_guard(path: Path) -> int | None:
    """The pid of the build a guard file says is running (``None`` after a clean end)."""
    try:
        words = path.read_text(encoding="ascii", errors="replace").split()
    except OSError:
        return None
    if len(words) == 2 and words[0] == "running" and words[1].isdigit():
        return int(words[1])
    return None


def _snakemake_locked(root: Path) -> bool:
    locks = root / ".snakemake" / "locks"
    return locks.is_dir() and any(locks.iterdir())


def _unlock(root: Path, env: dict) -> None:
    cmd = [sys.executable, "-m", "snakemake", "--snakefile", "workflow/Snakefile", "--unlock"]
    proc = subprocess.run(cmd, cwd=root, env=env, capture_output=True, text=True, encoding="utf-8",
                          errors="replace")
    if proc.returncode != 0:
        raise BuildError("a build of this project was killed and left Snakemake's lock behind; "
                         "lifting it failed:\n" + _indent((proc.stdout + proc.stderr).strip()[-2000:])
                         + "\n  -> run `wavetrail build -- --unlock`, then build again")


def _done_count(output: list[str]) -> int:
    for line in reversed(output):
        m = _PROGRESS.search(line)
        if m:
            return int(m.group(1))
    return 0


def _tail(path: Path, n: int = 25) -> str:
    try:
        lines = path.read_text(encoding="utf-8", errors="replace").splitlines()
    except OSError:
        return ""
    return "\n".join(lines[-n:])


def _failure_message(root: Path, output: list[str], returncode: int) -> str:
    text = "\n".join(output)
    failed_rule = None
    log_file = None
    for i, line in enumerate(output):
        m = _ERROR_RULE.search(line)
        if m and failed_rule is None:
            failed_rule = m.group(1)
            for follow in output[i + 1 : i + 15]:
                lm = _LOG_LINE.match(follow)
                if lm:
                    log_file = lm.group(1)
                    break
    step_errors = []
    for i, line in enumerate(output):
        m = _STEP_FAILED.search(line)
        if m:
            hint = [h.strip() for h in output[i + 1 : i + 3] if h.strip().startswith("->")]
            step_errors.append("\n  ".join([m.group(2), *hint[:1]]))
    if failed_rule and step_errors and _CHECKS_FAILED in step_errors[0]:
        # check_data succeeded and kept its findings; the first step reading them refused
        return "\n".join([f"the workflow stopped before scoring (rule {failed_rule} refused to run): "
                          "the codebook checks found errors", step_errors[0],
                          f"full Snakemake output: {BUILD_LOG}"])
    if failed_rule:
        parts = [f"the workflow stopped: rule {failed_rule} failed"]
        if step_errors:
            parts.append(step_errors[0])
        if log_file:
            tail = _tail(root / log_file)
            if tail:
                parts.append(f"end of {log_file}:\n" + _indent(tail))
        parts.append(f"full Snakemake output: {BUILD_LOG}")
        return "\n".join(parts)
    if "LockException" in text or "Directory cannot be locked" in text:
        return ("the project folder is locked by a Snakemake run that `wavetrail build` did not start "
                "(it may still be running, or have been killed)\n"
                "  -> if no other Snakemake run is using this folder, unlock it with `wavetrail build -- --unlock`")
    tail = "\n".join(line for line in output[-25:])
    return f"Snakemake stopped with exit status {returncode} before running a job:\n{_indent(tail)}\nfull output: {BUILD_LOG}"


def _indent(text: str) -> str:
    return "\n".join("    " + line for line in text.splitlines())
