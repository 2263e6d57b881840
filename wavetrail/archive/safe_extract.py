"""Extract a .zip or .tar.gz archive without trusting it.

Every member is inspected *before* anything is written: a member whose name is
absolute, carries a drive letter or backslash, or climbs out with ``..``; a
link of any kind (symbolic or hard); a device file, FIFO or socket; more
members, more bytes or a higher compression ratio than the limits allow — each
is refused with an :class:`~wavetrail.errors.ArchiveError` that names the
member. Only plain files and folders are then written, by our own copy loop
(never ``extractall``), each into the extraction folder and nowhere else, and
no file grows beyond the size its header declared.

Nothing read from the archive is unpickled, imported or run.
"""

from __future__ import annotations

import gzip
import os
import stat
import tarfile
import zipfile
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path, PurePosixPath

from wavetrail.errors import ArchiveError


@dataclass(frozen=True)
class Limits:
    """What an archive may hold before extraction is refused.

    Attributes
    ----------
    max_members : int
        Number of members (files and folders).
    max_total_bytes : int
        Sum of the uncompressed sizes.
    max_ratio : float
        Highest compression ratio (uncompressed / compressed) of one zip member,
        and of the whole archive (total uncompressed / archive file size). Text
        tables compress about 3-10 times; 100 leaves ample room.
    ratio_floor_bytes : int
        Members (and archives) smaller than this uncompressed are not held to
        ``max_ratio`` (a few kilobytes of blanks are harmless).
    """

    max_members: int = 20_000
    max_total_bytes: int = 4 * 1024**3
    max_ratio: float = 100.0
    ratio_floor_bytes: int = 1024 * 1024


DEFAULT_LIMITS = Limits()


@dataclass(frozen=True)
class _Member:
    name: str
    parts: tuple
    is_dir: bool
    size: int
    handle: object


def archive_kind(path: str | os.PathLike) -> str:
    """``"zip"`` or ``"tar.gz"`` from the file name; anything else is refused."""
    name = Path(path).name.lower()
    if name.endswith(".zip"):
        return "zip"
    if name.endswith(".tar.gz") or name.endswith(".tgz"):
        return "tar.gz"
    raise ArchiveError(f"{path}: not a .zip or .tar.gz archive",
                       hint="give the archive written by `wavetrail pack`")


def check_name(name: str) -> tuple:
    """The path parts of a member name, or an ArchiveError naming why it is unsafe."""
    if not name or "\x00" in name:
        raise ArchiveError(f"member {name!r}: empty or NUL in its name")
    if "\\" in name:
        raise ArchiveError(f"member {name!r}: backslash in its name (refused: it may mean a folder on Windows)")
    if name.startswith("/") or PurePosixPath(name).is_absolute():
        raise ArchiveError(f"member {name!r}: absolute path (refused)")
    first = name.split("/", 1)[0]
    if len(first) >= 2 and first[1] == ":":
        raise ArchiveError(f"member {name!r}: drive letter in its path (refused)")
    parts = tuple(p for p in name.split("/") if p not in ("", "."))
    if ".." in parts:
        raise ArchiveError(f"member {name!r}: '..' in its path (refused: it could write outside the extraction folder)")
    if name.startswith("~"):
        raise ArchiveError(f"member {name!r}: home-folder path (refused)")
    if not parts:
        raise ArchiveError(f"member {name!r}: names no file")
    return parts


def _zip_members(zf: zipfile.ZipFile, limits: Limits) -> list[_Member]:
    members = []
    for info in zf.infolist():
        parts = check_name(info.filename)
        mode = (info.external_attr >> 16) & 0xFFFF
        kind = stat.S_IFMT(mode)
        if kind == stat.S_IFLNK:
            raise ArchiveError(f"member {info.filename!r}: symbolic link (refused: links of any kind)")
        if kind not in (0, stat.S_IFREG, stat.S_IFDIR):
            raise ArchiveError(f"member {info.filename!r}: device file, FIFO or socket (refused)")
        if info.flag_bits & 0x1:
            raise ArchiveError(f"member {info.filename!r}: encrypted (refused)")
        is_dir = info.is_dir() or kind == stat.S_IFDIR
        if (not is_dir and info.file_size >= limits.ratio_floor_bytes
                and info.file_size > limits.max_ratio * max(info.compress_size, 1)):
            ratio = info.file_size / max(info.compress_size, 1)
            raise ArchiveError(
                f"member {info.filename!r}: compression ratio {ratio:.0f} exceeds {limits.max_ratio:.0f} "
                "(refused as a likely decompression bomb)")
        members.append(_Member(info.filename, parts, is_dir, 0 if is_dir else info.file_size, info))
    return members


