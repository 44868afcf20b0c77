"""A study's protocol as plain data: defaults, parsing from the edit form, and validation.

Defaults are common practice in EEG workload research (no source): a 9-point workload rating
binned 1–3 low, 4–6 moderate, 7–9 high; bands delta 0.5–4, theta 4–8, alpha 8–13, beta 13–30
and gamma 30–40 Hz inside a 0.5–40 Hz analysis pass-band. The pass-band, the feature
preparation and the quality thresholds take their defaults and limits from the science's
parameter objects (``PrepSettings``, ``QCSettings``); only what is the portal's own (channel
rule, band list, rating scale) is defined here.
"""

import copy

from cairn_science.bids.ratings import DEFAULT_SCALE
from cairn_science.params import validate
from cairn_science.qc.settings import QCSettings
from cairn_science.signal.prepare import PrepSettings, site_key

_PREP = PrepSettings()
_QC = QCSettings()

DEFAULT_PROTOCOL = {
    "tasks": ["rest", "task"],
    "conditions": ["rest", "low", "moderate", "high"],
    "rating_scale": {"name": "workload rating", "column": "workload_rating",
                     **copy.deepcopy(DEFAULT_SCALE)},
    # The column of each session's *_scans.tsv that names a recording's condition.
    "condition_column": "difficulty",
    # Where ratings live: "scans" (a column of *_scans.tsv, per recording) or "phenotype"
    # (a table under phenotype/ keyed by participant, session and block).
    "ratings": {"source": "scans", "table": ""},
    # Identifying headers or columns: "refuse" the upload, or "scrub" them and keep only the
    # original files' hashes.
    "deidentification": "refuse",
    "passband": {"l_freq_hz": _PREP.l_freq_hz, "h_freq_hz": _PREP.h_freq_hz},
    "bands": [
        {"name": "delta", "l_freq_hz": 0.5, "h_freq_hz": 4.0},
        {"name": "theta", "l_freq_hz": 4.0, "h_freq_hz": 8.0},
        {"name": "alpha", "l_freq_hz": 8.0, "h_freq_hz": 13.0},
        {"name": "beta", "l_freq_hz": 13.0, "h_freq_hz": 30.0},
        {"name": "gamma", "l_freq_hz": 30.0, "h_freq_hz": 40.0},
    ],
    # How feature sets are computed unless a request says otherwise. Channels: "common" (the
    # channels every input recording has), "present" (each recording's own; for single-site
    # work) or a list of names. An analysis rate of None means the lowest rate of the inputs.
    "features": {
        "channels": "common",
        "analysis_sfreq_hz": None,
        "notch": _PREP.notch,
        "bad_channels": _PREP.bad_channels,
        "reference": _PREP.reference,
        "window_s": _PREP.window_s,
        "overlap": _PREP.overlap,
        "band_signals": [],
        "features": None,
    },
}

QC_FIELDS = {
    "bad_channel_share_review": "share of bad channels that asks for a review (0–1)",
    "bad_channel_share_fail": "share of bad channels that fails a recording (0–1)",
    "rejected_time_share_review": "share of rejected time that asks for a review (0–1)",
    "rejected_time_share_fail": "share of rejected time that fails a recording (0–1)",
    "min_duration_s": "shortest usable recording (s)",
    "min_sfreq_hz": "lowest usable sampling rate (Hz)",
}
# Our starting thresholds (QCSettings'); each study lead sets their own.
DEFAULT_PROTOCOL["qc"] = {key: getattr(_QC, key) for key in QC_FIELDS}
#: The protocol's feature fields checked by PrepSettings' limits.
PREP_FIELDS = ("analysis_sfreq_hz", "notch", "bad_channels", "reference", "window_s",
               "overlap")


def prep_problems(values, *, prefix):
    """Problems of preparation values (a subset of PrepSettings' fields) by the science's
    limits, with paths under ``prefix``; {path: [messages]}."""
    constraints = {key: PrepSettings._parameter_constraints[key] for key in values}
    out = {}
    for problem in validate(values, constraints, prefix=prefix):
        out.setdefault(problem.field, []).append(problem.message)
    return out


