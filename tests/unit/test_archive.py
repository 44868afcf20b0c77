"""Tests of cairn_science.archive: broken and malicious archives are refused and leave nothing
behind, good archives round-trip byte for byte, packing is deterministic, and memory stays flat.

Archives are written with Python's own zipfile, tarfile and gzip; sha256 from hashlib is the
reference for file contents.
"""

import gzip
import hashlib
import io
import os
import random
import tarfile
import tempfile
import tracemalloc
import zipfile
from pathlib import Path

import pytest
from hypothesis import assume, given, settings
from hypothesis import strategies as st

from cairn_science.archive import (
    ArchiveError,
    ExtractLimits,
    extract_archive,
    list_files,
    pack_folder,
)
from fixtures.broken_archives import BROKEN_ARCHIVES

MIB = 1024 * 1024


def _write_dataset(root):
    """A small BIDS-like folder with a multi-chunk binary, an empty file, a hidden file, a
    non-ASCII name and an empty folder."""
    rng = random.Random(11)
    files = {
        "dataset_description.json": b'{"Name": "Round trip", "BIDSVersion": "1.9.0"}\n',
        "participants.tsv": b"participant_id\tage\nsub-01\t34\n",
        ".bidsignore": b"notes/\n",
        "sub-01/eeg/sub-01_task-rest_eeg.eeg": rng.randbytes(3 * MIB + 17),
        "sub-01/eeg/sub-01_task-rest_eeg.vhdr": b"Brain-free header of an invented recording\n",
        "sub-01/eeg/sub-01_task-rest_events.tsv": b"",
        "notes/caf\u00e9-\u00fcbersicht.txt": "Notizen \u00fcber das Caf\u00e9\n".encode(),
    }
    for name, data in files.items():
        (root / name).parent.mkdir(parents=True, exist_ok=True)
        (root / name).write_bytes(data)
    (root / "derivatives").mkdir()
    return root


def _tree(root):
    """Every file's sha256 and every folder under ``root``, by POSIX path relative to it."""
    digests, folders = {}, set()
    for folder, dirnames, filenames in os.walk(root):
        here = Path(folder)
        folders.update((here / d).relative_to(root).as_posix() for d in dirnames)
        for name in filenames:
            digests[(here / name).relative_to(root).as_posix()] = hashlib.sha256(
                (here / name).read_bytes()).hexdigest()
    return digests, folders


def _zip_folder(folder, archive, *, top=""):
    with zipfile.ZipFile(archive, "w", zipfile.ZIP_DEFLATED) as zf:
        for path in sorted(folder.rglob("*")):
            zf.write(path, top + path.relative_to(folder).as_posix())


def _pack(folder, archive, kind):
    """``folder`` as a zip (by zipfile), a tar (by pack_folder) or a tar.gz (pack_folder
    through gzip)."""
    if kind == "zip":
        _zip_folder(folder, archive)
        return
    with open(archive, "wb") as sink:
        if kind == "tar":
            pack_folder(folder, sink)
        else:
            with gzip.GzipFile(fileobj=sink, mode="wb", mtime=0) as compressed:
                pack_folder(folder, compressed)


# --- refusals -------------------------------------------------------------------------------


def test_the_broken_corpus_is_large_and_named_uniquely():
    names = [case.name for case in BROKEN_ARCHIVES]
    assert len(names) >= 10 and len(set(names)) == len(names)


@pytest.mark.parametrize("case", BROKEN_ARCHIVES, ids=lambda case: case.name)
def test_broken_archive_is_refused_naming_member_and_defect(case, tmp_path):
    archive = case.build(tmp_path)
    parent = tmp_path / "unpacked"
    parent.mkdir()
    destination = parent / "dataset"
    with pytest.raises(ArchiveError) as refused:
        extract_archive(archive, destination)
    message = str(refused.value)
    assert message.startswith(f"{archive.name}: ")
    if case.expect_member is not None:
        assert case.expect_member in message
    for word in case.expect_words:
        assert word in message
    assert not destination.exists()
    assert list(parent.iterdir()) == [], "the temporary folder was left behind"


def _small_tar(archive, names):
    with tarfile.open(archive, "w", format=tarfile.PAX_FORMAT) as tar:
        for name in names:
            info = tarfile.TarInfo(name)
            info.size = 100
            tar.addfile(info, io.BytesIO(bytes(100)))


@pytest.mark.parametrize(("limits", "names", "words"), [
    (ExtractLimits(max_total_bytes=250), ["a.tsv", "b.tsv", "c.tsv"], "more than the limit"),
    (ExtractLimits(max_files=2), ["a.tsv", "b.tsv", "c.tsv"], "more than 2 entries"),
    (ExtractLimits(max_depth=3), ["sub-01/ses-1/eeg/a.tsv"], "4 levels deep"),
])
def test_limits_given_by_the_caller_are_applied(limits, names, words, tmp_path):
    _small_tar(tmp_path / "small.tar", names)
    with pytest.raises(ArchiveError, match=words):
        extract_archive(tmp_path / "small.tar", tmp_path / "out", limits=limits)
    assert not (tmp_path / "out").exists()