class _Budget:
    """A read-only view of a decompressed stream that stops past ``budget`` bytes.

    Scanning tar headers decompresses the stream; the budget keeps a bomb from
    costing more than the limits allow even before any member is written.
    """

    def __init__(self, raw, budget: int):
        self._raw = raw
        self._budget = budget

    def _check(self) -> None:
        if self._raw.tell() > self._budget:
            raise _OverBudget()

    def read(self, size: int = -1) -> bytes:
        if size is None or size < 0:
            size = self._budget + 1
        data = self._raw.read(min(size, self._budget + 1))
        self._check()
        return data

    def seek(self, offset: int, whence: int = 0) -> int:
        pos = self._raw.seek(offset, whence)
        self._check()
        return pos

    def tell(self) -> int:
        return self._raw.tell()

    def close(self) -> None:
        self._raw.close()


class _OverBudget(Exception):
    pass


def _tar_members(tf: tarfile.TarFile) -> list[_Member]:
    members = []
    last = None
    try:
        for info in tf:  # reads the headers; sizes come from the headers
            last = info.name
            members.append(_tar_member(info))
    except _OverBudget:
        where = f" (after member {last!r})" if last else ""
        raise ArchiveError(
            f"decompressed tar stream exceeds the size and compression-ratio limits{where}; "
            "refused as a likely decompression bomb") from None
    return members


def _tar_member(info: tarfile.TarInfo) -> _Member:
    parts = check_name(info.name)
    if info.issym():
        raise ArchiveError(f"member {info.name!r}: symbolic link to {info.linkname!r} (refused: links of any kind)")
    if info.islnk():
        raise ArchiveError(f"member {info.name!r}: hard link to {info.linkname!r} (refused: links of any kind)")
    if info.ischr() or info.isblk() or info.isfifo() or info.isdev():
        raise ArchiveError(f"member {info.name!r}: device file or FIFO (refused)")
    if not (info.isreg() or info.isdir()):
        raise ArchiveError(f"member {info.name!r}: unsupported member type {info.type!r} (refused)")
    return _Member(info.name, parts, info.isdir(), 0 if info.isdir() else info.size, info)


def _check_totals(members: list[_Member], archive: Path, limits: Limits) -> None:
    if len(members) > limits.max_members:
        raise ArchiveError(
            f"{archive.name}: {len(members)} members exceed the limit of {limits.max_members} "
            f"(member {members[limits.max_members].name!r} is the first beyond it)")
    seen: dict[tuple, str] = {}
    for m in members:
        key = tuple(p.lower() for p in m.parts)
        if key in seen and not m.is_dir:
            raise ArchiveError(f"member {m.name!r}: appears twice (also as {seen[key]!r}; refused)")
        seen[key] = m.name
    total = sum(m.size for m in members)
    if total > limits.max_total_bytes:
        biggest = max(members, key=lambda m: m.size)
        raise ArchiveError(
            f"{archive.name}: {total} bytes uncompressed exceed the limit of {limits.max_total_bytes} "
            f"(largest member {biggest.name!r}, {biggest.size} bytes)")
    packed = max(archive.stat().st_size, 1)
    if total >= limits.ratio_floor_bytes and total > limits.max_ratio * packed:
        biggest = max(members, key=lambda m: m.size)
        raise ArchiveError(
            f"{archive.name}: compression ratio {total / packed:.0f} exceeds {limits.max_ratio:.0f} "
            f"(largest member {biggest.name!r}, {biggest.size} bytes; refused as a likely decompression bomb)")


def _copy(src, dst: Path, declared: int, name: str) -> None:
    written = 0
    with open(dst, "xb") as out:
        while True:
            block = src.read(1 << 20)
            if not block:
                break
            written += len(block)
            if written > declared:
                raise ArchiveError(f"member {name!r}: holds more bytes than its header declares (refused)")
            out.write(block)
    if written != declared:
        raise ArchiveError(f"member {name!r}: holds {written} bytes, its header declares {declared}")


def _mkdir(folder: Path, name: str) -> None:
    try:
        folder.mkdir(parents=True, exist_ok=True)
    except OSError as err:
        raise ArchiveError(f"member {name!r}: its folder cannot be made ({err}); a file and a folder share a name") from None


