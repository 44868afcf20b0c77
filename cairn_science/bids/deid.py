"""De-identification: find what may identify a participant or date a recording, and scrub it.

Looks at the EDF/BDF header's patient and recording fields (bytes 8-88 and 88-168) and its
start date (bytes 168-176), the comment section of BrainVision headers, the New Segment date
of BrainVision markers, ``acq_time`` in scans/sessions tables, and participants.tsv columns
that hold names, birth dates or contact details. :func:`scrub_dataset` rewrites those places
in the files and keeps everything else byte for byte.
"""

from __future__ import annotations

import json
import os
import re
from pathlib import Path

from .companions import CompanionError, companion_files
from .headers import (
    BrainVisionHeader,
    EdfHeader,
    HeaderError,
    read_edf_header,
    read_fixed_edf_header,
    read_vhdr,
)
from .names import walk_dataset
from .readers import Table, read_json, read_tsv, split_tsv_line
from .report import Finding

ANONYMOUS_PATIENT = "X X X X"
ANONYMOUS_STARTDATE = "01.01.85"
ANONYMOUS_STARTTIME = "00.00.00"
EDF_MONTHS = ("JAN", "FEB", "MAR", "APR", "MAY", "JUN", "JUL", "AUG", "SEP", "OCT", "NOV",
              "DEC")

EMAIL = re.compile(r"[\w.+-]+@[\w-]+(?:\.[\w-]+)+")
FULL_DATE = re.compile(
    r"\b(?:(?:19|20)\d\d[-/.](?:0?[1-9]|1[0-2])[-/.](?:0?[1-9]|[12]\d|3[01])"
    r"|(?:0?[1-9]|[12]\d|3[01])[-/.](?:0?[1-9]|1[0-2])[-/.](?:19|20)\d\d"
    r"|\d\d-(?:" + "|".join(EDF_MONTHS) + r")-\d{4})\b",
    re.IGNORECASE,
)
PHONE = re.compile(r"^\+?[\d ()/.-]{9,}$")
PERSON_NAME = re.compile(r"^[A-Z][a-z'\u00c0-\u024f]+(?:[ -][A-Z][a-z'\u00c0-\u024f]+)+$")
LABELLED_VALUE = re.compile(
    r"\b(?P<label>(?:patient|subject|participant|proband)(?:\s*(?:name|id|code|number))?"
    r"|(?:full|first|last|given|family|middle|sur)?\s*name"
    r"|date\s*of\s*birth|birth\s*date|birthday|dob|born"
    r"|e-?mail|phone|telephone|mobile|address)"
    r"\s*[:=]\s*(?P<value>\S.*)$",
    re.IGNORECASE,
)
PSEUDONYM = re.compile(r"^(?:sub-)?[0-9a-zA-Z]+$|^X$|^n/a$|^-$")
IDENTIFIER_COLUMNS = frozenset({
    "name", "firstname", "lastname", "surname", "givenname", "familyname", "fullname",
    "middlename", "patientname", "subjectname", "participantname", "initials",
    "birthdate", "dateofbirth", "dob", "birthday",
    "email", "emailaddress", "mail", "phone", "phonenumber", "telephone", "tel", "mobile",
    "cellphone", "address", "streetaddress", "street", "postcode", "postalcode", "zipcode",
    "zip", "ssn", "socialsecuritynumber", "nationalid", "mrn", "medicalrecordnumber",
    "hospitalnumber", "insurancenumber",
})
MEASUREMENT_DATE_COLUMNS = ("acq_time",)
HEADER_EXTENSIONS = (".edf", ".bdf", ".vhdr")
EDF_MINIMUM_BYTES = 256
SUBJECT_IN_NAME = re.compile(r"(?:^|_)sub-(?P<label>[0-9a-zA-Z+]+)")
# Labels whose value may be a study pseudonym (sub-01, P07) rather than an identifier.
PSEUDONYM_LABELS = frozenset({"subject", "participant", "proband", "subject id",
                              "participant id", "proband id", "subject code"})


def _unknown(value):
    return value in ("", "X")


def _is_pseudonym(value, participant):
    return value in (participant, f"sub-{participant}") if participant else False


