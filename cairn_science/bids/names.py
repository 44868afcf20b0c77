"""File and folder names against the naming rules of the BIDS schema (bidsschematools).

A name is split into folders, entities (``key-value`` pairs), suffix and extension, then
compared with every schema rule for that suffix; the message explains the closest rule's
complaints. Sidecars (.json, .tsv) may sit higher in the tree and leave out entities, as
the inheritance principle allows.
"""

from __future__ import annotations

import os
import re
from dataclasses import dataclass, field
from functools import lru_cache
from pathlib import Path

from . import schema

EEG_DATA_EXTENSIONS = (".edf", ".bdf", ".vhdr", ".set")
FORMAT_WORDS = {
    "label": "letters and digits only",
    "index": "a whole number written with digits only",
}


@dataclass(frozen=True)
class NameCheck:
    """What a path is, by its name alone.

    ``kind`` is "data" (a file a rule names directly), "sidecar" (inheritable metadata),
    "top_level" (dataset_description.json, README, participants.tsv, ...), "phenotype",
    "opaque" (inside code/, sourcedata/, ...) or "unknown".
    """

    path: str
    kind: str
    ok: bool
    message: str = ""
    entities: dict = field(default_factory=dict)
    suffix: str = ""
    extension: str = ""
    datatype: str = ""

    @property
    def folder(self):
        return self.path.rpartition("/")[0]


def is_eeg_data(check: NameCheck) -> bool:
    """Whether a checked name is an EEG recording's main data file (not .vmrk/.eeg/.fdt)."""
    return (check.ok and check.kind == "data" and check.datatype == "eeg"
            and check.suffix == "eeg" and check.extension in EEG_DATA_EXTENSIONS)


def split_name(name: str) -> tuple:
    """``(stem, extension)``: the extension starts at the first dot (``.nii.gz`` stays whole)."""
    stem, dot, rest = name.partition(".")
    return stem, dot + rest


def parse_entities(stem: str) -> tuple:
    """Entities (short names, in order) and suffix of a file stem; None where a part is no
    ``key-value`` pair."""
    tokens = stem.split("_")
    pairs = []
    for token in tokens[:-1]:
        key, dash, value = token.partition("-")
        pairs.append((key, value) if dash else (token, None))
    return pairs, tokens[-1]


@lru_cache(maxsize=4096)
def _fullmatch(pattern, value):
    return re.fullmatch(pattern, value) is not None


def _label_ok(entity, value):
    return value is not None and _fullmatch(schema.entity_pattern(entity), value)


def _format_words(entity):
    spec = schema.load().objects.entities[entity]
    return FORMAT_WORDS.get(spec["format"], f"in the {spec['format']} format")


def _rule_issues(rule, pairs, suffix, folder_entities, datatype):
    """Reasons why a name breaks one rule (empty when it follows the rule)."""
    issues = []
    if rule.datatypes:
        allowed = "/, ".join(sorted(rule.datatypes)) + "/"
        if not datatype and not rule.datatype_optional:
            issues.append(f"'_{suffix}' data files belong in a {allowed} folder")
        elif datatype and datatype not in rule.datatypes:
            issues.append(f"'_{suffix}' files belong in a {allowed} folder, not {datatype}/")
    elif datatype:
        issues.append(f"'_{suffix}' files do not belong in a {datatype}/ folder")
    short_names = schema.entity_short_names()
    order = schema.entity_order()
    seen = {}
    last = -1
    out_of_order = False
    for key, value in pairs:
        if value is None:
            issues.append(f"'{key}' is not a key-value pair such as 'task-rest'")
            continue
        entity = short_names.get(key)
        if entity is None:
            issues.append(f"'{key}-' is not an entity of the BIDS standard")
            continue
        if rule.entity_level(entity) is None:
            issues.append(f"entity '{key}-' is not used in '_{suffix}' file names")
            continue
        if entity in seen:
            issues.append(f"entity '{key}-' appears twice")
            continue
        position = order.index(entity)
        if position < last:
            out_of_order = True
        last = max(last, position)
        enum = rule.entity_enum(entity)
        if enum is not None and value not in enum:
            issues.append(f"'{key}-{value}': the value must be one of {', '.join(enum)}")
        elif enum is None and not _label_ok(entity, value):
            issues.append(f"'{key}-{value}': the value must be {_format_words(entity)}")
        seen[entity] = value
    if out_of_order:
        ordered = [name for name in order if rule.entity_level(name) is not None]
        expected = ", ".join(schema.load().objects.entities[name]["name"] for name in ordered)
        issues.append(f"entities are out of order; the standard's order is {expected}")
    for entity, level, _ in rule.entities:
        if level == "required" and entity not in seen:
            key = schema.load().objects.entities[entity]["name"]
            issues.append(f"the name needs the '{key}-<value>' entity")
    for entity in schema.FOLDER_ENTITIES:
        key = schema.load().objects.entities[entity]["name"]
        in_folder = folder_entities.get(entity)
        in_name = seen.get(entity)
        if in_folder is not None and in_name is None and rule.entity_level(entity):
            issues.append(f"files in the {key}-{in_folder}/ folder must start their name "
                          f"with its '{key}-{in_folder}'")
        elif in_folder is not None and in_name is not None and in_name != in_folder:
            issues.append(f"'{key}-{in_name}' in the name differs from the folder "
                          f"{key}-{in_folder}/")
        elif in_folder is None and in_name is not None:
            issues.append(f"'{key}-{in_name}' in the name, but the file is not inside a "
                          f"{key}-{in_name}/ folder")
    return issues