def test_own_byte_count_stops_a_member_longer_than_its_header(tmp_path, monkeypatch):
    """zipfile itself stops at the declared size, so here it is made to hand over more, as a
    less careful reader would; the extractor's own count must still catch it."""
    archive = tmp_path / "lying.zip"
    with zipfile.ZipFile(archive, "w") as zf:
        zf.writestr("sub-01/eeg/big.eeg", bytes(1000))
    monkeypatch.setattr(zipfile.ZipFile, "open",
                        lambda self, info, *args, **kwargs: io.BytesIO(bytes(info.file_size + 1)))
    with pytest.raises(ArchiveError, match="'sub-01/eeg/big.eeg': holds more data than"):
        extract_archive(archive, tmp_path / "out")
    assert not (tmp_path / "out").exists()


def test_label_names_the_archive_in_messages(tmp_path):
    archive = BROKEN_ARCHIVES[0].build(tmp_path)
    with pytest.raises(ArchiveError, match=r"^site-a session 3\.zip: entry "):
        extract_archive(archive, tmp_path / "out", label="site-a session 3.zip")


# --- destination ----------------------------------------------------------------------------


def test_destination_that_holds_files_is_not_touched(tmp_path):
    archive = tmp_path / "good.tar"
    _pack(_write_dataset(tmp_path / "source"), archive, "tar")
    (tmp_path / "out").mkdir()
    (tmp_path / "out" / "keep.txt").write_text("mine")
    with pytest.raises(FileExistsError):
        extract_archive(archive, tmp_path / "out")
    assert [p.name for p in (tmp_path / "out").iterdir()] == ["keep.txt"]


def test_empty_destination_folder_is_filled_or_left_empty(tmp_path):
    archive = tmp_path / "good.tar"
    _pack(_write_dataset(tmp_path / "source"), archive, "tar")
    (tmp_path / "filled").mkdir()
    extract_archive(archive, tmp_path / "filled")
    assert (tmp_path / "filled" / "dataset_description.json").is_file()
    (tmp_path / "refused").mkdir()
    with pytest.raises(ArchiveError):
        extract_archive(BROKEN_ARCHIVES[0].build(tmp_path), tmp_path / "refused")
    assert list((tmp_path / "refused").iterdir()) == []


# --- round trips ----------------------------------------------------------------------------


@pytest.mark.parametrize("kind", ["zip", "tar", "tar.gz"])
def test_round_trip_gives_identical_bytes(kind, tmp_path):
    source = _write_dataset(tmp_path / "source")
    archive = tmp_path / "upload.bin"  # the format is told by content, not by this name
    _pack(source, archive, kind)
    written = extract_archive(archive, tmp_path / "out" / "dataset")
    assert _tree(tmp_path / "out" / "dataset") == _tree(source)
    assert sorted(p.relative_to(tmp_path / "out" / "dataset").as_posix() for p in written) == \
        sorted(_tree(source)[0])
    assert list_files(tmp_path / "out" / "dataset") == \
        sorted(name for name in _tree(source)[0] if not name.startswith("."))


def test_dot_slash_prefixes_are_accepted(tmp_path):
    archive = tmp_path / "dotted.tar"
    with tarfile.open(archive, "w") as tar:
        tar.add(_write_dataset(tmp_path / "source"), arcname=".")
    extract_archive(archive, tmp_path / "out")
    assert _tree(tmp_path / "out") == _tree(tmp_path / "source")


@pytest.mark.parametrize("kind", ["zip", "tar.gz"])
def test_single_top_folder_around_the_dataset_is_stripped(kind, tmp_path):
    source = _write_dataset(tmp_path / "wrapper" / "site-a-upload")
    archive = tmp_path / f"wrapped.{kind}"
    if kind == "zip":
        _zip_folder(source, archive, top="site-a-upload/")
    else:
        with tarfile.open(archive, "w:gz") as tar:
            tar.add(source, arcname="site-a-upload")
    written = extract_archive(archive, tmp_path / "out")
    assert _tree(tmp_path / "out") == _tree(source)
    assert all(not p.relative_to(tmp_path / "out").as_posix().startswith("site-a-upload")
               for p in written)


def test_single_top_folder_without_a_dataset_inside_is_kept(tmp_path):
    _small_tar(tmp_path / "notes.tar", ["notes/day-1.txt", "notes/day-2.txt"])
    extract_archive(tmp_path / "notes.tar", tmp_path / "out")
    assert sorted(_tree(tmp_path / "out")[0]) == ["notes/day-1.txt", "notes/day-2.txt"]


# --- packing --------------------------------------------------------------------------------


def _packed_bytes(folder):
    sink = io.BytesIO()
    pack_folder(folder, sink)
    return sink.getvalue()


