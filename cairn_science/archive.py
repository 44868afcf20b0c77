"""Packing a folder for upload and unpacking uploaded archives without trusting their contents.

Members are streamed in 1 MiB chunks into a temporary folder beside the destination, which is
renamed into place only once the whole archive has passed; a refused archive leaves nothing.
Each file can be hashed as it is written (``extract_archive(..., digests=...)``), so a caller
that needs the contents' sha256 does not read the files again.
"""

from __future__ import annotations

import errno
import gzip
import hashlib
import lzma
import os
import shutil
import stat
import struct
import tarfile
import tempfile
import unicodedata
import zipfile
import zlib
from contextlib import contextmanager, nullcontext
from dataclasses import dataclass
from pathlib import Path
from typing import BinaryIO

CHUNK_BYTES = 1024 * 1024
MAX_NAME_PART_BYTES = 255  # the longest file or folder name common file systems store
MAX_PATH_BYTES = 1024
PROBE_BYTES = 64 * 1024  # read first to tell files that cannot be copies of each other
MAX_TAR_HEADER_BYTES = 1024 * 1024  # per member: long names and extended headers, held whole
MAX_ZIP_DIRECTORY_BYTES = 64 * 1024 * 1024  # zipfile reads the central directory whole
ZIP_METHODS = {zipfile.ZIP_STORED, zipfile.ZIP_DEFLATED, zipfile.ZIP_BZIP2, zipfile.ZIP_LZMA}
ZIP_ENCRYPTED_FLAG = 0x1

# What zipfile, tarfile, gzip and the decompressors raise on a damaged archive; caught only
# around reads from the archive, never around writes to the destination.
_DAMAGE = (zipfile.BadZipFile, tarfile.TarError, EOFError, OSError, zlib.error,
           lzma.LZMAError, struct.error, ValueError, RuntimeError)
_REMAKE = "Make the archive again from the original dataset folder and upload the new file."


class ArchiveError(ValueError):
    """An archive that Cairn refuses to unpack; the message names the member and the reason."""


@dataclass(frozen=True)
class ExtractLimits:
    """Ceilings on what one archive may unpack to."""

    max_total_bytes: int = 20 * 1024**3
    max_files: int = 100_000  # entries: files and folders listed in the archive
    max_ratio: float = 200.0  # unpacked bytes / archive bytes
    max_depth: int = 32  # path parts, folders and file name together


def _show(name):
    """``name`` in quotes, with control characters escaped so the message stays readable."""
    return "'" + "".join(c if c.isprintable() else ascii(c)[1:-1] for c in name) + "'"


def _refuse(label, member, text):
    where = label if member is None else f"{label}: entry {_show(member)}"
    return ArchiveError(f"{where}: {text}")


@contextmanager
def _reading(label, member=None):
    """Report any failure to read the archive as one ArchiveError naming it (and the member)."""
    try:
        yield
    except ArchiveError:
        raise
    except _DAMAGE as exc:
        raise _refuse(label, member, "cannot be read; the archive is truncated or damaged, or "
                      f"a header does not match the data. {_REMAKE}") from exc


def _mb(n_bytes):
    return f"{n_bytes / 1e6:,.1f} MB"


def _check_size(label, member, total_bytes, packed_bytes, limits, verb):
    """Refuse once ``total_bytes`` unpacked (declared or counted, per ``verb``) is too much."""
    if total_bytes > limits.max_total_bytes:
        raise _refuse(label, member, f"the archive {verb} {_mb(total_bytes)} of unpacked data, "
                      f"more than the limit of {_mb(limits.max_total_bytes)}. Split the dataset "
                      "into several uploads, or ask the operator to raise the limit.")
    if total_bytes > limits.max_ratio * packed_bytes:
        ratio = total_bytes / packed_bytes
        raise _refuse(label, member, f"the archive {verb} {ratio:,.0f} times its own size "
                      f"({_mb(packed_bytes)}) of unpacked data, more than the limit of "
                      f"{limits.max_ratio:,.0f} times; that is the mark of an archive bomb. "
                      "If the data is genuine, upload it as an uncompressed .tar or as a folder.")


def _check_count(label, member, count, limits):
    if count > limits.max_files:
        raise _refuse(label, member, f"the archive holds more than {limits.max_files:,} entries "
                      "(files and folders). Split the dataset into several uploads.")


