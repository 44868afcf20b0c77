"""Packing a folder for upload and unpacking uploaded archives without trusting their contents."""

import os
import stat
import tarfile
import zipfile
from dataclasses import dataclass
from pathlib import Path, PurePosixPath


class ArchiveError(ValueError):
    """An archive that Cairn refuses to unpack; the message names the member and the reason."""


@dataclass(frozen=True)
class ExtractLimits:
    max_total_bytes: int = 20 * 1024**3
    max_files: int = 100_000
    max_ratio: float = 200.0  # unpacked / packed size


def pack_folder(folder, sink):
    """Write ``folder`` as an uncompressed tar stream to the binary file ``sink``, by name."""
    folder = Path(folder)
    with tarfile.open(fileobj=sink, mode="w|", format=tarfile.PAX_FORMAT) as tar:
        for path in sorted(folder.rglob("*")):
            if path.is_symlink():
                raise ArchiveError(f"{path.relative_to(folder)}: symbolic links are not uploaded")
            if path.is_file():
                tar.add(path, arcname=path.relative_to(folder).as_posix(), recursive=False)


def _check_name(name, seen):
    posix = PurePosixPath(name)
    if posix.is_absolute() or name.startswith(("/", "\\")) or ":" in posix.parts[0]:
        raise ArchiveError(f"{name}: absolute paths are not allowed in an upload")
    if any(part == ".." for part in posix.parts):
        raise ArchiveError(f"{name}: '..' is not allowed in a path")
    folded = posix.as_posix().lower()
    if folded in seen:
        raise ArchiveError(
            f"{name}: another member has the same name (or one differing only in case: "
            f"{seen[folded]})"
        )
    seen[folded] = name


def _strip_single_root(names):
    """If every member sits under one top folder (a zipped dataset folder), drop that folder."""
    tops = {PurePosixPath(n).parts[0] for n in names if PurePosixPath(n).parts}
    if len(tops) == 1 and not any(len(PurePosixPath(n).parts) == 1 for n in names):
        top = tops.pop()
        if top != "dataset_description.json":
            return top
    return None


def extract_archive(archive_path, destination, *, limits=ExtractLimits()):
    """Unpack a .tar, .tar.gz or .zip into ``destination``; returns the unpacked file paths.

    Refuses absolute paths, '..', links, device files, duplicate names (also case-only ones),
    and archives that exceed the file-count, size or compression-ratio limits.
    """
    archive_path = Path(archive_path)
    destination = Path(destination)
    destination.mkdir(parents=True, exist_ok=True)
    packed = max(1, archive_path.stat().st_size)
    if zipfile.is_zipfile(archive_path):
        members = _zip_members(archive_path)
    elif tarfile.is_tarfile(archive_path):
        members = _tar_members(archive_path)
    else:
        raise ArchiveError(f"{archive_path.name}: not a .zip or .tar(.gz) archive")
    if len(members) > limits.max_files:
        raise ArchiveError(f"archive holds {len(members)} files; the limit is {limits.max_files}")
    total = sum(size for _, size in members)
    if total > limits.max_total_bytes:
        raise ArchiveError(f"archive unpacks to {total} bytes; the limit is "
                           f"{limits.max_total_bytes} bytes")
    if total / packed > limits.max_ratio:
        raise ArchiveError(f"archive unpacks to {total / packed:.0f}× its size; the limit is "
                           f"{limits.max_ratio:.0f}× (possible archive bomb)")
    seen = {}
    for name, _ in members:
        _check_name(name, seen)
    root = _strip_single_root([name for name, _ in members])
    written = []
    opener = _zip_read if zipfile.is_zipfile(archive_path) else _tar_read
    for name, stream in opener(archive_path):
        relative = PurePosixPath(name)
        if root is not None:
            relative = PurePosixPath(*relative.parts[1:])
        target = destination.joinpath(*relative.parts)
        target.parent.mkdir(parents=True, exist_ok=True)
        budget = total + 1
        with open(target, "wb") as sink:
            while chunk := stream.read(1024 * 1024):
                budget -= len(chunk)
                if budget < 0:
                    raise ArchiveError(f"{name}: unpacks larger than its header says")
                sink.write(chunk)
        written.append(target)
    return written


def _zip_members(path):
    members = []
    with zipfile.ZipFile(path) as zf:
        for info in zf.infolist():
            if info.is_dir():
                continue
            mode = info.external_attr >> 16
            if stat.S_ISLNK(mode):
                raise ArchiveError(f"{info.filename}: symbolic links are not allowed in an upload")
            if mode and not stat.S_ISREG(mode):
                raise ArchiveError(f"{info.filename}: only regular files may be uploaded")
            members.append((info.filename, info.file_size))
    return members


def _tar_members(path):
    members = []
    with tarfile.open(path) as tar:
        for info in tar:
            if info.isdir():
                continue
            if info.issym() or info.islnk():
                raise ArchiveError(f"{info.name}: links are not allowed in an upload")
            if not info.isreg():
                raise ArchiveError(f"{info.name}: only regular files may be uploaded "
                                   "(found a device, pipe or other special file)")
            members.append((info.name, info.size))
    return members


def _zip_read(path):
    with zipfile.ZipFile(path) as zf:
        for info in zf.infolist():
            if not info.is_dir():
                with zf.open(info) as stream:
                    yield info.filename, stream


def _tar_read(path):
    with tarfile.open(path) as tar:
        for info in tar:
            if info.isreg():
                yield info.name, tar.extractfile(info)


def list_files(root):
    """Every file under ``root`` as a POSIX path relative to it, sorted."""
    root = Path(root)
    return sorted(
        p.relative_to(root).as_posix() for p in root.rglob("*") if p.is_file()
        and not os.path.basename(p).startswith(".")
    )
