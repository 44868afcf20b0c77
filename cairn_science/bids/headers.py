"""Data-file headers: EDF/BDF and BrainVision structure and facts read by hand.

The hand-written readers catch what mne accepts silently (a truncated EDF is read as a
shorter recording) and feed the de-identification checks. The recording's facts (sampling
rate, channels, duration) come from :func:`read_header_facts`, which reads them as mne-bids
does (tests compare the two on real recordings and the BIDS examples) in a fraction of the
time; EEGLAB files and unusual corners are left to ``mne_bids.read_raw_bids``
(:func:`read_with_mne_bids`), so that what Cairn accepts is what mne-bids reads. Names a
header gives are followed only through :mod:`cairn_science.bids.companions`, which keeps
them inside the recording's folder.
"""

from __future__ import annotations

import hashlib
import os
import re
from dataclasses import dataclass
from pathlib import Path, PurePosixPath

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


def sha256_of(path: str | os.PathLike) -> str:
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


def read_fixed_edf_header(path: str | os.PathLike) -> tuple:
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


def read_edf_header(path: str | os.PathLike) -> EdfHeader:
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


def check_edf_structure(path: str | os.PathLike) -> list:
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


def read_vhdr(path: str | os.PathLike) -> BrainVisionHeader:
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


def check_brainvision_structure(path, *, companions: list | None = None) -> list:
    """Problems of a BrainVision file set as ``(severity, field, message)`` triples.

    The files the header names are found through :func:`companion_files`, so a name
    leading outside the header's folder is refused before anything is opened or measured.
    ``companions`` are that function's result for this header when the caller already has
    it (from any root: its files all sit in the header's folder).
    """
    try:
        header = read_vhdr(path)
    except HeaderError as exc:
        return [("error", None, str(exc))]
    folder, own = Path(path).parent, Path(path).name
    if companions is not None:
        # every companion sits in the header's folder: the same names, from that folder
        companions = [type(c)(c.header.rsplit("/", 1)[-1], c.line, c.key, c.name,
                              c.path.rsplit("/", 1)[-1]) for c in companions]
    else:
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


def read_with_mne_bids(root: str | os.PathLike, path: str, *,
                       table_limits: dict | None = None) -> HeaderFacts:
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


# --------------------------------------------------------------------------- own header facts

EDF_ANNOTATION_CHANNELS = ("EDF Annotations", "BDF Annotations")
BRAINVISION_SAMPLE_FORMATS = {"INT_16": 2, "INT_32": 4, "IEEE_FLOAT_32": 4}


