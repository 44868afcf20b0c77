from django import forms

from cairn_science.signal.prepare import PrepSettings
from portal.studies.protocol import (
    DEFAULT_PROTOCOL,
    QC_FIELDS,
    ProtocolError,
    format_bands,
    format_levels,
    parse_bands,
    parse_channel_rule,
    parse_levels,
    parse_names,
    validate_protocol,
)


class ProtocolForm(forms.Form):
    """The protocol as a person edits it: names as lists, levels and bands one per line."""

    tasks = forms.CharField(help_text="BIDS task names, separated by commas, e.g. rest, task.")
    conditions = forms.CharField(help_text="Condition names, separated by commas.")
    condition_column = forms.CharField(help_text="Column of *_scans.tsv naming the condition.")
    rating_column = forms.CharField(help_text="Column of *_scans.tsv holding the rating.")
    ratings_source = forms.ChoiceField(
        choices=[("scans", "a column of each session's *_scans.tsv"),
                 ("phenotype", "a table under phenotype/")], label="Ratings come from")
    ratings_table = forms.CharField(required=False, label="Phenotype table",
                                    help_text="Only for ratings from phenotype/, e.g. "
                                              "phenotype/workload.tsv.")
    deidentification = forms.ChoiceField(
        choices=[("refuse", "refuse the upload and say what to remove"),
                 ("scrub", "keep a scrubbed copy; keep only the original files' hashes")],
        label="When headers or tables identify a person")
    rating_min = forms.IntegerField(label="Rating scale minimum")
    rating_max = forms.IntegerField(label="Rating scale maximum")
    levels = forms.CharField(widget=forms.Textarea(attrs={"rows": 4}),
                             help_text="One level per line: name min-max, e.g. 'low 1-3'.")
    l_freq_hz = forms.FloatField(label="Pass-band low edge (Hz)")
    h_freq_hz = forms.FloatField(label="Pass-band high edge (Hz)")
    bands = forms.CharField(widget=forms.Textarea(attrs={"rows": 6}),
                            help_text="One band per line: name low_Hz high_Hz, e.g. 'alpha 8 13'.")
    feature_channels = forms.CharField(
        label="Channels for features",
        help_text="'common' (the channels every input recording has), 'present' (each "
                  "recording's own, for single-site work) or names separated by commas.")
    feature_sfreq_hz = forms.FloatField(
        required=False, label="Analysis sampling rate (Hz)",
        help_text="Leave empty for the lowest rate among the inputs.")
    feature_notch = forms.BooleanField(required=False, label="Notch the mains frequency")
    feature_bad_channels = forms.ChoiceField(
        choices=[("interpolate", "interpolate them from a standard montage"),
                 ("drop", "leave them out (their columns stay empty)")],
        label="Channels marked bad")
    feature_reference = forms.ChoiceField(
        choices=[("average", "average of the kept channels"),
                 ("as_recorded", "as recorded")], label="Reference")
    feature_window_s = forms.FloatField(
        label="Window length (s)",
        help_text=PrepSettings._parameter_constraints["window_s"][0].describe().capitalize()
        + ".")
    feature_overlap = forms.FloatField(
        label="Window overlap (share of a window)",
        help_text=PrepSettings._parameter_constraints["overlap"][0].describe().capitalize()
        + ".")
    note = forms.CharField(required=False, max_length=300, label="Why this change?")

    def __init__(self, *args, protocol, **kwargs):
        super().__init__(*args, **kwargs)
        for key, label in QC_FIELDS.items():
            self.fields[f"qc_{key}"] = forms.FloatField(label=label[0].upper() + label[1:])
        self.earlier_features = {**DEFAULT_PROTOCOL["features"], **protocol.get("features", {})}
        if not self.is_bound:
            self.initial = self.initial_from(protocol)

    @staticmethod
    def initial_from(p):
        initial = {
            "tasks": ", ".join(p["tasks"]), "conditions": ", ".join(p["conditions"]),
            "condition_column": p["condition_column"],
            "rating_column": p["rating_scale"]["column"],
            "ratings_source": p.get("ratings", {}).get("source", "scans"),
            "ratings_table": p.get("ratings", {}).get("table", ""),
            "deidentification": p.get("deidentification", "refuse"),
            "rating_min": p["rating_scale"]["min"], "rating_max": p["rating_scale"]["max"],
            "levels": format_levels(p["rating_scale"]["levels"]),
            "l_freq_hz": p["passband"]["l_freq_hz"], "h_freq_hz": p["passband"]["h_freq_hz"],
            "bands": format_bands(p["bands"]),
        }
        initial.update({f"qc_{k}": v for k, v in p["qc"].items()})
        f = {**DEFAULT_PROTOCOL["features"], **p.get("features", {})}
        channels = f["channels"]
        initial.update({
            "feature_channels": ", ".join(channels) if isinstance(channels, list) else channels,
            "feature_sfreq_hz": f["analysis_sfreq_hz"] or "", "feature_notch": f["notch"],
            "feature_bad_channels": f["bad_channels"], "feature_reference": f["reference"],
            "feature_window_s": f["window_s"], "feature_overlap": f["overlap"],
        })
        return initial

    def clean(self):
        data = super().clean()
        if self.errors:
            return data
        try:
            levels = parse_levels(data["levels"])
        except ValueError as exc:
            self.add_error("levels", str(exc))
            return data
        try:
            bands = parse_bands(data["bands"])
        except ValueError as exc:
            self.add_error("bands", str(exc))
            return data
        protocol = {
            "tasks": parse_names(data["tasks"]),
            "conditions": parse_names(data["conditions"]),
            "condition_column": data["condition_column"].strip(),
            "ratings": {"source": data["ratings_source"],
                        "table": (data.get("ratings_table") or "").strip()},
            "deidentification": data["deidentification"],
            "rating_scale": {
                "name": "workload rating", "column": data["rating_column"].strip(),
                "min": data["rating_min"], "max": data["rating_max"], "levels": levels,
            },
            "passband": {"l_freq_hz": data["l_freq_hz"], "h_freq_hz": data["h_freq_hz"]},
            "bands": bands,
            "qc": {k: data[f"qc_{k}"] for k in QC_FIELDS},
            "features": {
                **self.earlier_features,
                "channels": parse_channel_rule(data["feature_channels"]),
                "analysis_sfreq_hz": data.get("feature_sfreq_hz"),
                "notch": bool(data.get("feature_notch")),
                "bad_channels": data["feature_bad_channels"],
                "reference": data["feature_reference"],
                "window_s": data["feature_window_s"], "overlap": data["feature_overlap"],
            },
        }
        field_for = {"rating_scale": "levels", "passband": "h_freq_hz",
                     "passband.l_freq_hz": "l_freq_hz", "passband.h_freq_hz": "h_freq_hz",
                     "ratings": "ratings_table", "features.channels": "feature_channels",
                     "features.window_s": "feature_window_s",
                     "features.overlap": "feature_overlap",
                     "features.analysis_sfreq_hz": "feature_sfreq_hz",
                     "features.notch": "feature_notch",
                     "features.bad_channels": "feature_bad_channels",
                     "features.reference": "feature_reference"}
        try:
            validate_protocol(protocol)
        except ProtocolError as exc:
            for key, messages in exc.errors.items():
                name = key.replace("qc.", "qc_", 1) if key.startswith("qc.") else field_for.get(
                    key, key)
                for message in messages:
                    self.add_error(name if name in self.fields else None, message)
        data["protocol"] = protocol
        return data
