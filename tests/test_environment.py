"""Environment lock: the exact installed set, its fingerprint, comparing two locks."""

import hashlib
import importlib.metadata

import numpy
import pandas
import pytest

from wavetrail import environment as env
from wavetrail.errors import WavetrailError
from wavetrail.stages.provenance import lock_environment
from wavetrail.stages.runner import Job


def test_lock_lists_installed_versions_sorted():
    text = env.lock_text()
    lines = text.splitlines()
    assert lines[0].startswith("# python: ") and lines[1].startswith("# platform: ")
    body = lines[2:]
    names = [line.split("==")[0] for line in body]
    assert names == sorted(names) and len(names) == len(set(names))
    assert f"numpy=={numpy.__version__}" in body
    assert f"pandas=={pandas.__version__}" in body
    assert f"pyyaml=={importlib.metadata.version('PyYAML')}" in body  # normalised name
    # every distribution importlib.metadata sees is there
    assert len(body) == len({env.normalise_name(d.metadata["Name"]) for d in importlib.metadata.distributions()
                             if d.metadata and d.metadata["Name"]})
    assert text == env.lock_text()  # stable


def test_fingerprint_is_the_hash_of_the_lock_file(tmp_path):
    job = Job(step="lock_environment", project=tmp_path, input={},
              output={"lock": "environment/requirements.lock"}, params={"fingerprint": env.fingerprint()})
    lock_environment(job)
    data = (tmp_path / "environment/requirements.lock").read_bytes()
    assert hashlib.sha256(data).hexdigest() == env.fingerprint() == job.params["fingerprint"]
    assert env.compare_with_installed(tmp_path / "environment/requirements.lock").empty


def test_compare_locks_names_each_difference():
    old = env.lock_text({"numpy": "2.0.0", "scipy": "1.12.0", "Old_Pkg": "1.0"})
    new = env.lock_text({"numpy": "2.4.6", "scipy": "1.12.0", "new.pkg": "0.1"})
    new = new.replace("# python: ", "# python: X", 1)
    diff = env.compare_locks(old, new)
    assert diff.to_dict("records") == [
        {"item": "python", "old": env.interpreter(), "new": "X" + env.interpreter(), "change": "changed"},
        {"item": "new-pkg", "old": None, "new": "0.1", "change": "added"},
        {"item": "numpy", "old": "2.0.0", "new": "2.4.6", "change": "changed"},
        {"item": "old-pkg", "old": "1.0", "new": None, "change": "removed"},
    ]
    assert env.fingerprint(old) != env.fingerprint(new)
    assert env.compare_locks(old, old).empty


def test_malformed_lock_names_the_line(tmp_path):
    (tmp_path / "requirements.lock").write_text("# python: CPython 3.11\nnumpy==2.0\nnumpy>=2\n")
    with pytest.raises(WavetrailError, match="line 3"):
        env.read_lock(tmp_path / "requirements.lock")
    with pytest.raises(WavetrailError, match="no environment lock"):
        env.read_lock(tmp_path / "nothing.lock")


def test_missing_package_version_is_none():
    versions = env.package_versions(["numpy", "surely-not-installed-wavetrail-probe"])
    assert versions == {"numpy": numpy.__version__, "surely-not-installed-wavetrail-probe": None}