def edf_findings(path: str, header: EdfHeader, *, participant: str = "") -> list[Finding]:
    """Findings in an EDF/BDF header (parsed with :func:`headers.read_edf_header`)."""
    findings = []
    patient = header.patient.split()
    recording = header.recording.split()
    if header.is_plus and len(patient) >= 4:
        code, _sex, birthdate, name = patient[:4]
        if not _unknown(code) and not _is_pseudonym(code, participant):
            findings.append(Finding(path, "identifier", "patient code",
                                    f"patient field holds the code {code!r}"))
        if not _unknown(birthdate):
            findings.append(Finding(path, "identifier", "patient birthdate",
                                    f"patient field holds the birth date {birthdate}"))
        if not _unknown(name):
            findings.append(Finding(path, "identifier", "patient name",
                                    f"patient field holds the name {name!r}"))
        if len(patient) > 4:
            findings.append(Finding(path, "identifier", "patient additional",
                                    "patient field holds further text "
                                    f"{' '.join(patient[4:])!r}"))
    elif patient and not all(_unknown(part) or _is_pseudonym(part, participant)
                             for part in patient):
        findings.append(Finding(path, "identifier", "patient",
                                f"patient field holds free text {header.patient.strip()!r}"))
    if recording and recording[0] == "Startdate":
        # EDF+ subfields after "Startdate": date, admin code, technician, equipment, more.
        padded = recording + ["X"] * 5
        admin_code, technician, extra = padded[2], padded[3], recording[5:]
        if not _unknown(admin_code):
            findings.append(Finding(path, "identifier", "recording admin code",
                                    f"recording field holds the investigation code "
                                    f"{admin_code!r}"))
        if not _unknown(technician):
            findings.append(Finding(path, "identifier", "recording technician",
                                    f"recording field holds the technician {technician!r}"))
        if extra:
            findings.append(Finding(path, "identifier", "recording additional",
                                    f"recording field holds further text {' '.join(extra)!r}"))
    elif recording:
        findings.append(Finding(path, "identifier", "recording",
                                f"recording field holds free text "
                                f"{header.recording.strip()!r}"))
    dated = [f"start date {header.startdate} {header.starttime}"] if (
        header.startdate != ANONYMOUS_STARTDATE) else []
    if len(recording) >= 2 and recording[0] == "Startdate" and not _unknown(recording[1]):
        dated.append(f"recording field Startdate {recording[1]}")
    if dated:
        findings.append(Finding(path, "measurement_date", "startdate",
                                "header gives the " + " and ".join(dated)))
    return findings


def _line_looks_identifying(text):
    labelled = LABELLED_VALUE.search(text)
    if labelled:
        value = labelled.group("value").strip()
        label = labelled.group("label").strip()
        if not (PSEUDONYM.match(value) and label.lower() in PSEUDONYM_LABELS):
            return f"a value for {label!r}"
    if EMAIL.search(text):
        return "an e-mail address"
    if FULL_DATE.search(text):
        return "a full date"
    return None


def vhdr_findings(path: str, header: BrainVisionHeader) -> list[Finding]:
    """Findings in the comment section of a BrainVision header."""
    findings = []
    for line, text in header.comment_lines:
        reason = _line_looks_identifying(text)
        if reason:
            findings.append(Finding(path, "identifier", "Comment",
                                    f"comment line holds {reason}: {text.strip()!r}", line))
    return findings


NEW_SEGMENT = re.compile(r"^Mk\d+=New Segment,[^,]*,[^,]*,[^,]*,[^,]*,(?P<date>\d{20})\s*$")


def vmrk_findings(path: str, full_path: str | os.PathLike) -> list[Finding]:
    """Measurement dates in the New Segment markers of a BrainVision marker file."""
    try:
        text = Path(full_path).read_bytes().decode("utf-8", errors="replace")
    except OSError:
        return []
    findings = []
    for line, content in enumerate(text.splitlines(), start=1):
        match = NEW_SEGMENT.match(content.strip())
        if match and set(match.group("date")) != {"0"}:
            findings.append(Finding(path, "measurement_date", "New Segment",
                                    f"New Segment marker dated {match.group('date')[:14]}",
                                    line))
    return findings


def header_files(root: str | os.PathLike) -> list[str]:
    """Every EDF, BDF and BrainVision header of the upload, including folders and files the
    BIDS checks skip (sourcedata/, .bidsignore, hidden): they are stored all the same.
    Links are left out: they are never followed (validation refuses them)."""
    root = Path(root)
    found = []
    for folder, _, names in os.walk(root):
        for name in names:
            if (name.lower().endswith(HEADER_EXTENSIONS)
                    and not os.path.islink(os.path.join(folder, name))):
                found.append((Path(folder) / name).relative_to(root).as_posix())
    return sorted(found)