def _edf_facts(path: Path) -> HeaderFacts | None:
    """EDF/BDF facts as mne 1.13's ``read_raw_edf``/``read_raw_bdf`` gives them, or None."""
    fmt, head = read_fixed_edf_header(path)
    try:
        n_signals = int(head[252:256].decode("latin-1").strip())
        header_bytes = int(head[184:192].decode("latin-1").strip())
        n_records = int(head[236:244].decode("latin-1").strip())
        record_s = float(head[244:252].decode("latin-1").strip())
    except ValueError:
        return None
    if n_signals < 1 or header_bytes != EDF_FIXED_HEADER_BYTES + n_signals * 256 \
            or n_records < 0 or not record_s > 0:
        return None
    with open(path, "rb") as handle:
        handle.seek(EDF_FIXED_HEADER_BYTES)
        part = handle.read(n_signals * EDF_SIGNAL_HEADER_BYTES)
        size = handle.seek(0, 2)
    if len(part) < n_signals * EDF_SIGNAL_HEADER_BYTES:
        return None
    # mne strips the label's bytes, then decodes them as Latin-1
    names = [part[i * 16:(i + 1) * 16].strip().decode("latin-1") for i in range(n_signals)]
    offset = n_signals * (16 + 80 + 8 + 8 + 8 + 8 + 8 + 80)
    try:
        samples = [int(part[offset + i * 8: offset + (i + 1) * 8].decode("latin-1").strip())
                   for i in range(n_signals)]
    except ValueError:
        return None
    keep = [i for i, name in enumerate(names) if name not in EDF_ANNOTATION_CHANNELS]
    kept_names = [names[i] for i in keep]
    kept_samples = [samples[i] for i in keep]
    if not keep or len(set(kept_names)) != len(kept_names) or "" in kept_names \
            or min(kept_samples) < 1:
        return None  # renamed duplicates or no signal: left to mne
    width = 3 if fmt == "BDF" else 2
    if ((size - header_bytes) // width) // sum(samples) != n_records:
        return None  # mne then counts the records from the file size
    # mne's rate is the highest of the channels other than a stim channel ('status' or
    # 'trigger', its first match each); its samples run at the highest rate of all
    lower = [name.lower() for name in kept_names]
    stim = {lower.index(name) for name in ("status", "trigger") if name in lower}
    rated = [n for i, n in enumerate(kept_samples) if i not in stim] or kept_samples
    sfreq = max(rated) * 1.0 / record_s
    n_times = n_records * max(kept_samples)
    return HeaderFacts(float(sfreq), float(n_times / sfreq), kept_names)


def _brainvision_facts(root: Path, relpath: str, companions: list) -> HeaderFacts | None:
    """BrainVision facts as mne 1.13's ``read_raw_brainvision`` gives them, or None.

    The header is decoded and parsed as mne does (its text up to ``[Comment]`` read by the
    standard library's configparser); the data file is the one :func:`companion_files`
    resolved inside the recording's folder.
    """
    import configparser

    full = Path(root, *PurePosixPath(relpath).parts)
    text = brainvision_text(full.read_bytes())
    _, _, settings = text.partition("\n")
    if settings.count("[Comment]") > 1:
        return None
    params = settings.split("[Comment]")[0]
    cfg = configparser.ConfigParser(interpolation=None)
    try:
        cfg.read_string(params)
        section = "Common Infos" if cfg.has_section("Common Infos") else "Common infos"
        if cfg.get(section, "DataFormat") != "BINARY" or cfg.get(
                section, "DataOrientation") != "MULTIPLEXED":
            return None
        width = BRAINVISION_SAMPLE_FORMATS.get(cfg.get("Binary Infos", "BinaryFormat"))
        sfreq = 1e6 / cfg.getfloat(section, "SamplingInterval")
        n_channels = cfg.getint(section, "NumberOfChannels")
        data_name = cfg.get(section, "DataFile")
        entries = cfg.items("Channel Infos")
    except (configparser.Error, ValueError, ZeroDivisionError):
        return None
    if width is None or n_channels < 1 or not sfreq > 0:
        return None
    names = [""] * n_channels
    for key, props in entries:
        number = re.findall(r"ch(\d+)", key)
        if not number or not 0 < int(number[0]) <= n_channels:
            return None
        names[int(number[0]) - 1] = props.split(",")[0].replace(r"\1", ",")
    if "" in names or len(set(names)) != len(names):
        return None  # mne names or renames such channels itself
    data = next((c for c in companions if c.header == relpath and c.key == "DataFile"
                 and c.name == data_name), None)
    if data is None:
        return None
    data_path = Path(root, *PurePosixPath(data.path).parts)
    if not data_path.is_file():
        return None
    n_samples = data_path.stat().st_size // (width * n_channels)
    return HeaderFacts(float(sfreq), float(n_samples / sfreq), names)


def read_header_facts(root: str | os.PathLike, relpath: str, *, companions: list | None = None
                      ) -> HeaderFacts | None:
    """Sampling rate, duration and channel names from the data file's own header, equal to
    what ``mne_bids.read_raw_bids`` reads (tested on the BIDS examples and real recordings).

    EDF/BDF and binary, multiplexed BrainVision are read here; None means "left to
    mne-bids": EEGLAB ``.set`` files (their header is a MATLAB structure), ASCII or
    vectorized BrainVision, duplicate or empty channel names, or an EDF record count that
    disagrees with the file size (mne then counts records from the size). ``companions``
    are the data file's resolved :func:`companion_files` (computed when not given), so a
    name a header gives is followed only inside the recording's folder. Structure problems
    (truncation, wrong size) are :func:`check_edf_structure`'s and
    :func:`check_brainvision_structure`'s to report.
    """
    root = Path(root)
    relpath = PurePosixPath(relpath).as_posix()
    extension = PurePosixPath(relpath).suffix.lower()
    try:
        if extension in (".edf", ".bdf"):
            return _edf_facts(Path(root, *PurePosixPath(relpath).parts))
        if extension == ".vhdr":
            if companions is None:
                companions = companion_files(root, relpath)
            return _brainvision_facts(root, relpath, companions)
    except (HeaderError, OSError, UnicodeDecodeError):
        return None
    return None
