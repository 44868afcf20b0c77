import json

from django import forms

from cairn_science.signal.prepare import PrepSettings
from portal.studies.protocol import parse_channel_rule, prep_problems


def _limits(name):
    return PrepSettings._parameter_constraints[name][0].describe().capitalize() + "."


class FeatureSetForm(forms.Form):
    """A request for a feature set: which sites' newest versions, and what differs from the
    study's defaults (empty fields keep them)."""

    sites = forms.MultipleChoiceField(widget=forms.CheckboxSelectMultiple,
                                      label="Sites (each site's newest dataset version)")
    channels = forms.CharField(
        required=False, label="Channels",
        help_text="'common', 'present' or names separated by commas; empty keeps the study's "
                  "choice.")
    window_s = forms.FloatField(required=False, label="Window length (s)",
                                help_text=_limits("window_s"))
    overlap = forms.FloatField(required=False, label="Window overlap (share of a window)",
                               help_text=_limits("overlap"))
    bad_channels = forms.ChoiceField(
        required=False, label="Channels marked bad",
        choices=[("", "as the study says"), ("interpolate", "interpolate"),
                 ("drop", "leave out")])
    reference = forms.ChoiceField(
        required=False, label="Reference",
        choices=[("", "as the study says"), ("average", "average"),
                 ("as_recorded", "as recorded")])
    band_signals = forms.MultipleChoiceField(
        required=False, widget=forms.CheckboxSelectMultiple,
        label="Also compute signal features on these band-filtered signals")
    features = forms.MultipleChoiceField(
        required=False, widget=forms.CheckboxSelectMultiple,
        label="Features (none ticked: all of them)")
    extra = forms.CharField(
        required=False, widget=forms.Textarea(attrs={"rows": 3}),
        label="Feature parameters (JSON, optional)",
        help_text='e.g. {"approximate_entropy": {"m": 2, "r": 0.2}}')

    def __init__(self, *args, sites, bands, features, **kwargs):
        super().__init__(*args, **kwargs)
        self.fields["sites"].choices = [(s.slug, s.name) for s in sites]
        self.fields["band_signals"].choices = [(b["name"], b["name"]) for b in bands]
        self.fields["features"].choices = features

    def clean(self):
        """Window length and overlap by the science's limits (PrepSettings), on their
        fields."""
        data = super().clean()
        given = {key: data[key] for key in ("window_s", "overlap")
                 if data.get(key) is not None}
        for field, messages in prep_problems(given, prefix="").items():
            for message in messages:
                self.add_error(field, message)
        return data

    def clean_extra(self):
        text = self.cleaned_data.get("extra", "").strip()
        if not text:
            return {}
        try:
            value = json.loads(text)
        except json.JSONDecodeError as exc:
            raise forms.ValidationError(f"not valid JSON (line {exc.lineno}, column "
                                        f"{exc.colno}): {exc.msg}") from None
        if not isinstance(value, dict) or not all(isinstance(v, dict) for v in value.values()):
            raise forms.ValidationError('give an object of objects, e.g. {"sample_entropy": '
                                        '{"m": 2}}')
        return value

    def overrides(self):
        data = self.cleaned_data
        out = {"preprocessing": {}, "features": {}}
        if data.get("channels", "").strip():
            out["channels"] = parse_channel_rule(data["channels"])
        for key in ("window_s", "overlap"):
            if data.get(key) is not None:
                out["preprocessing"][key] = data[key]
        for key in ("bad_channels", "reference"):
            if data.get(key):
                out["preprocessing"][key] = data[key]
        if data.get("band_signals"):
            out["features"]["band_signals"] = list(data["band_signals"])
        if data.get("features"):
            out["features"]["features"] = list(data["features"])
        if data.get("extra"):
            out["features"]["params"] = data["extra"]
        return out