def header_findings(root: str | os.PathLike, relpath: str, *,
                    companions: list | None = None) -> list[Finding]:
    """Findings in one EDF/BDF header, or in one BrainVision header and its marker file.

    Files too damaged to parse give none here; the structure checks report them.
    ``companions``: what :func:`companion_files` already gave for this header in the same
    run (the validator has it), so the header and marker are not parsed again for it.
    """
    full = Path(root) / relpath
    try:
        size = full.stat().st_size
    except OSError:
        return []
    match = SUBJECT_IN_NAME.search(full.name)
    participant = match.group("label") if match else ""
    try:
        if full.suffix.lower() in (".edf", ".bdf") and size >= EDF_MINIMUM_BYTES:
            return edf_findings(relpath, read_edf_header(full), participant=participant)
        if full.suffix.lower() == ".vhdr" and size:
            header = read_vhdr(full)
            findings = vhdr_findings(relpath, header)
            if companions is None:
                try:
                    companions = companion_files(root, relpath)
                except CompanionError:
                    return findings
            for companion in companions:
                marker = Path(root) / companion.path
                if companion.key == "MarkerFile" and marker.is_file():
                    findings += vmrk_findings(companion.path, marker)
            return findings
    except (HeaderError, OSError, ValueError):
        return []
    return []


def _column_key(name):
    return re.sub(r"[^a-z0-9]", "", name.lower())


def _value_kind(value):
    if EMAIL.fullmatch(value):
        return "e-mail addresses"
    if FULL_DATE.fullmatch(value):
        return "full dates (birth dates?)"
    if PHONE.match(value) and sum(char.isdigit() for char in value) >= 9:
        return "phone or record numbers"
    if PERSON_NAME.match(value):
        return "personal names"
    return None


def identifier_columns(table: Table) -> dict[str, str]:
    """Columns of participants.tsv that look like direct identifiers: {column: reason}."""
    found = {}
    for column in table.columns:
        if column == "participant_id":
            continue
        if _column_key(column) in IDENTIFIER_COLUMNS:
            found[column] = "its name says it holds direct identifiers"
            continue
        values = [row[column].strip() for _, row in table.rows
                  if row[column].strip() not in ("", "n/a")]
        kinds = [_value_kind(value) for value in values]
        # Names are nearly unique per person; repeated capitalised words are categories.
        if len(set(values)) < 0.8 * len(values):
            kinds = [kind if kind != "personal names" else None for kind in kinds]
        flagged = [kind for kind in kinds if kind]
        if values and len(flagged) * 2 >= len(values):
            kind = max(set(flagged), key=flagged.count)
            found[column] = f"{len(flagged)} of {len(values)} values look like {kind}"
    return found


def participants_findings(table: Table) -> list[Finding]:
    return [
        Finding(table.path, "identifier", column, f"column {column!r}: {reason}", 1)
        for column, reason in identifier_columns(table).items()
    ]


def table_date_findings(table: Table) -> list[Finding]:
    """Measurement dates in ``acq_time`` of a scans.tsv or sessions.tsv (one per table)."""
    findings = []
    for column in MEASUREMENT_DATE_COLUMNS:
        if column not in table.columns:
            continue
        dated = [(line, row[column]) for line, row in table.rows
                 if row[column].strip() not in ("", "n/a")]
        if dated:
            line, value = dated[0]
            findings.append(Finding(table.path, "measurement_date", column,
                                    f"{len(dated)} row(s) give the time of recording, e.g. "
                                    f"{value}", line))
    return findings


def _pad(text, width=80):
    return text.encode("ascii", errors="replace")[:width].ljust(width, b" ")


def _edf_date_words(header):
    """The header's start date as an EDF+ ``dd-MMM-yyyy``, or "X"."""
    try:
        day, month, year = (int(part) for part in header.startdate.split("."))
        century = 1900 if year >= 85 else 2000
        return f"{day:02d}-{EDF_MONTHS[month - 1]}-{century + year}"
    except (ValueError, IndexError):
        return "X"


def scrub_edf(full_path: str | os.PathLike, *,
              keep_dates: bool = True) -> dict[str, tuple[str, str]]:
    """Rewrite an EDF/BDF header's patient and recording fields in place; returns the
    changes as ``{field: (before, after)}``."""
    header = read_edf_header(full_path)
    recording = header.recording.split()
    if len(recording) >= 2 and recording[0] == "Startdate":
        startdate = recording[1]
        equipment = recording[4] if len(recording) > 4 else "X"
    else:
        startdate, equipment = _edf_date_words(header), "X"
    if not keep_dates:
        startdate = "X"
    new_recording = f"Startdate {startdate} X X {equipment}"
    updates = {8: _pad(ANONYMOUS_PATIENT), 88: _pad(new_recording)}
    if not keep_dates:
        updates[168] = (ANONYMOUS_STARTDATE + ANONYMOUS_STARTTIME).encode("ascii")
    _, head = read_fixed_edf_header(full_path)
    changes = {}
    names = {8: "patient", 88: "recording", 168: "startdate"}
    with open(full_path, "r+b") as handle:
        for offset, value in updates.items():
            before = head[offset: offset + len(value)]
            if before != value:
                handle.seek(offset)
                handle.write(value)
                changes[names[offset]] = (before.decode("latin-1").strip(),
                                          value.decode("ascii").strip())
    return changes