def _fold(path):
    return unicodedata.normalize("NFC", path).casefold()


def _split(label, name, limits, *, is_dir):
    """The safe path parts of a member name (``.`` parts dropped), or ArchiveError saying why."""
    def refuse(text):
        return _refuse(label, name, text)

    if not name:
        raise refuse("has an empty name. " + _REMAKE)
    if any(unicodedata.category(c) in ("Cc", "Cs") for c in name):
        raise refuse("its name holds a NUL, another control character or bytes that are not "
                     "text. Rename the file with letters, digits, '-', '_' and '.'.")
    if name.startswith(("/", "\\")) or (name[1:2] == ":" and name[0].isascii()
                                        and name[0].isalpha()):
        raise refuse("is an absolute path; paths in an upload must be relative to the dataset "
                     "folder. Make the archive from inside the dataset folder.")
    if "\\" in name:
        raise refuse("contains a backslash; folders in an archive are separated by '/'. "
                     "Make the archive with a tool that writes standard paths.")
    if ":" in name:
        raise refuse("contains ':', which many file systems cannot store in a name. "
                     "Rename the file.")
    parts = [part for part in name.split("/") if part not in ("", ".")]
    if ".." in parts:
        raise refuse("climbs out of the dataset folder with '..'. Make the archive from inside "
                     "the dataset folder so that every path stays within it.")
    if not parts and not is_dir:
        raise refuse("names no file. " + _REMAKE)
    for part in parts:
        if len(part.encode()) > MAX_NAME_PART_BYTES:
            raise refuse(f"has a name part {len(part.encode())} bytes long; the limit is "
                         f"{MAX_NAME_PART_BYTES} bytes. Shorten it.")
    if len(name.encode()) > MAX_PATH_BYTES:
        raise refuse(f"has a path {len(name.encode())} bytes long; the limit is "
                     f"{MAX_PATH_BYTES} bytes. Shorten it.")
    if len(parts) > limits.max_depth:
        raise refuse(f"lies {len(parts)} levels deep; the limit is {limits.max_depth}. "
                     "Flatten the folder structure.")
    return tuple(parts)


class _Names:
    """Member paths seen so far, to refuse duplicates and names a case-blind disk would merge."""

    def __init__(self, label, limits):
        self.label, self.limits, self.seen = label, limits, {}

    def add(self, name, *, is_dir):
        """Check ``name`` against the rules and the names before it; return its path parts."""
        parts = _split(self.label, name, self.limits, is_dir=is_dir)
        for depth in range(1, len(parts) + 1):
            path = "/".join(parts[:depth])
            kind = "file" if depth == len(parts) and not is_dir else "folder"
            key = _fold(path)
            if key not in self.seen:
                self.seen[key] = (path, kind)
                continue
            other, other_kind = self.seen[key]
            if other != path:
                if unicodedata.normalize("NFC", other) == unicodedata.normalize("NFC", path):
                    how = "the same name with its accents written in another Unicode form"
                else:
                    how = "a name differing only in upper/lower case"
                raise _refuse(self.label, name, f"clashes with {_show(other)}, {how}; "
                              "many disks store both as one file. Rename one of them.")
            if kind == "file" and other_kind == "file":
                raise _refuse(self.label, name, "appears twice in the archive. " + _REMAKE)
            if kind != other_kind:
                raise _refuse(self.label, name, f"{_show(path)} is used both as a file and as a "
                              "folder. Rename one of them.")
        return parts


def _copy(label, name, stream, target, declared_bytes, meter, digest=None):
    """Stream one member to ``target``, counting real bytes so a lying header cannot hide;
    ``digest`` (a hashlib object), if given, is fed every byte written."""
    written = 0
    with open(target, "xb") as sink:
        while True:
            with _reading(label, name):
                chunk = stream.read(CHUNK_BYTES)
            if not chunk:
                break
            written += len(chunk)
            if written > declared_bytes:
                raise _refuse(label, name, f"holds more data than the {declared_bytes:,} bytes "
                              "its header declares. " + _REMAKE)
            meter(name, len(chunk))
            if digest is not None:
                digest.update(chunk)
            sink.write(chunk)
    if written != declared_bytes:
        raise _refuse(label, name, f"holds {written:,} bytes but its header declares "
                      f"{declared_bytes:,} bytes. " + _REMAKE)