def qc_problems(values, *, prefix=""):
    """Problems of quality thresholds by QCSettings' limits and order; {path: [messages]}."""
    out = {}
    for problem in validate(values, QCSettings, prefix=prefix):
        out.setdefault(problem.field, []).append(problem.message)
    return out


def default_protocol():
    return copy.deepcopy(DEFAULT_PROTOCOL)


class ProtocolError(ValueError):
    """Problems with a protocol; ``errors`` maps a field name to messages."""

    def __init__(self, errors):
        self.errors = errors
        super().__init__("; ".join(f"{k}: {m}" for k, ms in errors.items() for m in ms))


def validate_protocol(protocol):
    """Raise ProtocolError naming each field that is wrong and what is expected."""
    errors = {}

    def add(field, message):
        errors.setdefault(field, []).append(message)

    for field in ("tasks", "conditions"):
        names = protocol.get(field) or []
        if not names:
            add(field, "list at least one name")
        if len(set(names)) != len(names):
            add(field, "each name may appear only once")
        for name in names:
            if not name.replace("-", "").replace("_", "").isalnum():
                add(field, f"{name!r}: use letters, digits, '-' or '_' only")

    for field, value in (("condition_column", protocol.get("condition_column")),
                         ("rating_scale", protocol.get("rating_scale", {}).get("column"))):
        if not isinstance(value, str) or not value.replace("_", "").isalnum():
            add(field, "name the scans.tsv column (letters, digits, '_')")

    ratings = protocol.get("ratings", {})
    if ratings.get("source") not in ("scans", "phenotype"):
        add("ratings", "source must be 'scans' or 'phenotype'")
    elif ratings["source"] == "phenotype" and not str(ratings.get("table", "")).startswith(
            "phenotype/"):
        add("ratings", "name the table, e.g. 'phenotype/workload.tsv'")
    if protocol.get("deidentification") not in ("refuse", "scrub"):
        add("deidentification", "choose 'refuse' or 'scrub'")

    scale = protocol.get("rating_scale", {})
    lo, hi = scale.get("min"), scale.get("max")
    if not (isinstance(lo, int) and isinstance(hi, int) and lo < hi):
        add("rating_scale", "the scale needs whole-number minimum and maximum, minimum < maximum")
    else:
        levels = sorted(scale.get("levels", []), key=lambda lv: lv["min"])
        if not levels:
            add("rating_scale", "define at least one level, e.g. 'low 1-3'")
        expected = lo
        for level in levels:
            if level["min"] > level["max"]:
                add("rating_scale",
                    f"level {level['name']!r}: {level['min']} is above {level['max']}")
            if level["min"] != expected:
                add(
                    "rating_scale",
                    f"levels must cover {lo}–{hi} without gaps or overlaps: level "
                    f"{level['name']!r} starts at {level['min']}, expected {expected}",
                )
            expected = level["max"] + 1
        if levels and expected != hi + 1:
            add("rating_scale", f"the last level must end at the scale maximum {hi}")

    band = protocol.get("passband", {})
    l_pass, h_pass = band.get("l_freq_hz"), band.get("h_freq_hz")
    passband_problems = prep_problems({"l_freq_hz": l_pass, "h_freq_hz": h_pass},
                                      prefix="passband")
    if not passband_problems and l_pass >= h_pass:
        passband_problems = {"passband.l_freq_hz": [
            f"give a low edge below the high edge ({h_pass:g} Hz); got {l_pass:g} Hz"]}
    for field, messages in passband_problems.items():
        for message in messages:
            add(field, message)
    if passband_problems:
        l_pass = h_pass = None

    bands = protocol.get("bands", [])
    if not bands:
        add("bands", "define at least one band, e.g. 'alpha 8 13'")
    names = [b["name"] for b in bands]
    if len(set(names)) != len(names):
        add("bands", "each band name may appear only once")
    previous_high = None
    for b in sorted(bands, key=lambda b: b["l_freq_hz"]):
        if not b["l_freq_hz"] < b["h_freq_hz"]:
            add("bands", f"band {b['name']!r}: low edge {b['l_freq_hz']} Hz must be below "
                         f"high edge {b['h_freq_hz']} Hz")
        if l_pass is not None and (b["l_freq_hz"] < l_pass or b["h_freq_hz"] > h_pass):
            add("bands", f"band {b['name']!r} ({b['l_freq_hz']}–{b['h_freq_hz']} Hz) lies outside "
                         f"the pass-band {l_pass}–{h_pass} Hz")
        if previous_high is not None and b["l_freq_hz"] < previous_high:
            add("bands", f"band {b['name']!r} overlaps the band below it")
        previous_high = b["h_freq_hz"]

    qc = protocol.get("qc", {})
    if not isinstance(qc, dict):
        add("qc", "give the quality thresholds as an object")
    else:
        for field, messages in qc_problems(qc, prefix="qc").items():
            for message in messages:
                add(field, message)
    features = {**DEFAULT_PROTOCOL["features"], **protocol.get("features", {})}
    channels = features["channels"]
    if not (channels in ("common", "present") or (
            isinstance(channels, list) and channels and all(isinstance(c, str) for c in channels))):
        add("features.channels", "say 'common', 'present' or list channel names")
    elif isinstance(channels, list) and len({site_key(c) for c in channels}) != len(channels):
        add("features.channels", "each channel may be listed only once (T3 is T7, T4 T8, "
                                 "T5 P7, T6 P8)")
    for field, messages in prep_problems({key: features[key] for key in PREP_FIELDS},
                                         prefix="features").items():
        for message in messages:
            add(field, message)
    rate = features["analysis_sfreq_hz"]
    if "features.analysis_sfreq_hz" in errors:
        pass
    elif rate is not None and h_pass is not None and rate < 2.5 * h_pass:
        add("features.analysis_sfreq_hz",
            f"{rate} Hz is too low for a pass-band up to {h_pass} Hz; give at least "
            f"{2.5 * h_pass:g} Hz")
    if errors:
        raise ProtocolError(errors)
    return protocol


