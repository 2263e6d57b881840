"""Safe extraction: hand-crafted hostile zip and tar archives are refused, naming the member,
and nothing is written outside the extraction folder."""

from __future__ import annotations

import io
import stat
import tarfile
import zipfile
from pathlib import Path

import pytest

from wavetrail.archive import verify_archive
from wavetrail.archive.safe_extract import Limits, check_name, safe_extract
from wavetrail.errors import ArchiveError


def _listing(folder: Path) -> set[str]:
    return {p.relative_to(folder).as_posix() for p in folder.rglob("*")}


def _zip(path: Path, members: list[tuple]) -> Path:
    """members: (name, data, unix mode or None)."""
    with zipfile.ZipFile(path, "w", compression=zipfile.ZIP_DEFLATED) as zf:
        for name, data, mode in members:
            info = zipfile.ZipInfo(name, date_time=(2026, 12, 1, 0, 0, 0))
            info.compress_type = zipfile.ZIP_DEFLATED
            if mode is not None:
                info.external_attr = (mode & 0xFFFF) << 16
                info.create_system = 3
            zf.writestr(info, data)
    return path


def _tar(path: Path, members: list[tarfile.TarInfo | tuple]) -> Path:
    with tarfile.open(path, "w:gz") as tf:
        for m in members:
            if isinstance(m, tarfile.TarInfo):
                tf.addfile(m)
            else:
                name, data = m
                info = tarfile.TarInfo(name)
                info.size = len(data)
                tf.addfile(info, io.BytesIO(data))
    return path


def _link(name: str, kind, target: str = "") -> tarfile.TarInfo:
    info = tarfile.TarInfo(name)
    info.type = kind
    info.linkname = target
    if kind in (tarfile.CHRTYPE, tarfile.BLKTYPE):
        info.devmajor, info.devminor = 1, 3
    return info


GOOD = b"a,b\n1,2\n"

HOSTILE = {
    "dotdot-zip": ("zip", [("bag/ok.txt", GOOD, None), ("bag/../../escaped.txt", b"x", None)], "../../escaped.txt"),
    "absolute-zip": ("zip", [("/tmp/evil-absolute.txt", b"x", None)], "/tmp/evil-absolute.txt"),
    "symlink-zip": ("zip", [("bag/ok.txt", GOOD, None), ("bag/link", b"/etc/passwd", 0o120777)], "bag/link"),
    "device-zip": ("zip", [("bag/dev", b"", stat.S_IFCHR | 0o644)], "bag/dev"),
    "dotdot-tar": ("tar", [("bag/ok.txt", GOOD), ("bag/../../escaped.txt", b"x")], "../../escaped.txt"),
    "absolute-tar": ("tar", [("/tmp/evil-absolute.txt", b"x")], "/tmp/evil-absolute.txt"),
    "symlink-tar": ("tar", [("bag/ok.txt", GOOD), _link("bag/link", tarfile.SYMTYPE, "/etc/passwd")], "bag/link"),
    "hardlink-tar": ("tar", [("bag/ok.txt", GOOD), _link("bag/hard", tarfile.LNKTYPE, "/etc/passwd")], "bag/hard"),
    "device-tar": ("tar", [_link("bag/dev", tarfile.CHRTYPE)], "bag/dev"),
    "fifo-tar": ("tar", [_link("bag/pipe", tarfile.FIFOTYPE)], "bag/pipe"),
    "backslash-zip": ("zip", [("bag\\..\\evil.txt", b"x", None)], "bag\\..\\evil.txt"),
}