def _copy_span(label, name, raw, offset, target, declared_bytes, meter, digest, buffer):
    """Copy the ``declared_bytes`` of a plain tar member's data, which start at ``offset`` of
    the archive file ``raw``, to ``target``: read straight from the file into ``buffer`` (a
    reused bytearray) and written from there, one copy each way, instead of through tarfile's
    stream and file objects. An archive that ends early is refused as tarfile refuses it."""
    view = memoryview(buffer)
    fd = raw.fileno()
    written = 0
    with open(target, "xb", buffering=0) as sink:
        while written < declared_bytes:
            with _reading(label, name):
                got = os.preadv(fd, [view[:min(len(view), declared_bytes - written)]],
                                offset + written)
                if not got:
                    raise tarfile.ReadError("unexpected end of data")
            chunk = view[:got]
            written += got
            meter(name, got)
            if digest is not None:
                digest.update(chunk)
            while chunk:
                chunk = chunk[sink.write(chunk):]


def _hash_span(label, name, raw, offset, declared_bytes, meter, buffer):
    """The sha256 of a plain tar member's data, read from the file as _copy_span reads it
    (counted by ``meter``; an archive that ends early is refused the same way)."""
    view = memoryview(buffer)
    fd = raw.fileno()
    digest = hashlib.sha256()
    done = 0
    while done < declared_bytes:
        with _reading(label, name):
            got = os.preadv(fd, [view[:min(len(view), declared_bytes - done)]], offset + done)
            if not got:
                raise tarfile.ReadError("unexpected end of data")
        done += got
        meter(name, got)
        digest.update(view[:got])
    return digest


def _link_or_copy(label, name, raw, offset, target, declared_bytes, same, buffer):
    """``target`` as a hard link to ``same`` (a file already unpacked with the same content),
    or, where the disk cannot link it, as a copy."""
    if same is not None:
        try:
            os.link(same, target)
            return
        except FileExistsError:
            raise
        except OSError as exc:
            if exc.errno not in (errno.EMLINK, errno.EPERM, errno.ENOTSUP, errno.EXDEV):
                raise
    _copy_span(label, name, raw, offset, target, declared_bytes, lambda *_: None, None,
               buffer)


def _counter(label, packed_bytes, limits):
    """A callable that adds unpacked bytes as they stream and refuses past the limits."""
    total = 0

    def count(name, n_bytes):
        nonlocal total
        total += n_bytes
        _check_size(label, name, total, packed_bytes, limits, "holds")

    return count


def _zip_directory(archive, label):
    """Entry count and central-directory size from the zip's end record, read before zipfile
    loads the whole directory into memory."""
    with open(archive, "rb") as raw, _reading(label):
        size = raw.seek(0, os.SEEK_END)
        raw.seek(max(0, size - 22 - 0xFFFF - 20))
        tail = raw.read()
        end = tail.rfind(b"PK\x05\x06")
        if end < 0 or len(tail) - end < 22:
            raise zipfile.BadZipFile("no end-of-directory record")
        entries, directory_bytes = struct.unpack_from("<HI", tail, end + 10)
        if (entries == 0xFFFF or directory_bytes == 0xFFFFFFFF) and end >= 20 \
                and tail[end - 20:end - 16] == b"PK\x06\x07":
            raw.seek(struct.unpack_from("<Q", tail, end - 12)[0])
            record = raw.read(56)
            if record[:4] == b"PK\x06\x06":
                entries, directory_bytes = struct.unpack_from("<QQ", record, 32)
    return entries, directory_bytes


def _zip_is_dir(label, info):
    """Whether a zip member is a folder; refuses links and special files by their Unix mode."""
    mode = info.external_attr >> 16
    if stat.S_ISLNK(mode):
        raise _refuse(label, info.orig_filename, "is a symbolic link; links are not accepted "
                      "because they can point outside the dataset. Replace it with a copy of "
                      "the file it points to.")
    if stat.S_ISDIR(mode) or info.orig_filename.endswith("/"):
        return True
    if stat.S_IFMT(mode) not in (0, stat.S_IFREG):
        raise _refuse(label, info.orig_filename, "is a special file (a device, pipe or socket); "
                      "only regular files and folders are accepted. Remove it from the dataset.")
    return False