def _check_entity_name(path, name, folder_entities, datatype):
    stem, extension = split_name(name)
    pairs, suffix = parse_entities(stem)
    rules = [rule for rule in schema.name_rules() if suffix in rule.suffixes]
    hint = "; rename it, or list it in .bidsignore if it is not part of the dataset"
    where = f" in the {datatype}/ folder" if datatype else ""

    def unknown(message):
        return NameCheck(path, "unknown", False, message + hint, suffix=suffix,
                         extension=extension, datatype=datatype)

    if "-" in suffix:
        return unknown(f"the name must end with a suffix such as '_eeg' before the extension, "
                       f"but ends with '{suffix}' (a dot may only start the extension)")
    if not rules and not folder_entities and not pairs:
        return unknown("is not a file the BIDS standard names at the top level of a dataset "
                       "(dataset_description.json, README, participants.tsv, ...)")
    if not rules:
        known = sorted({s for rule in schema.name_rules() for s in rule.suffixes
                        if not datatype or datatype in rule.datatypes})
        sample = ", ".join(known[:12]) + (", ..." if len(known) > 12 else "")
        return unknown(f"'_{suffix}' is not a file type the BIDS standard knows{where} "
                       f"(known: {sample})")
    if datatype and not any(datatype in rule.datatypes for rule in rules):
        homes = sorted({d for rule in rules for d in rule.datatypes})
        if homes:
            return unknown(f"'_{suffix}' files belong in a {'/, '.join(homes)}/ folder, "
                           f"not {datatype}/")
    by_extension = [
        rule for rule in rules
        if extension in rule.extensions or (".*" in rule.extensions and extension)
    ]
    if not by_extension:
        allowed = sorted({ext for rule in rules for ext in rule.extensions
                          if not ext.endswith("/")
                          and (not datatype or datatype in rule.datatypes)})
        return unknown(f"extension '{extension}' is not allowed for '_{suffix}' files{where} "
                       f"(allowed: {', '.join(allowed)})")
    best_rule, best_issues = None, None
    for rule in by_extension:
        issues = _rule_issues(rule, pairs, suffix, folder_entities, datatype)
        if best_issues is None or len(issues) < len(best_issues):
            best_rule, best_issues = rule, issues
        if not issues:
            break
    entities = {key: value for key, value in pairs if value is not None}
    if best_issues:
        return NameCheck(path, "unknown", False, "; ".join(best_issues) + hint, entities,
                         suffix, extension, datatype)
    kind = "sidecar" if best_rule.inherited else "data"
    return NameCheck(path, kind, True, "", entities, suffix, extension, datatype)


def check_path(path: str) -> NameCheck:
    """Check one path (relative to the dataset root, POSIX) against the schema's names."""
    parts = path.split("/")
    name, folders = parts[-1], parts[:-1]
    if not folders:
        paths, stems = schema.top_level_names()
        if name in paths or any(name == stem + ext for stem, exts in stems for ext in exts):
            return NameCheck(path, "top_level", True)
        return _check_entity_name(path, name, {}, "")
    if folders[0] in schema.opaque_folders():
        return NameCheck(path, "opaque", True)
    if folders[0] == "phenotype":
        stem, extension = split_name(name)
        if len(folders) == 1 and extension in (".tsv", ".json"):
            return NameCheck(path, "phenotype", True, suffix=stem, extension=extension)
        return NameCheck(path, "unknown", False,
                         "the phenotype/ folder holds only .tsv tables and their .json data "
                         "dictionaries; move or rename the file")
    folder_entities = {}
    rest = list(folders)
    for entity in schema.FOLDER_ENTITIES:
        key = schema.load().objects.entities[entity]["name"]
        if rest and rest[0].startswith(f"{key}-"):
            value = rest.pop(0)[len(key) + 1:]
            if not _label_ok(entity, value):
                return NameCheck(path, "unknown", False,
                                 f"folder '{key}-{value}': the label must be "
                                 f"{_format_words(entity)}; rename the folder")
            folder_entities[entity] = value
    if "subject" not in folder_entities:
        return NameCheck(path, "unknown", False,
                         f"folder '{folders[0]}/' is not part of a BIDS dataset (participant "
                         "folders are named sub-<label>); move it out, or list it in "
                         ".bidsignore")
    datatype = ""
    if rest:
        datatype = rest.pop(0)
        if datatype not in schema.datatypes():
            return NameCheck(path, "unknown", False,
                             f"folder '{datatype}/' is not a BIDS data type folder (EEG data "
                             "go in eeg/); move the file")
    if rest:
        return NameCheck(path, "unknown", False,
                         f"files in {datatype}/ may not sit in further folders "
                         f"({'/'.join(rest)}/); move the file up")
    return _check_entity_name(path, name, folder_entities, datatype)


