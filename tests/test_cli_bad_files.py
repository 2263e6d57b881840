"""`wavetrail check` on broken raw files and a broken codebook, through the real command line.

Each bad file gives one clear message naming the file (and line where there is one), a
non-zero exit code, and never a traceback. The readers' own tests (tests/test_readers.py,
tests/test_codebook.py) cover the messages in detail; these make sure they reach the user
through the CLI unchanged.
"""

from __future__ import annotations

import shutil
import subprocess
import sys

import pytest

from wavetrail.project import make_demo

RAW = "data/raw/panel.csv"


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    return make_demo(tmp_path_factory.mktemp("bad-files") / "demo")


@pytest.fixture
def project(demo, tmp_path):
    return shutil.copytree(demo, tmp_path / "demo", symlinks=True)


def check(root):
    """Run `wavetrail check` in a fresh interpreter, in the project folder (what a user's shell does)."""
    return subprocess.run([sys.executable, "-m", "wavetrail.cli", "check"], cwd=root, capture_output=True,
                          text=True, timeout=300)


def _one_clear_message(proc, *needles):
    out = proc.stdout + proc.stderr
    assert proc.returncode != 0, out
    assert "Traceback" not in out, out
    errors = [line for line in proc.stderr.splitlines() if line.startswith("error:")]
    assert len(errors) == 1, proc.stderr  # one message, not a cascade
    for needle in needles:
        assert needle in proc.stderr, proc.stderr
    return proc.stderr


def _lines(root):
    return (root / RAW).read_bytes().split(b"\n")


def test_the_unbroken_copy_passes(project):
    proc = check(project)
    assert proc.returncode == 0, proc.stdout + proc.stderr


def test_truncated_csv(project):
    data = (project / RAW).read_bytes().rstrip(b"\n")
    last = data.rfind(b"\n")
    cut = data[: last + 1 + 12]  # the last record stops after a few fields, as when a copy is cut off
    (project / RAW).write_bytes(cut)
    n_lines = cut.count(b"\n") + 1
    n_fields = len(_lines(project)[0].split(b","))
    _one_clear_message(check(project), f"panel.csv:{n_lines}:", f"the header has {n_fields}")


def test_corrupt_csv_with_an_unclosed_quote(project):
    lines = _lines(project)
    fields = lines[5].split(b",")
    fields[3] = b'"4'  # a quote opened and never closed
    lines[5] = b",".join(fields)
    (project / RAW).write_bytes(b"\n".join(lines))
    msg = _one_clear_message(check(project), "panel.csv")
    assert "cannot be parsed" in msg or "field(s)" in msg, msg


def test_corrupt_csv_with_binary_garbage(project):
    (project / RAW).write_bytes((project / RAW).read_bytes() + b"\x00\x00\x17\x00\n")
    _one_clear_message(check(project), "panel.csv", "NUL bytes")


def test_wrong_delimiter(project):
    lines = _lines(project)
    body = [line.replace(b",", b";") for line in lines[1:]]  # the rows re-saved with semicolons
    (project / RAW).write_bytes(b"\n".join([lines[0], *body]))
    _one_clear_message(check(project), "panel.csv", "different delimiters")


def test_non_utf8_file(project):
    lines = _lines(project)
    header = lines[0].split(b",")
    lines[0] = b",".join(header[:-1] + ["gr\u00f6\u00dfe".encode("latin-1")])  # a Latin-1 column name
    (project / RAW).write_bytes(b"\n".join(lines))
    _one_clear_message(check(project), "panel.csv:1: the file is not UTF-8", "Latin-1")


def test_empty_file(project):
    (project / RAW).write_bytes(b"")
    _one_clear_message(check(project), "panel.csv", "the file is empty")


def test_codebook_names_a_column_twice(project):
    path = project / "config/codebook.yaml"
    text = path.read_text()
    first = text.index("- name: slp2\n")
    line_of_first = text.count("\n", 0, first) + 1
    second = text.index("- name: slp3\n")
    path.write_text(text[:second] + "- name: slp2\n  type: integer\n" + text[second:])  # declared again
    _one_clear_message(check(project), "codebook.yaml:", "variable 'slp2' is named twice",
                       f"first on line {line_of_first}")
