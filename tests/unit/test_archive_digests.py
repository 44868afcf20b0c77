"""extract_archive(digests=...): each file's sha256, taken as it is written, equals hashlib's
sha256 of the file on disk (hashlib is the reference), for every archive kind; and a plain tar,
whose members are copied from the file by offset, is refused as strictly when it is cut short
or carries an oversized extended header. Invented bytes only (plumbing)."""

import gzip
import hashlib
import io
import random
import tarfile
import zipfile

import pytest

from cairn_science.archive import ArchiveError, ExtractLimits, extract_archive, pack_folder

MIB = 1024 * 1024


@pytest.fixture(scope="module")
def folder(tmp_path_factory):
    root = tmp_path_factory.mktemp("dataset")
    rng = random.Random(5)
    files = {
        "dataset_description.json": b'{"Name": "Digests", "BIDSVersion": "1.9.0"}\n',
        ".bidsignore": b"notes/\n",
        "sub-01/eeg/sub-01_task-rest_eeg.eeg": rng.randbytes(2 * MIB + 513),
        "sub-01/eeg/sub-01_task-rest_eeg.vhdr": rng.randbytes(512),
        "sub-01/eeg/sub-01_task-rest_events.tsv": b"",
        "notes/caf\u00e9.txt": rng.randbytes(511),
    }
    for name, data in files.items():
        (root / name).parent.mkdir(parents=True, exist_ok=True)
        (root / name).write_bytes(data)
    return root


def _expected(root):
    return {p.relative_to(root).as_posix(): hashlib.sha256(p.read_bytes()).hexdigest()
            for p in root.rglob("*") if p.is_file()}


def _pack(folder, path, kind):
    if kind == "zip":
        with zipfile.ZipFile(path, "w", zipfile.ZIP_DEFLATED) as zf:
            for file in sorted(p for p in folder.rglob("*") if p.is_file()):
                zf.write(file, f"wrapped/{file.relative_to(folder).as_posix()}")
        return path
    buffer = io.BytesIO()
    pack_folder(folder, buffer)
    path.write_bytes(gzip.compress(buffer.getvalue()) if kind == "tar.gz"
                     else buffer.getvalue())
    return path


@pytest.mark.parametrize("kind", ["tar", "tar.gz", "zip"])
def test_digests_match_the_files_written(folder, tmp_path, kind):
    archive = _pack(folder, tmp_path / f"upload.{kind}", kind)
    digests = {}
    written = extract_archive(archive, tmp_path / "out", digests=digests)
    expected = _expected(tmp_path / "out")
    assert digests == expected == _expected(folder)  # the zip's wrapping folder is unwrapped
    assert sorted(p.relative_to(tmp_path / "out").as_posix() for p in written) == sorted(digests)


def test_no_digests_unless_asked(folder, tmp_path):
    archive = _pack(folder, tmp_path / "upload.tar", "tar")
    assert len(extract_archive(archive, tmp_path / "out")) == len(_expected(folder))


@pytest.mark.parametrize("keep", [0.3, 0.6, 0.9])
def test_plain_tar_cut_inside_a_member_is_refused(folder, tmp_path, keep):
    data = _pack(folder, tmp_path / "whole.tar", "tar").read_bytes()
    with tarfile.open(tmp_path / "whole.tar") as tar:
        big = next(m for m in tar.getmembers() if m.name.endswith(".eeg"))
    cut = tmp_path / "cut.tar"
    cut.write_bytes(data[:big.offset_data + int(big.size * keep)])
    with pytest.raises(ArchiveError, match="sub-01_task-rest_eeg.eeg.*truncated"):
        extract_archive(cut, tmp_path / "out", digests={})
    assert not (tmp_path / "out").exists()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["cut.tar", "whole.tar"]


def test_plain_tar_with_a_huge_extended_header_is_refused(tmp_path):
    path = tmp_path / "pax.tar"
    with tarfile.open(path, "w", format=tarfile.PAX_FORMAT) as tar:
        info = tarfile.TarInfo("sub-01/eeg/notes.txt")
        info.size, info.pax_headers = 1, {"comment": "c" * 2_000_000}
        tar.addfile(info, io.BytesIO(b"x"))
    with pytest.raises(ArchiveError, match="tar headers for one entry"):
        extract_archive(path, tmp_path / "out")
    assert not (tmp_path / "out").exists()


def _with_copies(folder, tmp_path):
    """The dataset plus two more files holding the same bytes as its .eeg."""
    copy = tmp_path / "with-copies"
    copy.mkdir()
    for file in (p for p in folder.rglob("*") if p.is_file()):
        (copy / file.relative_to(folder)).parent.mkdir(parents=True, exist_ok=True)
        (copy / file.relative_to(folder)).write_bytes(file.read_bytes())
    data = (folder / "sub-01/eeg/sub-01_task-rest_eeg.eeg").read_bytes()
    for name in ("sub-02/eeg/sub-02_task-rest_eeg.eeg", "sub-03/eeg/sub-03_task-rest_eeg.eeg"):
        (copy / name).parent.mkdir(parents=True)
        (copy / name).write_bytes(data)
    return copy


@pytest.mark.parametrize("link", [False, True])
def test_identical_files_are_linked_only_when_asked(folder, tmp_path, link):
    source = _with_copies(folder, tmp_path)
    archive = _pack(source, tmp_path / "upload.tar", "tar")
    digests = {}
    extract_archive(archive, tmp_path / "out", digests=digests, link_duplicates=link)
    out = tmp_path / "out"
    assert digests == _expected(out) == _expected(source)
    inodes = {(out / f"sub-0{k}/eeg/sub-0{k}_task-rest_eeg.eeg").stat().st_ino
              for k in (1, 2, 3)}
    assert len(inodes) == (1 if link else 3)
    others = [p.stat().st_ino for p in out.rglob("*") if p.is_file() and p.suffix != ".eeg"]
    assert len(set(others)) == len(others)  # different contents are never linked


def test_linking_keeps_the_limits(folder, tmp_path):
    """Linked copies still count toward the unpacked size, as if written."""
    source = _with_copies(folder, tmp_path)
    archive = _pack(source, tmp_path / "upload.tar", "tar")
    total = sum(p.stat().st_size for p in source.rglob("*") if p.is_file())
    with pytest.raises(ArchiveError, match="more than the limit"):
        extract_archive(archive, tmp_path / "out", link_duplicates=True,
                        limits=ExtractLimits(max_total_bytes=total - 1))
    assert not (tmp_path / "out").exists()


def test_same_size_and_start_but_other_bytes_are_not_linked(tmp_path):
    rng = random.Random(9)
    start = rng.randbytes(200 * 1024)
    source = tmp_path / "near-copies"
    (source / "sub-01/eeg").mkdir(parents=True)
    names = ["a_eeg.eeg", "b_eeg.eeg", "c_eeg.eeg"]
    (source / "sub-01/eeg" / names[0]).write_bytes(start + b"first end")
    (source / "sub-01/eeg" / names[1]).write_bytes(start + b"other end")
    (source / "sub-01/eeg" / names[2]).write_bytes(start + b"first end")
    archive = _pack(source, tmp_path / "upload.tar", "tar")
    digests = {}
    extract_archive(archive, tmp_path / "out", digests=digests, link_duplicates=True)
    out = tmp_path / "out/sub-01/eeg"
    assert digests == _expected(tmp_path / "out") == _expected(source)
    inodes = [(out / name).stat().st_ino for name in names]
    assert inodes[0] == inodes[2] != inodes[1]