def _target(dest: Path, parts: tuple, name: str) -> Path:
    target = dest.joinpath(*parts)
    resolved = Path(os.path.abspath(target))
    if os.path.commonpath([resolved, dest]) != str(dest):
        raise ArchiveError(f"member {name!r}: would be written outside the extraction folder (refused)")
    return target


def _tar_file(tf: tarfile.TarFile, m: _Member):
    src = tf.extractfile(m.handle)
    if src is None:
        raise ArchiveError(f"member {m.name!r}: not a regular file (refused)")
    return src


def _write_members(members: list[_Member], dest: Path, open_member: Callable, read_errors: tuple) -> list[str]:
    """Write checked members below ``dest``: folders made, files copied from ``open_member(m)``.

    ``read_errors`` are the exceptions of the archive format that mean a member cannot be
    read; each is turned into an ArchiveError naming the member. Returns the file names.
    """
    written = []
    for m in members:
        target = _target(dest, m.parts, m.name)
        if m.is_dir:
            _mkdir(target, m.name)
            continue
        _mkdir(target.parent, m.name)
        try:
            with open_member(m) as src:
                _copy(src, target, m.size, m.name)
        except _OverBudget:  # only a tar stream has a budget
            raise ArchiveError(f"member {m.name!r}: decompressed stream exceeds the limits (refused)") from None
        except read_errors as err:
            raise ArchiveError(f"member {m.name!r}: cannot be read ({err})") from None
        written.append("/".join(m.parts))
    return written


def safe_extract(archive: str | os.PathLike, dest: str | os.PathLike, limits: Limits = DEFAULT_LIMITS) -> list[str]:
    """Extract ``archive`` into the empty or new folder ``dest`` after checking every member.

    Parameters
    ----------
    archive : path
        A ``.zip`` or ``.tar.gz`` file.
    dest : path
        Extraction folder; created if missing; must be empty.
    limits : Limits
        Member count, total size and compression-ratio limits.

    Returns
    -------
    list of str
        The names of the files written (POSIX, relative to ``dest``), sorted.

    Raises
    ------
    ArchiveError
        For the first unsafe member (named in the message); nothing has been
        written when a member check fails.
    """
    archive = Path(archive)
    if not archive.is_file():
        raise ArchiveError(f"no archive at {archive}", hint="give the path of a .zip or .tar.gz file")
    kind = archive_kind(archive)
    dest = Path(os.path.abspath(dest))
    dest.mkdir(parents=True, exist_ok=True)
    if any(dest.iterdir()):
        raise ArchiveError(f"extraction folder {dest} is not empty")
    if kind == "zip":
        try:
            zf = zipfile.ZipFile(archive)
        except (zipfile.BadZipFile, OSError) as err:
            raise ArchiveError(f"{archive.name}: not a readable zip archive ({err})") from None
        with zf:
            members = _zip_members(zf, limits)
            _check_totals(members, archive, limits)
            written = _write_members(members, dest, lambda m: zf.open(m.handle),
                                     (zipfile.BadZipFile, zipfile.LargeZipFile, OSError, EOFError))
    else:
        packed = archive.stat().st_size
        budget = int(min(limits.max_total_bytes, max(limits.ratio_floor_bytes, limits.max_ratio * packed))) + 1024**2
        try:
            tf = tarfile.open(fileobj=_Budget(gzip.open(archive, "rb"), budget), mode="r:")
        except _OverBudget:
            raise ArchiveError(f"{archive.name}: decompressed stream exceeds the limits (likely decompression bomb)") from None
        except (tarfile.TarError, OSError, EOFError) as err:
            raise ArchiveError(f"{archive.name}: not a readable .tar.gz archive ({err})") from None
        with tf:
            try:
                members = _tar_members(tf)
            except (tarfile.TarError, EOFError, OSError) as err:
                raise ArchiveError(f"{archive.name}: damaged tar stream ({err})") from None
            _check_totals(members, archive, limits)
            written = _write_members(members, dest, lambda m: _tar_file(tf, m),
                                     (tarfile.TarError, OSError, EOFError))
    for path in dest.rglob("*"):
        if path.is_symlink():  # cannot happen by construction; checked all the same
            raise ArchiveError(f"member {path.relative_to(dest).as_posix()!r}: link found after extraction")
    return sorted(written)
