"""The BagIt side of an archive: make the bag, write it as one file, validate it.

A bag (RFC 8493) is made in a staging folder that holds nothing but the
payload we copied there: ``bagit.make_bag`` converts a folder in place and
changes the working folder, so it never touches the project itself, and the
working folder is restored afterwards. ``Bagging-Date`` and
``Bag-Software-Agent`` are passed explicitly and the archive file is written
with sorted members, fixed times and permissions, so the same project packs
into the same bytes.

Validation never trusts ``Payload-Oxum`` alone: every file's sha256 is
recomputed, the manifests are compared with the files that are really there
(naming each missing or unlisted file) and a bag with ``fetch.txt`` is refused.
"""

from __future__ import annotations

import gzip
import io
import os
import tarfile
import zipfile
from pathlib import Path

import bagit

from wavetrail.errors import ArchiveError

ALGORITHM = "sha256"
#: the BagIt version the bag declares (RFC 8493); the bagit library writes 0.97, and the bag is
#: made to the 1.0 rules (UTF-8 tag files, sha256 manifests, no fetch.txt), so bagit.txt says 1.0
BAGIT_VERSION = "1.0"


def make_bag(staging: Path, bag_info: dict, date: str, agent: str) -> None:
    """Turn ``staging`` (holding only the payload) into a bag, in place.

    Raises
    ------
    ArchiveError
        When the staging folder holds a link, or bagit refuses it.
    """
    staging = Path(staging)
    for path in staging.rglob("*"):
        if path.is_symlink():
            raise ArchiveError(f"{path.relative_to(staging).as_posix()}: a link cannot go into an archive",
                               hint="replace the link by the file it points to")
    info = dict(bag_info)
    info["Bagging-Date"] = date
    info["Bag-Software-Agent"] = agent
    cwd = os.getcwd()
    try:
        bagit.make_bag(str(staging), bag_info=info, checksums=[ALGORITHM], processes=1)
    except (bagit.BagError, OSError) as err:
        raise ArchiveError(f"the bag could not be made: {err}") from None
    finally:
        os.chdir(cwd)
    _declare_version(staging)


def _declare_version(bag_dir: Path) -> None:
    """Write ``BagIt-Version: 1.0`` in bagit.txt and its new sha256 in the tag manifest."""
    import hashlib

    text = f"BagIt-Version: {BAGIT_VERSION}\nTag-File-Character-Encoding: UTF-8\n".encode("utf-8")
    (bag_dir / "bagit.txt").write_bytes(text)
    digest = hashlib.new(ALGORITHM, text).hexdigest()
    manifest = bag_dir / f"tagmanifest-{ALGORITHM}.txt"
    lines = manifest.read_bytes().decode("utf-8").splitlines()
    lines = [f"{digest} bagit.txt" if line.split(" ", 1)[-1].strip() == "bagit.txt" else line for line in lines]
    manifest.write_bytes(("\n".join(lines) + "\n").encode("utf-8"))


def _files(folder: Path) -> list[tuple[str, Path]]:
    return sorted((p.relative_to(folder).as_posix(), p) for p in folder.rglob("*") if p.is_file())


def write_archive(bag_dir: Path, output: Path, top: str, mtime: int) -> Path:
    """Write the bag as ``output`` (.zip or .tar.gz) under the folder name ``top``.

    Members are sorted, dated ``mtime`` (seconds since 1970, UTC), with mode
    0644 and no owner names, so the file is byte-stable.
    """
    from wavetrail._io import atomic_write_bytes

    name = output.name.lower()
    buf = io.BytesIO()
    members = _files(bag_dir)
    if name.endswith(".zip"):
        import time

        stamp = time.gmtime(max(mtime, 315532800))[:6]  # zip cannot date before 1980
        with zipfile.ZipFile(buf, "w", compression=zipfile.ZIP_DEFLATED) as zf:
            for rel, path in members:
                info = zipfile.ZipInfo(f"{top}/{rel}", date_time=stamp)
                info.compress_type = zipfile.ZIP_DEFLATED
                info.external_attr = (0o100644 & 0xFFFF) << 16
                info.create_system = 3
                zf.writestr(info, path.read_bytes())
    elif name.endswith(".tar.gz") or name.endswith(".tgz"):
        raw = io.BytesIO()
        with tarfile.open(fileobj=raw, mode="w", format=tarfile.PAX_FORMAT) as tf:
            for rel, path in members:
                data = path.read_bytes()
                info = tarfile.TarInfo(f"{top}/{rel}")
                info.size = len(data)
                info.mtime = mtime
                info.mode = 0o644
                info.uid = info.gid = 0
                info.uname = info.gname = ""
                tf.addfile(info, io.BytesIO(data))
        with gzip.GzipFile(fileobj=buf, mode="wb", mtime=0, filename="") as gz:
            gz.write(raw.getvalue())
    else:
        raise ArchiveError(f"{output}: the archive must end in .zip or .tar.gz",
                           hint="pass -o NAME.zip or -o NAME.tar.gz")
    return atomic_write_bytes(output, buf.getvalue())


def find_bag(folder: Path) -> Path:
    """The bag inside an extraction folder: the folder itself or its single top folder."""
    folder = Path(folder)
    if (folder / "bagit.txt").is_file():
        return folder
    subs = [p for p in folder.iterdir()]
    if len(subs) == 1 and subs[0].is_dir() and (subs[0] / "bagit.txt").is_file():
        return subs[0]
    raise ArchiveError("the archive holds no BagIt bag (no bagit.txt at its top)",
                       hint="give an archive written by `wavetrail pack`")