@pytest.mark.parametrize("case", sorted(HOSTILE))
def test_hostile_member_is_refused_and_nothing_escapes(tmp_path, case):
    kind, members, bad = HOSTILE[case]
    work = tmp_path / "work"
    work.mkdir()
    archive = work / ("a.zip" if kind == "zip" else "a.tar.gz")
    (_zip if kind == "zip" else _tar)(archive, members)
    before = _listing(tmp_path)
    dest = work / "out"
    with pytest.raises(ArchiveError) as err:
        safe_extract(archive, dest)
    assert repr(bad)[1:-1] in str(err.value) or bad in str(err.value)
    # checked before anything is written: the extraction folder is empty, nothing appeared elsewhere
    assert _listing(dest) == set()
    assert _listing(tmp_path) - before == {"work/out"}
    assert not Path("/tmp/evil-absolute.txt").exists()
    # verify turns the same refusal into a failed report naming the member
    report = verify_archive(archive)
    assert not report.ok
    assert bad in report.summary or repr(bad)[1:-1] in report.summary
    assert _listing(tmp_path) - before == {"work/out"}


def test_zip_bomb_is_refused_by_ratio(tmp_path):
    archive = _zip(tmp_path / "bomb.zip", [("bag/zeros.csv", b"0" * (20 * 1024 * 1024), None)])
    assert archive.stat().st_size < 200_000  # ratio > 100
    with pytest.raises(ArchiveError, match="bag/zeros.csv.*compression ratio"):
        safe_extract(archive, tmp_path / "out")
    assert _listing(tmp_path / "out") == set()


def test_tar_bomb_is_refused_before_writing(tmp_path):
    archive = _tar(tmp_path / "bomb.tar.gz", [("bag/small.txt", GOOD), ("bag/zeros.csv", b"0" * (20 * 1024 * 1024))])
    with pytest.raises(ArchiveError, match="bomb") as err:
        safe_extract(archive, tmp_path / "out")
    assert "bag/small.txt" in str(err.value) or "bag/zeros.csv" in str(err.value)
    assert _listing(tmp_path / "out") == set()


def test_member_count_and_size_limits(tmp_path):
    archive = _zip(tmp_path / "many.zip", [(f"bag/f{i}.txt", GOOD, None) for i in range(12)])
    with pytest.raises(ArchiveError, match="12 members exceed the limit of 10"):
        safe_extract(archive, tmp_path / "out", Limits(max_members=10))
    with pytest.raises(ArchiveError, match="exceed the limit of 50"):
        safe_extract(archive, tmp_path / "out2", Limits(max_total_bytes=50))


def test_good_archives_extract_byte_for_byte(tmp_path):
    z = _zip(tmp_path / "ok.zip", [("bag/a.txt", GOOD, 0o100644), ("bag/sub/b.txt", b"bee", None)])
    t = _tar(tmp_path / "ok.tar.gz", [("bag/a.txt", GOOD), ("bag/sub/b.txt", b"bee")])
    for archive in (z, t):
        dest = tmp_path / f"out-{archive.name}"
        assert safe_extract(archive, dest) == ["bag/a.txt", "bag/sub/b.txt"]
        assert (dest / "bag/a.txt").read_bytes() == GOOD
        assert (dest / "bag/sub/b.txt").read_bytes() == b"bee"


def test_duplicate_members_and_non_empty_target_are_refused(tmp_path):
    archive = _zip(tmp_path / "dup.zip", [("bag/a.txt", GOOD, None), ("bag/A.txt", b"other", None)])
    with pytest.raises(ArchiveError, match="appears twice"):
        safe_extract(archive, tmp_path / "out")
    full = tmp_path / "full"
    full.mkdir()
    (full / "x").write_text("x")
    with pytest.raises(ArchiveError, match="not empty"):
        safe_extract(_zip(tmp_path / "ok.zip", [("a", b"a", None)]), full)


@pytest.mark.parametrize("name", ["../x", "a/../../x", "/etc/x", "C:/x", "c:x", "~/x", "", "a\x00b"])
def test_unsafe_names(name):
    with pytest.raises(ArchiveError):
        check_name(name)


def test_safe_names_keep_their_parts():
    assert check_name("bag/./data/x.csv") == ("bag", "data", "x.csv")
    assert check_name("bag/dir/") == ("bag", "dir")