def _unpack_zip(archive, label, into, limits, packed_bytes, hashing):
    entries, directory_bytes = _zip_directory(archive, label)
    _check_count(label, None, entries, limits)
    if directory_bytes > MAX_ZIP_DIRECTORY_BYTES:
        raise _refuse(label, None, f"its table of contents is {_mb(directory_bytes)}, more than "
                      f"the limit of {_mb(MAX_ZIP_DIRECTORY_BYTES)}. " + _REMAKE)
    with _reading(label):
        zf = zipfile.ZipFile(archive)
    with zf:
        names, plan, declared = _Names(label, limits), [], 0
        _check_count(label, None, len(zf.infolist()), limits)
        for info in zf.infolist():
            name = info.orig_filename
            is_dir = _zip_is_dir(label, info)
            if info.flag_bits & ZIP_ENCRYPTED_FLAG:
                raise _refuse(label, name, "is encrypted (password-protected), which Cairn "
                              "cannot read. Make the archive again without a password.")
            if info.compress_type not in ZIP_METHODS:
                raise _refuse(label, name, f"is compressed with zip method {info.compress_type}, "
                              "which Cairn cannot read. Make the archive again with ordinary "
                              "(deflate) compression.")
            parts = names.add(name, is_dir=is_dir)
            declared += info.file_size
            _check_size(label, name, declared, packed_bytes, limits, "declares")
            plan.append((info, parts, is_dir))
        count = _counter(label, packed_bytes, limits)
        for info, parts, is_dir in plan:
            target = into.joinpath(*parts)
            if is_dir:
                target.mkdir(parents=True, exist_ok=True)
                continue
            target.parent.mkdir(parents=True, exist_ok=True)
            with _reading(label, info.orig_filename):
                stream = zf.open(info)
            digest = hashlib.sha256() if hashing else None
            with stream:
                _copy(label, info.orig_filename, stream, target, info.file_size, count, digest)
            yield parts, digest


class _TarStream:
    """The tar byte stream, refusing more than MAX_TAR_HEADER_BYTES read between member data;
    tarfile holds long names and extended headers in memory whole."""

    def __init__(self, raw, label):
        self.raw, self.label = raw, label
        self.header_bytes, self.in_member = 0, False

    def read(self, size=-1):
        if self.in_member:
            return self.raw.read(size)
        # Between members, read in pieces and count each, so a huge extended header is
        # refused once past the limit instead of being read whole first.
        pieces = []
        while size < 0 or size > 0:
            data = self.raw.read(CHUNK_BYTES if size < 0 else min(size, CHUNK_BYTES))
            if not data:
                break
            self.header_bytes += len(data)
            if self.header_bytes > MAX_TAR_HEADER_BYTES:
                raise _refuse(self.label, None, f"holds more than {_mb(MAX_TAR_HEADER_BYTES)} of "
                              "tar headers for one entry (long names or extended headers), far "
                              "more than a dataset needs. " + _REMAKE)
            pieces.append(data)
            if size > 0:
                size -= len(data)
        return pieces[0] if len(pieces) == 1 else b"".join(pieces)

    # A plain tar is read in place (tarfile's random-access mode): headers through read(),
    # member data straight from the file by offset.
    def seek(self, offset, whence=os.SEEK_SET):
        return self.raw.seek(offset, whence)

    def tell(self):
        return self.raw.tell()

    def data_starts(self):
        self.in_member = True

    def data_ends(self):
        self.in_member, self.header_bytes = False, 0


class _StrictTarInfo(tarfile.TarInfo):
    """Tar headers that end the archive only at its end-of-archive block; tarfile on its own
    stops quietly at a damaged or cut-off header past the first one."""

    @classmethod
    def fromtarfile(cls, tar):
        try:
            return super().fromtarfile(tar)
        except tarfile.EOFHeaderError:
            raise
        except tarfile.HeaderError as exc:
            raise tarfile.ReadError(f"damaged or cut-off header: {exc}") from exc