def _read_manifest(path: Path, top: str) -> dict[str, str]:
    entries: dict[str, str] = {}
    for number, line in enumerate(path.read_text(encoding="utf-8").splitlines(), start=1):
        if not line.strip():
            continue
        digest, sep, rel = line.partition(" ")
        rel = rel.lstrip(" *")
        if not sep or not rel:
            raise ArchiveError(f"{top}/{path.name}, line {number}: not '<hash> <path>'")
        entries[rel] = digest.lower()
    return entries


TAG_FILES = ("bagit.txt", "bag-info.txt", f"manifest-{ALGORITHM}.txt")


def validate_bag(bag_dir: Path, top: str) -> list[dict]:
    """Every problem with the bag: ``[{"target": member, "detail": text}]`` (empty when valid).

    Checks, in order: no ``fetch.txt``; a sha256 payload manifest and a
    sha256 tag manifest exist, and the tag manifest lists ``bagit.txt``,
    ``bag-info.txt`` and the payload manifest; every file of the bag, at
    any level, is listed in one of the two manifests (the tag manifest
    itself excepted) and every listed file exists (names each one);
    ``bag-info.txt`` is UTF-8; then ``bagit``'s full validation (every
    checksum recomputed, tag manifests included; never the fast
    Payload-Oxum check alone).
    """
    bag_dir = Path(bag_dir)
    problems: list[dict] = []
    if (bag_dir / "fetch.txt").exists():
        return [{"target": f"{top}/fetch.txt",
                 "detail": "the bag lists files to fetch from elsewhere (fetch.txt); a reviewer archive "
                           "must hold every file itself"}]
    manifest = bag_dir / f"manifest-{ALGORITHM}.txt"
    tagmanifest = bag_dir / f"tagmanifest-{ALGORITHM}.txt"
    if not manifest.is_file():
        return [{"target": f"{top}/manifest-{ALGORITHM}.txt", "detail": "no sha256 payload manifest"}]
    if not tagmanifest.is_file():
        return [{"target": f"{top}/tagmanifest-{ALGORITHM}.txt",
                 "detail": "no sha256 tag manifest: bag-info.txt and the payload manifest could be edited "
                           "unnoticed (an archive written by `wavetrail pack` always has one)"}]
    try:
        listed = _read_manifest(manifest, top)
        tags = _read_manifest(tagmanifest, top)
    except (ArchiveError, UnicodeDecodeError) as err:
        return [{"target": f"{top}/{manifest.name}", "detail": f"not a readable manifest ({err})"}]
    for name in TAG_FILES:
        if name not in tags:
            problems.append({"target": f"{top}/{name}", "detail": f"not listed in {tagmanifest.name}"})
    try:
        (bag_dir / "bag-info.txt").read_bytes().decode("utf-8")
    except UnicodeDecodeError as err:
        problems.append({"target": f"{top}/bag-info.txt", "detail": f"not UTF-8 text ({err.reason} at byte "
                                                                    f"{err.start})"})
    except OSError:
        problems.append({"target": f"{top}/bag-info.txt", "detail": "missing"})
    present = {rel for rel, _ in _files(bag_dir)}
    allowed = set(listed) | set(tags) | {tagmanifest.name}
    for rel in sorted(set(listed) - present):
        problems.append({"target": f"{top}/{rel}", "detail": "listed in the manifest but missing from the archive"})
    for rel in sorted(set(tags) - present):
        problems.append({"target": f"{top}/{rel}", "detail": "listed in the tag manifest but missing from the archive"})
    for rel in sorted(present - allowed):
        problems.append({"target": f"{top}/{rel}", "detail": "in the archive but listed in no manifest "
                                                             "(added after packing?)"})
    if problems:
        return problems
    try:
        bag = bagit.Bag(str(bag_dir))
        bag.validate(processes=1, fast=False)
    except bagit.BagValidationError as err:
        details = getattr(err, "details", None) or []
        for d in details:
            path = getattr(d, "path", None)
            target = f"{top}/{path}" if path else top
            if any(p["target"] == target for p in problems):
                continue
            problems.append({"target": target, "detail": str(d)})
        if not details and not problems:
            problems.append({"target": top, "detail": f"bag validation failed: {err.message}"})
    except (bagit.BagError, UnicodeDecodeError, OSError, ValueError) as err:
        problems.append({"target": top, "detail": f"not a valid bag: {err}"})
    return problems


def read_bag_info(bag_dir: Path) -> dict[str, str]:
    """``bag-info.txt`` as a dict (first value of each key).

    Raises
    ------
    ArchiveError
        When the file is not UTF-8 text.
    """
    path = Path(bag_dir) / "bag-info.txt"
    info: dict[str, str] = {}
    if not path.is_file():
        return info
    try:
        text = path.read_bytes().decode("utf-8")
    except UnicodeDecodeError as err:
        raise ArchiveError(f"bag-info.txt: not UTF-8 text ({err.reason} at byte {err.start})") from None
    key = None
    for line in text.splitlines():
        if line[:1] in (" ", "\t") and key:
            info[key] += " " + line.strip()
            continue
        k, sep, v = line.partition(":")
        if sep:
            key = k.strip()
            info.setdefault(key, v.strip())
    return info
