"""Reading one stored recording back from the blob store: the version's files it needs (the
data file and the sidecars it inherits) copied into a temporary BIDS folder, then opened by
:func:`cairn_science.bids.recording.read_recording`. Shared by the quality and feature jobs
and by the signal viewer, so every reader sees the recording the same way."""

import tempfile
from contextlib import contextmanager
from pathlib import Path, PurePosixPath

from portal.datasets import blobs

DATA_SUFFIXES = {".edf", ".bdf", ".vhdr", ".vmrk", ".eeg", ".set", ".fdt"}


def recording_files(recording):
    """The version's files needed to read one recording with its sidecars (inheritance)."""
    data = PurePosixPath(recording.path)
    stem = data.name.rsplit("_", 1)[0]
    ancestors = {str(p) for p in data.parents}
    wanted = []
    for item in recording.version.files.all():
        path = PurePosixPath(item.path)
        parent = str(path.parent)
        if parent == str(data.parent):
            if path.suffix.lower() in DATA_SUFFIXES and not path.name.startswith(stem + "_"):
                continue
            wanted.append(item)
        elif parent in ancestors:
            wanted.append(item)
    return wanted


@contextmanager
def materialised(recording):
    """A temporary folder holding the recording's file and the sidecars it inherits."""
    with tempfile.TemporaryDirectory(prefix="cairn-read-") as tmp:
        root = Path(tmp)
        for item in recording_files(recording):
            blobs.copy_blob_to(item.sha256, root / item.path)
        yield root


def read_stored(recording, take=None):
    """The recording read from the blob store as the quality job reads it: the mne Raw with
    its data loaded, or, with ``take``, what ``take(raw)`` returns of the Raw opened without
    loading (called while the files exist, so it may read just the samples it needs);
    :class:`cairn_science.bids.report.RefusedFile` when refused."""
    from cairn_science.bids.recording import read_recording

    with materialised(recording) as root:
        if take is None:
            return read_recording(root, recording.path)
        return take(read_recording(root, recording.path, preload=False))
