"""Data-file headers: EDF/BDF and BrainVision structure read by hand, facts read by mne-bids.

The hand-written readers catch what mne accepts silently (a truncated EDF is read as a
shorter recording) and feed the de-identification checks; the recording's facts (sampling
rate, channels, duration) come from ``mne_bids.read_raw_bids``, so that what Cairn accepts
is what mne-bids reads. Names a header gives are followed only through
:mod:`cairn_science.bids.companions`, which keeps them inside the recording's folder.
"""

import hashlib
import re
from dataclasses import dataclass
from pathlib import Path

from .companions import CompanionError, brainvision_text, companion_files
from .report import RefusedFile

CHUNK_BYTES = 1 << 20
EDF_FIXED_HEADER_BYTES = 256
EDF_SIGNAL_HEADER_BYTES = 256
# Byte widths of the per-signal header fields, in file order (EDF specification).
EDF_SIGNAL_FIELDS = (
    ("label", 16), ("transducer", 80), ("physical_dimension", 8), ("physical_min", 8),
    ("physical_max", 8), ("digital_min", 8), ("digital_max", 8), ("prefiltering", 80),
    ("samples_per_record", 8), ("reserved", 32),
)
BDF_VERSION = b"\xffBIOSEMI"
BRAINVISION_SAMPLE_BYTES = {"INT_16": 2, "INT_32": 4, "IEEE_FLOAT_32": 4}


class HeaderError(Exception):
    """A data file whose header cannot be used; the message says what is wrong."""


def sha256_of(path):
    """Hex SHA-256 of a file, read in 1 MB chunks."""
    digest = hashlib.sha256()
    with open(path, "rb") as handle:
        while chunk := handle.read(CHUNK_BYTES):
            digest.update(chunk)
    return digest.hexdigest()


@dataclass
class EdfHeader:
    """The parts of an EDF/BDF header that Cairn checks (EDF and EDF+ specification)."""

    format: str
    patient: str
    recording: str
    startdate: str
    starttime: str
    header_bytes: int
    reserved: str
    n_records: int
    record_duration_s: float
    labels: list
    samples_per_record: list

    @property
    def bytes_per_sample(self):
        return 3 if self.format == "BDF" else 2

    @property
    def is_plus(self):
        return self.reserved.startswith(("EDF+", "BDF+"))

    def expected_size(self):
        record = sum(self.samples_per_record) * self.bytes_per_sample
        return self.header_bytes + self.n_records * record


def _ascii(raw):
    return raw.decode("latin-1").strip()


def read_fixed_edf_header(path):
    """The first 256 bytes of an EDF/BDF file as fields; raises HeaderError."""
    with open(path, "rb") as handle:
        head = handle.read(EDF_FIXED_HEADER_BYTES)
    if not head:
        raise HeaderError("is empty (0 bytes); upload the recording itself")
    if len(head) < EDF_FIXED_HEADER_BYTES:
        raise HeaderError(f"is {len(head)} bytes long, too short to hold an EDF/BDF header "
                          f"({EDF_FIXED_HEADER_BYTES} bytes); upload the complete file")
    if head[:8] == BDF_VERSION:
        fmt = "BDF"
    elif head[:8] == b"0       ":
        fmt = "EDF"
    else:
        raise HeaderError("does not start like an EDF or BDF file (the first 8 bytes are "
                          f"{head[:8]!r}); check that it was exported as EDF/BDF")
    return fmt, head


def _number(text, what, kind=int):
    try:
        return kind(text)
    except ValueError:
        raise HeaderError(f"header field '{what}' holds {text!r}, not a number; the file is "
                          "damaged or not EDF/BDF") from None


def read_edf_header(path):
    """Parse an EDF/BDF header (fixed part and signal part); raises HeaderError."""
    fmt, head = read_fixed_edf_header(path)
    n_signals = _number(_ascii(head[252:256]), "number of signals")
    header_bytes = _number(_ascii(head[184:192]), "number of header bytes")
    expected_header = EDF_FIXED_HEADER_BYTES + n_signals * EDF_SIGNAL_HEADER_BYTES
    if n_signals < 1 or header_bytes != expected_header:
        raise HeaderError(f"header says {n_signals} signals and {header_bytes} header bytes, "
                          f"which do not fit together ({expected_header} expected); the file "
                          "is damaged")
    with open(path, "rb") as handle:
        handle.seek(EDF_FIXED_HEADER_BYTES)
        signal_part = handle.read(n_signals * EDF_SIGNAL_HEADER_BYTES)
    if len(signal_part) < n_signals * EDF_SIGNAL_HEADER_BYTES:
        raise HeaderError("ends inside its header (signal descriptions are cut off); upload "
                          "the complete file")
    fields, offset = {}, 0
    for name, width in EDF_SIGNAL_FIELDS:
        fields[name] = [
            _ascii(signal_part[offset + i * width: offset + (i + 1) * width])
            for i in range(n_signals)
        ]
        offset += n_signals * width
    return EdfHeader(
        format=fmt,
        patient=head[8:88].decode("latin-1"),
        recording=head[88:168].decode("latin-1"),
        startdate=_ascii(head[168:176]),
        starttime=_ascii(head[176:184]),
        header_bytes=header_bytes,
        reserved=_ascii(head[192:236]),
        n_records=_number(_ascii(head[236:244]), "number of data records"),
        record_duration_s=_number(_ascii(head[244:252]), "duration of a data record", float),
        labels=fields["label"],
        samples_per_record=[
            _number(value, "samples per data record") for value in fields["samples_per_record"]
        ],
    )


