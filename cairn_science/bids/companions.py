"""The files a data file's header names, kept inside the recording's own folder.

A BrainVision header names its data and marker files (``DataFile=``, ``MarkerFile=``), its
marker file names the data file again, and an EEGLAB ``.set`` names its ``.fdt`` (fields
``data`` and ``datfile``). mne and Cairn's own header readers open these names relative to
the header's folder, so a name that is absolute, climbs out with ``../`` or is a link
leading elsewhere would make a worker read any file of the server. :func:`companion_files`
resolves every name and refuses each one that does not stay in the recording's own folder
inside the dataset; everything that opens a recording calls it first.

Messages repeat only what the header says; they never tell whether a file outside the
folder exists, nor anything about it.
"""

from __future__ import annotations

import configparser
import os
import re
from dataclasses import dataclass
from pathlib import Path, PurePosixPath, PureWindowsPath

from .report import Problem, RefusedFile

BRAINVISION_KEYS = ("datafile", "markerfile")
KEY_NAMES = {"datafile": "DataFile", "markerfile": "MarkerFile"}
EEGLAB_FIELDS = ("data", "datfile")
MAX_SHOWN_CHARS = 120
# A key=value (or key: value) line as Python's configparser reads it, which mne uses.
INI_ENTRY = re.compile(r"^\s*(?P<key>[^=:\s][^=:]*?)\s*[=:]\s*(?P<value>.*?)\s*$")
INI_SECTION = re.compile(r"^\s*\[(?P<name>[^\]]+)\]")
LINK_OUTSIDE = "which is a link leading outside the recording's folder"


@dataclass(frozen=True)
class Companion:
    """A file named by a header: where it is named and where it is (paths from the root)."""

    header: str
    line: int | None
    key: str
    name: str
    path: str


class CompanionError(RefusedFile):
    """A header names a file outside its recording's folder; ``problems`` say where."""


def brainvision_text(raw: bytes) -> str:
    """A BrainVision header or marker file as text, decoded the way mne decodes it.

    mne reads the first line as ASCII and the rest in the ``Codepage=`` the file declares
    (ANSI meaning cp1252), else UTF-8, falling back to Latin-1; Cairn must see the same
    names that mne will open.
    """
    first, newline, rest = raw.partition(b"\n")
    codepage = "utf-8"
    declared = re.search("Codepage=(.+)", rest.decode("ascii", "ignore"))
    if declared:
        codepage = declared.group(1).strip()
    if codepage == "ANSI":
        codepage = "cp1252"
    try:
        body = rest.decode(codepage)
    except (UnicodeDecodeError, LookupError):
        body = rest.decode("latin-1")
    return first.decode("ascii", "ignore") + newline.decode("ascii") + body


def _show(name):
    text = "".join(c if c.isprintable() else ascii(c)[1:-1] for c in name)
    return "'" + (text if len(text) <= MAX_SHOWN_CHARS else text[:MAX_SHOWN_CHARS] + "...") + "'"


def _named_entries(text, keys):
    """``(line, key, value)`` of every line setting one of ``keys`` (lower case), in any
    section: more than configparser keeps, so that no spelling escapes the check."""
    found = []
    for number, line in enumerate(text.split("\n"), start=1):
        stripped = line.strip()
        if not stripped or stripped[0] in ";#" or INI_SECTION.match(stripped):
            continue
        match = INI_ENTRY.match(line)
        if match and match.group("key").strip().lower() in keys:
            found.append((number, match.group("key").strip().lower(), match.group("value")))
    return found


def _configparser_values(text, keys):
    """``(key, value)`` as mne's configparser reading of the part before [Comment] sees
    them, including values continued on indented lines; none when it cannot parse."""
    body = text.partition("\n")[2].split("[Comment]")[0]
    parser = configparser.ConfigParser(interpolation=None)
    try:
        parser.read_string(body)
    except (configparser.Error, ValueError):
        return []
    return [(key, parser.get(section, key)) for section in parser.sections()
            for key in keys if parser.has_option(section, key)]


def _references(text, keys):
    """Every distinct ``(line, key, value)`` a BrainVision file sets for ``keys``."""
    entries = _named_entries(text, keys)
    seen = {(key, value) for _, key, value in entries}
    for key, value in _configparser_values(text, keys):
        if (key, value) not in seen:
            first_line = value.split("\n", 1)[0]
            line = next((n for n, k, v in entries if k == key and v == first_line),
                        next((n for n, k, _ in entries if k == key), None))
            entries.append((line, key, value))
            seen.add((key, value))
    return entries


def _eeglab_references(full):
    """``(None, field, value)`` for the data file names an EEGLAB .set holds, read with
    scipy as mne reads it; raises ValueError when the file cannot be read."""
    import scipy.io

    try:
        variables = {name: kind for name, _, kind in scipy.io.whosmat(full)}
        found = []
        top = [name for name in EEGLAB_FIELDS if variables.get(name) == "char"]
        if top:
            content = scipy.io.loadmat(full, variable_names=top, squeeze_me=True)
            found += [(None, name, str(content[name])) for name in top]
        if "EEG" in variables:
            eeg = scipy.io.loadmat(full, variable_names=["EEG"], squeeze_me=True,
                                   struct_as_record=False)["EEG"]
            eeg = getattr(eeg, "EEG", eeg)
            for name in EEGLAB_FIELDS:
                value = getattr(eeg, name, None)
                if isinstance(value, str):
                    found.append((None, name, value))
    except Exception as exc:  # scipy's readers raise many kinds on damaged files
        raise ValueError(f"{type(exc).__name__}: {str(exc)[:200]}") from None
    return [entry for entry in found if entry[2].strip()]