def test_packing_is_deterministic_whatever_the_times_and_modes(tmp_path):
    folder = _write_dataset(tmp_path / "source")
    first = _packed_bytes(folder)
    for path in folder.rglob("*"):
        os.utime(path, (1_700_000_000, 1_700_000_000))
        path.chmod(0o700 if path.is_dir() else 0o600)
    assert _packed_bytes(folder) == first
    with tarfile.open(fileobj=io.BytesIO(first)) as tar:
        members = tar.getmembers()
    names = [m.name for m in members]
    assert names == sorted(names, key=lambda name: name.split("/"))
    assert {(m.mtime, m.uid, m.gid, m.uname, m.gname) for m in members} == {(0, 0, 0, "", "")}
    assert {m.mode for m in members if m.isdir()} == {0o755}
    assert {m.mode for m in members if m.isfile()} == {0o644}


@pytest.mark.parametrize(("make", "member", "words"), [
    (lambda root: os.symlink("/etc/passwd", root / "sub-01" / "passwords.tsv"),
     "sub-01/passwords.tsv", "symbolic link"),
    (lambda root: os.mkfifo(root / "sub-01" / "stream"), "sub-01/stream", "special file"),
    (lambda root: (root / "PARTICIPANTS.tsv").write_text("x"), "participants.tsv", "case"),
])
def test_packing_refuses_what_unpacking_would(make, member, words, tmp_path):
    folder = _write_dataset(tmp_path / "source")
    (folder / "sub-01").mkdir(exist_ok=True)
    make(folder)
    with pytest.raises(ArchiveError) as refused:
        _packed_bytes(folder)
    assert f"'{member}'" in str(refused.value) and words in str(refused.value)


# --- random names ---------------------------------------------------------------------------

TRICKY_PIECES = ["..", ".", "/", "\\", "C:", ":", "\x00", "\n", "a", "A", "\u00e9", "e\u0301",
                 "sub-01", "dataset_description.json", " ", "~", "\u0130"]
MEMBER_NAMES = st.one_of(st.text(max_size=30),
                         st.lists(st.sampled_from(TRICKY_PIECES), max_size=8).map("".join))


def _archive_with_names(archive, kind, names):
    if kind == "zip":
        with zipfile.ZipFile(archive, "w") as zf:
            for name in names:
                zf.writestr(name, b"x")
        return
    with tarfile.open(archive, "w:gz" if kind == "tar.gz" else "w",
                      format=tarfile.PAX_FORMAT) as tar:
        for name in names:
            info = tarfile.TarInfo(name)
            info.size = 1
            tar.addfile(info, io.BytesIO(b"x"))


@pytest.mark.filterwarnings("ignore:Duplicate name:UserWarning")
@settings(max_examples=300, deadline=None)
@given(names=st.lists(MEMBER_NAMES, min_size=1, max_size=4),
       kind=st.sampled_from(["zip", "tar", "tar.gz"]))
def test_random_member_names_never_escape_the_destination(names, kind):
    if kind == "zip":
        assume(all(name.split("\x00")[0] for name in names))  # zipfile cannot write an empty name
    with tempfile.TemporaryDirectory() as box:
        box = Path(box)
        archive = box / "upload"
        _archive_with_names(archive, kind, names)
        destination = box / "out" / "dataset"
        try:
            written = extract_archive(archive, destination)
        except ArchiveError:
            assert not destination.exists()
            written = []
        inside = destination.resolve()
        for path in written:
            assert path.resolve().is_relative_to(inside) and path.resolve() != inside
            assert path.is_file()
        for folder, _, filenames in os.walk(box):
            for name in filenames:
                path = Path(folder) / name
                assert path == archive or path.resolve().is_relative_to(inside)


# --- memory ---------------------------------------------------------------------------------


@pytest.mark.parametrize("kind", ["zip", "tar.gz"])
def test_a_100_mb_member_unpacks_in_flat_memory(kind, tmp_path):
    """The member is a sparse file of zeros, packed by the libraries in chunks; zeros also make
    the decompressor's bursts as large as they can be."""
    member = tmp_path / "big.eeg"
    with open(member, "wb") as sparse:
        sparse.truncate(100 * MIB)
    archive = tmp_path / f"big.{kind}"
    if kind == "zip":
        with zipfile.ZipFile(archive, "w", zipfile.ZIP_DEFLATED, compresslevel=1) as zf:
            zf.write(member, "sub-01/eeg/big.eeg")
    else:
        with tarfile.open(archive, "w:gz", compresslevel=1) as tar:
            tar.add(member, "sub-01/eeg/big.eeg")
    tracemalloc.start()
    try:
        extract_archive(archive, tmp_path / "out", limits=ExtractLimits(max_ratio=5000))
        _, peak_bytes = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    assert peak_bytes < 10 * MIB
    assert (tmp_path / "out" / "sub-01" / "eeg" / "big.eeg").stat().st_size == 100 * MIB