def _unpack_tar(archive, label, into, limits, packed_bytes, hashing, *, compressed,
                link_duplicates=False):
    """A .tar.gz is read as one stream; a plain .tar in place, its member data copied from
    the file by offset. Either way each header is checked before its member is written.
    With ``link_duplicates`` a plain tar's member is hashed before it is written, and one
    whose content an earlier member had becomes a hard link to that file."""
    with open(archive, "rb") as raw, \
            gzip.GzipFile(fileobj=raw, mode="rb") if compressed else nullcontext(raw) as source:
        stream = _TarStream(source, label)
        with _reading(label):
            tar = tarfile.open(fileobj=stream, mode="r|" if compressed else "r:",
                               tarinfo=_StrictTarInfo)
        buffer = None if compressed else bytearray(CHUNK_BYTES)
        written = {}  # with link_duplicates: each content's sha256, the file holding it
        probes = set()  # and each file's size with the sha256 of its first bytes
        with tar:
            names, entries, declared = _Names(label, limits), 0, 0
            count = _counter(label, packed_bytes, limits)
            while True:
                with _reading(label):
                    info = tar.next()
                if info is None:
                    break
                entries += 1
                _check_count(label, info.name, entries, limits)
                if info.issym() or info.islnk():
                    kind = "symbolic" if info.issym() else "hard"
                    raise _refuse(label, info.name, f"is a {kind} link; links are not accepted "
                                  "because they can point outside the dataset. Replace it with a "
                                  "copy of the file it points to.")
                if not (info.isreg() or info.isdir()):
                    raise _refuse(label, info.name, "is a special file (a device, pipe or "
                                  "socket); only regular files and folders are accepted. Remove "
                                  "it from the dataset.")
                parts = names.add(info.name, is_dir=info.isdir())
                target = into.joinpath(*parts)
                if info.isdir():
                    target.mkdir(parents=True, exist_ok=True)
                    continue
                declared += info.size
                _check_size(label, info.name, declared, packed_bytes, limits, "declares")
                target.parent.mkdir(parents=True, exist_ok=True)
                digest = hashlib.sha256() if hashing else None
                stream.data_starts()
                if compressed or info.sparse is not None:
                    with _reading(label, info.name):
                        member = tar.extractfile(info)
                    _copy(label, info.name, member, target, info.size, count, digest)
                elif link_duplicates:
                    # Only a member whose size and first bytes an earlier one had can be a
                    # copy; only such a member is hashed whole before it is written.
                    probe = (info.size, _hash_span(label, info.name, raw, info.offset_data,
                                                   min(info.size, PROBE_BYTES),
                                                   lambda *_: None, buffer).digest())
                    if probe in probes:
                        digest = _hash_span(label, info.name, raw, info.offset_data,
                                            info.size, count, buffer)
                        _link_or_copy(label, info.name, raw, info.offset_data, target,
                                      info.size, written.get(digest.digest()), buffer)
                    else:
                        digest = hashlib.sha256()
                        _copy_span(label, info.name, raw, info.offset_data, target, info.size,
                                   count, digest, buffer)
                    probes.add(probe)
                    written.setdefault(digest.digest(), target)
                else:
                    _copy_span(label, info.name, raw, info.offset_data, target, info.size,
                               count, digest, buffer)
                stream.data_ends()
                yield parts, digest
        if compressed:
            with _reading(label):
                while stream.read(CHUNK_BYTES):
                    pass


def _sniff(archive, label):
    """The archive's format from its first bytes; names can lie and often do."""
    with open(archive, "rb") as raw:
        head = raw.read(512)
    if head.startswith((b"PK\x03\x04", b"PK\x05\x06")):
        return "zip"
    if head.startswith(b"\x1f\x8b"):
        return "tar.gz"
    if head[257:262] == b"ustar":
        return "tar"
    raise _refuse(label, None, "is not a .zip, .tar or .tar.gz archive (judged by its contents, "
                  "not its name), or it is truncated. Pack the dataset folder as one of those "
                  "and upload it again.")


def _wrapping_folder(unpacked):
    """The one top folder that wraps a zipped dataset folder, if that is what was unpacked."""
    entries = list(unpacked.iterdir())
    if len(entries) == 1 and (entries[0] / "dataset_description.json").is_file():
        return entries[0].name
    return None