def _where(line, key):
    return f"line {line}, {key}" if line else f"field {key}"


def _refusal(name, folder_full, target):
    """Why ``name`` (resolved to ``target``) is not a file of ``folder_full``, or None."""
    if "\x00" in name:
        return "which holds a NUL character"
    if (PurePosixPath(name).is_absolute() or PureWindowsPath(name).is_absolute()
            or PureWindowsPath(name).drive or name.startswith("\\")):
        return "an absolute path"
    if os.path.dirname(target) == os.path.realpath(folder_full):
        return None
    if ".." in re.split(r"[/\\]", name):
        return "which climbs out of the recording's folder with '..'"
    lexical = os.path.normpath(os.path.join(folder_full, name))
    if os.path.dirname(lexical) != os.path.normpath(folder_full):
        return "which is not in the recording's own folder"
    return LINK_OUTSIDE


def _resolve(root, header, line, key, name, *, suggestion):
    """A :class:`Companion`, or a :class:`Problem` refusing the name."""
    folder = PurePosixPath(header).parent
    folder_full = os.path.join(root, *folder.parts)
    target = None if "\x00" in name else os.path.realpath(os.path.join(folder_full, name))
    reason = _refusal(name, folder_full, target or "")
    if reason is None:
        relative = (folder / os.path.basename(target)).as_posix()
        return Companion(header, line, key, name, relative)
    shown_folder = f"{folder.as_posix()}/" if folder.parts else "the dataset's top folder"
    advice = ("replace the link with a copy of the file itself" if reason == LINK_OUTSIDE
              else f"put the file there and write its bare name, for example "
                   f"{key}={suggestion}")
    return Problem(
        header,
        f"{_where(line, key)} names {_show(name)}, {reason}. Cairn reads only files that "
        f"sit beside their header, in the recording's own folder ({shown_folder}): "
        f"{advice}", line=line, field=key, code="header.companion_outside",
    )


def _confined_folder(root, relpath):
    """A problem when the data file, or its folder, is a link leading out of the dataset."""
    root_real = os.path.realpath(root)
    full = os.path.join(root, *PurePosixPath(relpath).parts)
    folder_real = os.path.realpath(os.path.dirname(full))
    inside = os.path.commonpath([root_real, folder_real]) == root_real
    if inside and os.path.dirname(os.path.realpath(full)) == folder_real:
        return None
    return Problem(relpath, "is a link (or lies in a folder that is a link) leading outside "
                   "the recording's folder in the dataset; Cairn does not follow such links. "
                   "Replace it with a copy of the file itself", code="header.link_outside")


def _brainvision_companions(root, relpath, *, marker):
    """Companions of a .vhdr (DataFile, MarkerFile) or of a .vmrk (DataFile)."""
    full = Path(root, *PurePosixPath(relpath).parts)
    try:
        text = brainvision_text(full.read_bytes())
    except OSError:
        return [], []
    stem = PurePosixPath(relpath).stem
    keys = ("datafile",) if marker else BRAINVISION_KEYS
    found, problems = [], []
    for line, key, value in _references(text, keys):
        if not value:
            continue
        name = KEY_NAMES[key]
        suggestion = stem + (".vmrk" if key == "markerfile" else ".eeg")
        result = _resolve(root, relpath, line, name, value, suggestion=suggestion)
        (problems if isinstance(result, Problem) else found).append(result)
    return found, problems


def companion_files(root: str | os.PathLike, relpath: str) -> list[Companion]:
    """The files the header of data file ``relpath`` names, resolved inside its folder.

    Lists, for a BrainVision ``.vhdr``, its DataFile and MarkerFile lines and the DataFile
    line of that marker file; for an EEGLAB ``.set``, the ``data`` and ``datfile`` fields;
    EDF and BDF name none. Every name must resolve (links followed) to a file in the data
    file's own folder, which itself must lie inside ``root``. Whether the named file exists
    is left to the structure checks.

    Returns a list of :class:`Companion`; raises :class:`CompanionError` listing every
    name refused, each naming the header, its line (or field) and key, and what to do.
    """
    root = os.fspath(root)
    relpath = PurePosixPath(relpath).as_posix()
    outside = _confined_folder(root, relpath)
    if outside is not None:
        raise CompanionError([outside])
    extension = PurePosixPath(relpath).suffix.lower()
    found, problems = [], []
    if extension == ".vhdr":
        found, problems = _brainvision_companions(root, relpath, marker=False)
        for companion in [c for c in found if c.key == "MarkerFile"]:
            if Path(root, *PurePosixPath(companion.path).parts).is_file():
                more, refused = _brainvision_companions(root, companion.path, marker=True)
                found += more
                problems += refused
    elif extension == ".set":
        stem = PurePosixPath(relpath).stem
        try:
            references = _eeglab_references(os.path.join(root, *PurePosixPath(relpath).parts))
        except ValueError as exc:
            raise CompanionError([Problem(
                relpath, f"could not be read as an EEGLAB file to find the data file it "
                f"names ({exc}); save it again from EEGLAB", code="header.unreadable")]) from None
        for line, key, value in references:
            result = _resolve(root, relpath, line, key, value, suggestion=stem + ".fdt")
            (problems if isinstance(result, Problem) else found).append(result)
    if problems:
        raise CompanionError(problems)
    return found
