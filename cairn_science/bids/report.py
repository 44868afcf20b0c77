"""What a validation run returns: problems, de-identification findings and the recording index."""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import asdict, dataclass, field
from typing import TYPE_CHECKING

if TYPE_CHECKING:
    from .readers import JsonDocument, Table


@dataclass
class Problem:
    """One thing wrong with the upload: which file, which line or field, what to do.

    ``path`` is relative to the dataset root (POSIX); ``line`` is 1-based with the header of a
    table as line 1; ``field`` is a table column or a JSON key; ``code`` is a short stable
    name of the kind of problem, for programs.
    """

    path: str
    message: str
    line: int | None = None
    field: str | None = None
    code: str = ""


class RefusedFile(ValueError):
    """A file Cairn will not read (or follow); ``problems`` name the file, line and field,
    and say what to do."""

    def __init__(self, problems: Iterable[Problem]):
        self.problems = list(problems)
        super().__init__("; ".join(f"{p.path}: {p.message}" for p in self.problems))


@dataclass
class Finding:
    """Something in a file that may identify a person or date a recording.

    ``kind`` is "identifier" (names, birth dates, contact details, free text about the
    person) or "measurement_date" (when the recording was made).
    """

    path: str
    kind: str
    field: str
    detail: str
    line: int | None = None


@dataclass
class BlockInfo:
    """One workload block: a stretch of a recording with one condition and one rating."""

    onset_s: float
    duration_s: float | None
    condition: str = ""
    rating: int | None = None
    level: str | None = None


@dataclass
class RecordingInfo:
    """Index entry of one EEG data file, with its blocks.

    Header facts (``sfreq_hz``, ``n_channels``, ``channel_names``, ``duration_s``) come from the
    data file when it was read (``header_read``), otherwise from the sidecars.
    ``condition``/``rating``/``level`` repeat the single block of one-block recordings.
    """

    path: str
    participant: str
    session: str
    task: str
    run: str
    sfreq_hz: float | None
    n_channels: int | None
    duration_s: float | None
    power_line_hz: float | None
    condition: str = ""
    rating: int | None = None
    level: str | None = None
    acquisition: str = ""
    data_format: str = ""
    sha256: str = ""
    header_read: bool = False
    channel_names: list = field(default_factory=list)
    blocks: list = field(default_factory=list)


@dataclass
class Report:
    """Errors (the upload is refused), warnings (accepted, worth fixing) and the index."""

    errors: list = field(default_factory=list)
    warnings: list = field(default_factory=list)
    recordings: list = field(default_factory=list)
    findings: list = field(default_factory=list)
    bids_version: str = ""

    @property
    def ok(self) -> bool:
        return not self.errors

    def error(self, path: str, message: str, line: int | None = None,
              field: str | None = None, code: str = "") -> None:
        self.errors.append(Problem(path, message, line, field, code))

    def warn(self, path: str, message: str, line: int | None = None,
             field: str | None = None, code: str = "") -> None:
        self.warnings.append(Problem(path, message, line, field, code))

    def add(self, severity: str, path: str, message: str, line: int | None = None,
            field: str | None = None, code: str = "") -> None:
        """Add a problem as "error" or "warning"."""
        target = self.errors if severity == "error" else self.warnings
        target.append(Problem(path, message, line, field, code))

    def absorb(self, source: Report | JsonDocument | Table) -> None:
        """Take over the errors and warnings a reader collected (``source.errors/.warnings``)."""
        self.errors.extend(source.errors)
        self.warnings.extend(source.warnings)

    def as_dict(self) -> dict:
        return {
            "errors": [asdict(p) for p in self.errors],
            "warnings": [asdict(p) for p in self.warnings],
            "recordings": [asdict(r) for r in self.recordings],
            "deidentification": [asdict(f) for f in self.findings],
            "bids_version": self.bids_version,
        }