def parse_channel_rule(text):
    """'common', 'present', or a comma-separated list of channel names."""
    text = text.strip()
    if text.lower() in ("common", "present"):
        return text.lower()
    return parse_names(text)


def parse_names(text):
    return [part.strip() for part in text.replace("\n", ",").split(",") if part.strip()]


def parse_levels(text):
    """Lines like 'low 1-3' → level dicts from the lowest ratings up (whatever order they
    were typed in); raises ValueError naming the line."""
    levels = []
    for number, line in enumerate(text.splitlines(), start=1):
        if not line.strip():
            continue
        try:
            name, span = line.split()
            lo, hi = (int(x) for x in span.split("-"))
        except ValueError:
            raise ValueError(f"line {number}: {line.strip()!r} — expected 'name min-max', "
                             "e.g. 'low 1-3'") from None
        levels.append({"name": name, "min": lo, "max": hi})
    return sorted(levels, key=lambda level: level["min"])  # the scale's order, as listed


def parse_bands(text):
    """Lines like 'alpha 8 13' (Hz) → band dicts; raises ValueError naming the line."""
    bands = []
    for number, line in enumerate(text.splitlines(), start=1):
        if not line.strip():
            continue
        try:
            name, lo, hi = line.split()
            bands.append({"name": name, "l_freq_hz": float(lo), "h_freq_hz": float(hi)})
        except ValueError:
            raise ValueError(f"line {number}: {line.strip()!r} — expected 'name low_Hz high_Hz', "
                             "e.g. 'alpha 8 13'") from None
    return bands


def format_levels(levels):
    return "\n".join(f"{lv['name']} {lv['min']}-{lv['max']}" for lv in levels)


def format_bands(bands):
    return "\n".join(f"{b['name']} {b['l_freq_hz']:g} {b['h_freq_hz']:g}" for b in bands)


def level_for_rating(protocol, rating):
    """The level name a rating falls in, or None outside the scale."""
    for level in protocol["rating_scale"]["levels"]:
        if level["min"] <= rating <= level["max"]:
            return level["name"]
    return None