def extract_archive(archive_path: str | os.PathLike, destination: str | os.PathLike, *,
                    limits: ExtractLimits = ExtractLimits(),
                    label: str | None = None,
                    digests: dict | None = None,
                    link_duplicates: bool = False) -> list[Path]:
    """Unpack a .zip, .tar or .tar.gz (told apart by content) into ``destination``, which must
    be absent or an empty folder; returns the unpacked file paths.

    ``label`` names the archive in error messages (default: its file name). A single top folder
    holding dataset_description.json is unwrapped. On any error ``destination`` is left as it was.
    With ``digests`` (a dict), each file's sha256 hex digest, computed from the bytes as they
    were written, is stored in it under the file's POSIX path relative to ``destination``.
    With ``link_duplicates``, a file of a plain .tar whose content equals an earlier file's is
    made a hard link to it instead of being written again (a file whose size and first 64 KiB
    match an earlier file's is hashed before it is written, which costs a second read of it
    from the archive). Only
    for callers that never write into the unpacked files: a change to one changes all its
    links.
    """
    archive_path, destination = Path(archive_path), Path(destination)
    label = label or archive_path.name
    if destination.exists() and (not destination.is_dir() or any(destination.iterdir())):
        raise FileExistsError(f"{destination}: already exists and is not an empty folder; "
                              "unpack into a new folder")
    kind = _sniff(archive_path, label)
    packed_bytes = max(1, archive_path.stat().st_size)
    destination.parent.mkdir(parents=True, exist_ok=True)
    staging = Path(tempfile.mkdtemp(prefix=f".{destination.name}.unpacking-",
                                    dir=destination.parent))
    try:
        hashing = digests is not None
        if kind == "zip":
            unpacked = list(_unpack_zip(archive_path, label, staging, limits, packed_bytes,
                                        hashing))
        else:
            unpacked = list(_unpack_tar(archive_path, label, staging, limits, packed_bytes,
                                        hashing, compressed=kind == "tar.gz",
                                        link_duplicates=link_duplicates))
        top = _wrapping_folder(staging)
        os.replace(staging / top if top else staging, destination)
    except BaseException:
        shutil.rmtree(staging, ignore_errors=True)
        raise
    if top:
        staging.rmdir()
    if hashing:
        for parts, digest in unpacked:
            digests["/".join(parts[1:] if top else parts)] = digest.hexdigest()
    return [destination.joinpath(*(parts[1:] if top else parts)) for parts, _ in unpacked]


def _walk(folder, label, names, relative=""):
    """Entries under ``folder`` in sorted order as (path, name, is_dir); refuses links and
    special files, and names that extraction would refuse."""
    with os.scandir(folder) as listing:
        entries = sorted(listing, key=lambda entry: entry.name)
    for entry in entries:
        name = relative + entry.name
        if entry.is_symlink():
            raise _refuse(label, name, "is a symbolic link; links are not uploaded because they "
                          "can point outside the dataset. Replace it with a copy of the file.")
        is_dir = entry.is_dir(follow_symlinks=False)
        if not is_dir and not entry.is_file(follow_symlinks=False):
            raise _refuse(label, name, "is a special file (a device, pipe or socket); only "
                          "regular files and folders are uploaded. Remove it from the folder.")
        names.add(name, is_dir=is_dir)
        yield entry.path, name, is_dir
        if is_dir:
            yield from _walk(entry.path, label, names, name + "/")


def pack_folder(folder: str | os.PathLike, sink: BinaryIO) -> None:
    """Write ``folder`` to the binary file ``sink`` as an uncompressed tar stream.

    Names are sorted and times, owners and permissions fixed, so one folder always packs to the
    same bytes. Links, special files and names extraction would refuse stop the packing.
    """
    folder = Path(folder)
    label = str(folder)
    with tarfile.open(fileobj=sink, mode="w|", format=tarfile.PAX_FORMAT) as tar:
        for path, name, is_dir in _walk(folder, label, _Names(label, ExtractLimits())):
            info = tarfile.TarInfo(name)
            info.mtime, info.uid, info.gid, info.uname, info.gname = 0, 0, 0, "", ""
            if is_dir:
                info.type, info.mode = tarfile.DIRTYPE, 0o755
                tar.addfile(info)
                continue
            info.mode = 0o644
            with open(path, "rb") as source:
                info.size = os.fstat(source.fileno()).st_size
                tar.addfile(info, source)


def list_files(root: Path) -> list[str]:
    """Every file under ``root`` as a POSIX path relative to it, sorted."""
    root = Path(root)
    return sorted(
        p.relative_to(root).as_posix() for p in root.rglob("*") if p.is_file()
        and not os.path.basename(p).startswith(".")
    )