def check_edf_structure(path):
    """Header problems of an EDF/BDF file as ``(severity, message)`` pairs."""
    try:
        header = read_edf_header(path)
    except HeaderError as exc:
        return [("error", str(exc))]
    problems = []
    size = Path(path).stat().st_size
    if header.n_records < 0:
        problems.append(("warning", "header leaves the number of data records open (-1), as "
                         "a recording still in progress does; close the file in the recorder "
                         "and export it again"))
        return problems
    expected = header.expected_size()
    if size < expected:
        problems.append(("error", f"is truncated: its header promises {header.n_records} data "
                         f"records ({expected} bytes in all) but the file holds {size} bytes; "
                         "upload the complete file"))
    elif size > expected:
        problems.append(("warning", f"holds {size - expected} bytes after its last data "
                         "record; they are ignored"))
    return problems


@dataclass
class BrainVisionHeader:
    """The parts of a BrainVision ``.vhdr`` file that Cairn checks."""

    data_file: str
    marker_file: str
    n_channels: int | None
    binary_format: str
    comment_lines: list


def read_vhdr(path):
    """Parse a BrainVision header (INI-like text, decoded as mne decodes it); raises
    HeaderError. The file names it gives are not checked here: open them only through
    :func:`cairn_science.bids.companions.companion_files`."""
    try:
        text = brainvision_text(Path(path).read_bytes())
    except OSError as exc:
        raise HeaderError(f"could not be opened ({exc.strerror or exc})") from None
    if not text.strip():
        raise HeaderError("is empty (0 bytes); upload the BrainVision header itself")
    if not text.startswith("Brain Vision Data Exchange Header File"):
        raise HeaderError("does not start like a BrainVision header ('Brain Vision Data "
                          "Exchange Header File ...'); export the recording again")
    section, values, comment = "", {}, []
    for number, raw_line in enumerate(text.split("\n"), start=1):
        line = raw_line.removesuffix("\r")
        stripped = line.strip()
        match = re.fullmatch(r"\[(.+)\]", stripped)
        if match:
            section = match.group(1).strip().lower()
            continue
        if section == "comment":
            comment.append((number, line))
        elif "=" in stripped and not stripped.startswith(";"):
            key, _, value = stripped.partition("=")
            values[(section, key.strip().lower())] = value.strip()
    n_channels = values.get(("common infos", "numberofchannels"))
    return BrainVisionHeader(
        data_file=values.get(("common infos", "datafile"), ""),
        marker_file=values.get(("common infos", "markerfile"), ""),
        n_channels=int(n_channels) if n_channels and n_channels.isdigit() else None,
        binary_format=values.get(("binary infos", "binaryformat"), "").upper(),
        comment_lines=comment,
    )


def check_brainvision_structure(path):
    """Problems of a BrainVision file set as ``(severity, field, message)`` triples.

    The files the header names are found through :func:`companion_files`, so a name
    leading outside the header's folder is refused before anything is opened or measured.
    """
    try:
        header = read_vhdr(path)
    except HeaderError as exc:
        return [("error", None, str(exc))]
    folder, own = Path(path).parent, Path(path).name
    try:
        companions = companion_files(folder, own)
    except CompanionError as exc:
        return [("error", problem.field, problem.message) for problem in exc.problems]
    named = {}
    for companion in companions:
        if companion.header == own:
            named.setdefault(companion.key, companion)
            if companion.name == (header.data_file if companion.key == "DataFile"
                                  else header.marker_file):
                named[companion.key] = companion
    problems = []
    for key in ("DataFile", "MarkerFile"):
        companion = named.get(key)
        if companion is None:
            problems.append(("error", key, f"names no {key}; the header must name its "
                             f"{'.eeg' if key == 'DataFile' else '.vmrk'} file"))
        elif not (folder / companion.path).is_file():
            problems.append(("error", key, f"names {key} {companion.name!r}, which is not in "
                             "the same folder; upload it or correct the name (renaming "
                             "BrainVision files also needs the names inside .vhdr and .vmrk "
                             "changed)"))
    data = named.get("DataFile")
    data_path = folder / data.path if data is not None else None
    width = BRAINVISION_SAMPLE_BYTES.get(header.binary_format)
    if data_path is not None and data_path.is_file() and header.n_channels and width:
        size = data_path.stat().st_size
        frame = header.n_channels * width
        if size == 0:
            problems.append(("error", "DataFile", f"{data.name} is empty (0 bytes); "
                             "upload the recording itself"))
        elif size % frame:
            problems.append(("error", "DataFile", f"{data.name} holds {size} bytes, not "
                             f"a whole number of samples of {header.n_channels} channels "
                             f"({frame} bytes each); the file is truncated or damaged"))
    return problems


@dataclass
class HeaderFacts:
    """What mne-bids reads from a data file."""

    sfreq_hz: float
    duration_s: float
    channel_names: list


def read_with_mne_bids(root, path, *, table_limits=None):
    """Open a data file with ``mne_bids.read_raw_bids`` (header only, no data loaded),
    through :func:`cairn_science.bids.recording.read_recording`.

    Channel-name mismatches with channels.tsv are left to Cairn's own checks, so they do
    not stop the reading. A companion file outside the recording's folder or a table past
    its limit raises :class:`~cairn_science.bids.report.RefusedFile` naming it; any other reader
    failure raises HeaderError with the reader's words.
    """
    from .recording import read_recording

    try:
        raw = read_recording(root, path, preload=False, on_ch_mismatch="warn",
                             table_limits=table_limits)
    except RefusedFile:
        raise
    except Exception as exc:  # the reader's own words say what it could not read
        raise HeaderError(f"{type(exc).__name__}: {exc}") from None
    sfreq_hz = float(raw.info["sfreq"])
    return HeaderFacts(sfreq_hz, float(raw.n_times / sfreq_hz), list(raw.ch_names))