def _glob_to_regex(pattern):
    out, i = [], 0
    while i < len(pattern):
        char = pattern[i]
        if pattern.startswith("**/", i):
            out.append("(?:.*/)?")
            i += 3
            continue
        if pattern.startswith("**", i):
            out.append(".*")
            i += 2
            continue
        if char == "*":
            out.append("[^/]*")
        elif char == "?":
            out.append("[^/]")
        elif char == "[":
            end = pattern.find("]", i + 1)
            if end < 0:
                out.append(re.escape(char))
            else:
                body = pattern[i + 1:end].replace("\\", "\\\\")
                if body.startswith("!"):
                    body = "^" + body[1:]
                out.append(f"[{body}]")
                i = end
        else:
            out.append(re.escape(char))
        i += 1
    return "".join(out)


class BidsIgnore:
    """Patterns of a ``.bidsignore`` file (gitignore-style globs; ``!`` re-includes)."""

    def __init__(self, lines=()):
        self.patterns = []
        for raw in lines:
            line = raw.strip()
            if not line or line.startswith("#"):
                continue
            negate = line.startswith("!")
            if negate:
                line = line[1:]
            directory_only = line.endswith("/")
            line = line.strip("/") if directory_only else line
            anchored = line.startswith("/") or "/" in line
            body = _glob_to_regex(line.lstrip("/"))
            prefix = "" if anchored else "(?:.*/)?"
            suffix = "/.*" if directory_only else "(?:/.*)?"
            self.patterns.append((re.compile(f"{prefix}{body}{suffix}\\Z"), negate))

    @classmethod
    def from_root(cls, root):
        path = Path(root) / ".bidsignore"
        try:
            return cls(path.read_text(encoding="utf-8", errors="replace").splitlines())
        except OSError:
            return cls()

    def ignores(self, path):
        ignored = False
        for regex, negate in self.patterns:
            if regex.match(path):
                ignored = not negate
        return ignored


@dataclass
class DatasetFiles:
    """Files of a dataset the checks look at, and what was left out and why.

    ``links`` are symbolic links (to files or folders): they are never followed, because
    they can lead outside the dataset, and are not among ``files``.
    """

    files: list
    ignored: list
    opaque_folders: list
    unknown_folders: list
    links: list = field(default_factory=list)


def walk_dataset(root: str | os.PathLike) -> DatasetFiles:
    """Relative POSIX paths of the dataset's files, leaving out hidden files, the folders the
    standard does not describe (code/, sourcedata/, derivatives/, ...), ``.bidsignore`` and
    symbolic links (listed apart)."""
    root = Path(root)
    ignore = BidsIgnore.from_root(root)
    files, ignored, opaque, unknown, links = [], [], [], [], []
    for dirpath, dirnames, filenames in os.walk(root):
        relative_dir = Path(dirpath).relative_to(root).as_posix()
        relative_dir = "" if relative_dir == "." else relative_dir + "/"
        kept = []
        for name in sorted(dirnames):
            relative = relative_dir + name
            if name.startswith("."):
                continue
            if os.path.islink(os.path.join(dirpath, name)):
                links.append(relative + "/")
            elif not relative_dir and name in schema.opaque_folders():
                opaque.append(relative)
            elif ignore.ignores(relative + "/") or ignore.ignores(relative):
                ignored.append(relative + "/")
            elif not relative_dir and name != "phenotype" and not name.startswith("sub-"):
                unknown.append(relative)
            else:
                kept.append(name)
        dirnames[:] = kept
        for name in sorted(filenames):
            if name.startswith("."):
                continue
            relative = relative_dir + name
            if os.path.islink(os.path.join(dirpath, name)):
                links.append(relative)
            else:
                (ignored if ignore.ignores(relative) else files).append(relative)
    return DatasetFiles(sorted(files), sorted(ignored), sorted(opaque), sorted(unknown),
                        sorted(links))