def scrub_vhdr(full_path: str | os.PathLike,
               relpath: str) -> dict[str, tuple[list[str], list[str]]]:
    """Remove comment lines that look identifying from a BrainVision header."""
    header = read_vhdr(full_path)
    flagged = {finding.line for finding in vhdr_findings(relpath, header)}
    if not flagged:
        return {}
    lines = Path(full_path).read_bytes().split(b"\n")
    removed = [lines[number - 1].decode("utf-8", errors="replace").strip()
               for number in sorted(flagged)]
    kept = [line for number, line in enumerate(lines, start=1) if number not in flagged]
    Path(full_path).write_bytes(b"\n".join(kept))
    return {"Comment": (removed, [])}


def _drop_columns(full_path, columns):
    """Rewrite a TSV file without the given columns, keeping other bytes of each line."""
    raw = Path(full_path).read_bytes().decode("utf-8")
    bom = "\ufeff" if raw.startswith("\ufeff") else ""
    lines = raw[len(bom):].split("\n")
    header, _ = split_tsv_line(lines[0].rstrip("\r"))
    drop = {index for index, name in enumerate(header) if name.strip() in columns}
    out = []
    for line in lines:
        ending = "\r" if line.endswith("\r") else ""
        values, problem = split_tsv_line(line.rstrip("\r"))
        if problem or not line:
            out.append(line)
            continue
        kept = [_quote(value) for index, value in enumerate(values) if index not in drop]
        out.append("\t".join(kept) + ending)
    Path(full_path).write_text(bom + "\n".join(out), encoding="utf-8")


def _quote(value):
    if "\t" in value or value.startswith('"'):
        return '"' + value.replace('"', '""') + '"'
    return value


def _drop_json_keys(full_path, keys):
    document = read_json(full_path)
    if document.data is None:
        return []
    removed = [key for key in keys if key in document.data]
    if removed:
        data = {key: value for key, value in document.data.items() if key not in removed}
        Path(full_path).write_text(json.dumps(data, indent=4, ensure_ascii=False) + "\n",
                                   encoding="utf-8")
    return removed


def _scrub_table(root, relpath):
    """Drop identifier columns from participants.tsv (and its dictionary), or acq_time from
    a scans/sessions table."""
    full = Path(root) / relpath
    table = read_tsv(full, relpath=relpath)
    if not table.readable:
        return {}
    if relpath == "participants.tsv":
        columns = list(identifier_columns(table))
        dictionary = Path(root) / "participants.json"
        if columns and dictionary.is_file():
            _drop_json_keys(dictionary, columns)
    else:
        columns = [column for column in MEASUREMENT_DATE_COLUMNS if column in table.columns]
    if not columns:
        return {}
    _drop_columns(full, set(columns))
    return {"columns": (columns, [])}


def scrub_dataset(root: str | os.PathLike, *, measurement_dates: str = "keep") -> list[dict]:
    """Remove what :func:`validate_dataset` reports as identifiers, in place.

    EDF/BDF patient fields become ``X X X X`` and recording fields ``Startdate <date> X X
    <equipment>`` (EDF+ anonymous values); identifying comment lines leave BrainVision
    headers; identifier columns leave participants.tsv and participants.json. With
    ``measurement_dates="remove"`` the EDF/BDF start dates become 01.01.85 00.00.00 and
    ``acq_time`` columns leave scans/sessions tables. Returns one dict per changed file:
    ``{"path", "field", "before", "after"}``.
    """
    if measurement_dates not in ("keep", "remove"):
        raise ValueError(f"measurement_dates must be 'keep' or 'remove', got "
                         f"{measurement_dates!r}")
    keep_dates = measurement_dates == "keep"
    root = Path(root)
    tables = [path for path in walk_dataset(root).files
              if path == "participants.tsv"
              or (not keep_dates and path.endswith(("_scans.tsv", "_sessions.tsv")))]
    changes = []
    for relpath in header_files(root) + tables:
        full = root / relpath
        try:
            if relpath in tables:
                edits = _scrub_table(root, relpath)
            elif full.suffix.lower() == ".vhdr":
                edits = scrub_vhdr(full, relpath)
            else:
                edits = scrub_edf(full, keep_dates=keep_dates)
        except (HeaderError, OSError, UnicodeDecodeError) as exc:
            changes.append({"path": relpath, "field": None, "before": None, "after": None,
                            "error": f"not scrubbed: {exc}"})
            continue
        for field, (before, after) in edits.items():
            changes.append({"path": relpath, "field": field, "before": before, "after": after})
    return changes
