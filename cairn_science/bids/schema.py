"""Facts taken from the BIDS schema shipped in bidsschematools, loaded once per process.

Everything the checks need to know about names, sidecar fields and table columns comes from
here, so that a newer schema changes Cairn's rules without code changes.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cache, lru_cache

# Extensions of files that follow the inheritance principle: they may sit at any level of the
# tree and may leave out entities of the data files they describe.
HERITABLE_EXTENSIONS = frozenset({".tsv", ".json", ".bval", ".bvec"})
# Folders (named in the schema's subject/session rules) that carry an entity in their name.
FOLDER_ENTITIES = ("subject", "session")
EEG_SELECTORS = frozenset({'datatype == "eeg"', 'suffix == "eeg"'})


@dataclass(frozen=True)
class NameRule:
    """One way a file may be named: allowed suffixes, extensions, folders and entities.

    ``entities`` maps each allowed entity (long name) to its level ("required" or
    "optional") and, where the schema restricts it, its allowed values.
    """

    origin: str
    suffixes: frozenset
    extensions: frozenset
    datatypes: frozenset
    datatype_optional: bool
    entities: tuple
    inherited: bool

    def entity_level(self, entity):
        for name, level, _ in self.entities:
            if name == entity:
                return level
        return None

    def entity_enum(self, entity):
        for name, _, enum in self.entities:
            if name == entity:
                return enum
        return None


@lru_cache(maxsize=1)
def load() -> object:
    """The BIDS schema as bidsschematools ships it."""
    from bidsschematools import schema

    return schema.load_schema()


def version() -> str:
    """BIDS version of the loaded schema, e.g. ``"1.11.2"``."""
    return str(load().bids_version)


@lru_cache(maxsize=1)
def entity_order() -> tuple:
    """Entity long names in the order they must appear in a file name."""
    return tuple(load().rules.entities)


@lru_cache(maxsize=1)
def entity_short_names() -> dict:
    """Map of short name in file names (``acq``) to the schema's long name (``acquisition``)."""
    entities = load().objects.entities
    return {entities[name]["name"]: name for name in entities}


@cache
def entity_pattern(entity: str) -> str:
    """Regular expression (unanchored) that an entity's value must match."""
    spec = load().objects.entities[entity]
    return load().objects.formats[spec["format"]]["pattern"]


@lru_cache(maxsize=1)
def datatypes() -> frozenset:
    return frozenset(load().objects.datatypes)


@lru_cache(maxsize=1)
def opaque_folders() -> frozenset:
    """Top-level folders whose content the standard does not name (code, sourcedata, ...)."""
    raw = load().rules.directories.raw
    return frozenset(
        spec["name"] for spec in raw.values() if spec.get("opaque") and "name" in spec
    )


def _entity_spec(value):
    if isinstance(value, str):
        return value, None
    enum = value.get("enum")
    values = None
    if enum is not None:
        values = tuple(item if isinstance(item, str) else item["name"] for item in enum)
    return value["level"], values


def _rules_from(origin, rule):
    """Split one schema file rule into its data-file form and its inheritable-sidecar form."""
    extensions = set(rule["extensions"])
    main = extensions - HERITABLE_EXTENSIONS
    heritable = extensions & HERITABLE_EXTENSIONS
    entities = tuple(
        (name, *_entity_spec(rule["entities"][name]))
        for name in entity_order()
        if name in rule["entities"]
    )
    datatypes_ = frozenset(rule.get("datatypes", ()))
    suffixes = frozenset(rule["suffixes"])
    forms = []
    if main:
        forms.append(NameRule(origin, suffixes, frozenset(main), datatypes_, False, entities,
                              inherited=False))
    if heritable:
        optional = tuple((name, "optional", enum) for name, _, enum in entities)
        forms.append(NameRule(origin, suffixes, frozenset(heritable), datatypes_, True, optional,
                              inherited=True))
    return forms


@lru_cache(maxsize=1)
def name_rules() -> tuple:
    """Every entity-based naming rule of raw datasets (data files, sidecars, scans, sessions)."""
    files = load().rules.files
    rules = []
    for group_name, group in files.raw.items():
        for rule_name, rule in group.items():
            rules.extend(_rules_from(f"raw.{group_name}.{rule_name}", rule))
    for rule_name, rule in files.common.tables.items():
        if "suffixes" in rule:
            rules.extend(_rules_from(f"common.tables.{rule_name}", rule))
    return tuple(rules)


@lru_cache(maxsize=1)
def top_level_names() -> tuple:
    """Exact top-level paths and (stem, extensions) pairs the standard names."""
    files = load().rules.files.common
    paths, stems = set(), []
    for group in (files.core, files.tables):
        for rule in group.values():
            if "path" in rule:
                paths.add(rule["path"])
            elif "stem" in rule and not rule.get("datatypes"):
                stems.append((rule["stem"], frozenset(rule["extensions"])))
    return frozenset(paths), tuple(stems)


@lru_cache(maxsize=1)
def readme_names() -> tuple:
    rule = load().rules.files.common.core.README
    return tuple(rule["stem"] + extension for extension in rule["extensions"])


@lru_cache(maxsize=1)
def eeg_sidecar_fields() -> tuple:
    """Required and recommended ``*_eeg.json`` fields, from the schema's EEG sidecar rules.

    Only rule groups that apply to every EEG data file (selectors on datatype and suffix
    alone) are used; conditional groups (for example epoched recordings) are left out.
    """
    required, recommended = [], []
    for group in load().rules.sidecars.eeg.values():
        if not set(group["selectors"]) <= EEG_SELECTORS:
            continue
        for name, spec in group["fields"].items():
            level = spec if isinstance(spec, str) else spec["level"]
            if level == "required":
                required.append(name)
            elif level == "recommended":
                recommended.append(name)
    return tuple(required), tuple(recommended)


@cache
def metadata_spec(field: str) -> dict | None:
    """The schema's value definition of a JSON sidecar field (type, enum, anyOf, limits);
    built once per field (callers must not change the dict)."""
    metadata = load().objects.metadata
    return metadata[field].to_dict() if field in metadata else None


@cache
def table_rule(group: str, name: str) -> tuple:
    """A tabular-data rule, e.g. ``("eeg", "EEGChannels")``: initial and required columns."""
    rule = load().rules.tabular_data[group][name]
    columns = load().objects.columns
    initial = tuple(columns[key]["name"] for key in rule.get("initial_columns", ()))
    required = tuple(
        columns[key]["name"]
        for key, level in rule["columns"].items()
        if (level if isinstance(level, str) else level["level"]) == "required"
    )
    return initial, required


def column_enum(key: str) -> tuple | None:
    """Allowed values of a table column (e.g. ``type__channels``), or None."""
    return tuple(load().objects.columns[key].get("enum", ())) or None


def column_pattern(key: str) -> str | None:
    return load().objects.columns[key].get("pattern")
