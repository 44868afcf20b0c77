"""The training form: a comparison run from a few choices, or a whole spec as JSON.

The learner and scheme lists, their labels and the defaults come from the science's tables
(``LEARNERS``, ``SCHEME_LABELS``, ``Scheme``); the spec the form builds is checked by the
science's spec check, whose problems land on the form's fields.
"""

import json

from django import forms

from cairn_science.learning.learners import learner_choices
from cairn_science.learning.spec import (
    ENSEMBLES,
    STATISTICS_DEFAULTS,
    SpecError,
    TrainingSpec,
)
from cairn_science.learning.validation import SCHEME_LABELS, Scheme

#: Which form field shows a problem of a spec path (form mode); others go above the form.
FIELD_FOR = {"validation.scheme": "scheme", "validation.n_splits": "n_splits",
             "label.kind": "label_kind", "comparison.learners": "learners",
             "comparison.strategies": "strategies", "comparison.members": "members",
             "normalisation.participant": "normalisation",
             "normalisation.site_standardise": "site_standardise",
             "statistics.permutations": "permutations", "seed": "seed"}


def _numbers(text, field):
    try:
        return [int(v) for v in text.replace(",", " ").split()]
    except ValueError:
        raise forms.ValidationError(f"{field}: give whole numbers separated by commas") from None


class TrainingForm(forms.Form):
    """A comparison run built from a few choices, or a whole spec pasted as JSON."""

    feature_set = forms.ChoiceField(label="Feature set")
    label_kind = forms.ChoiceField(choices=[("level", "workload level from the ratings"),
                                            ("condition", "condition (e.g. rest against task)")],
                                   label="What to predict")
    scheme = forms.ChoiceField(label="Validation")
    n_splits = forms.IntegerField(label="Folds (grouped k folds)")
    learners = forms.MultipleChoiceField(initial=["lda", "logistic"],
                                         widget=forms.CheckboxSelectMultiple,
                                         label="Member learners (each also runs alone)")
    strategies = forms.MultipleChoiceField(choices=[(name, name) for name in ENSEMBLES],
                                           initial=list(ENSEMBLES), required=False,
                                           widget=forms.CheckboxSelectMultiple,
                                           label="Ensembles")
    members = forms.CharField(initial="5, 10", label="Member counts",
                              help_text="e.g. 5, 10, 25")
    normalisation = forms.ChoiceField(
        choices=[("none", "none"), ("baseline", "each participant's resting baseline"),
                 ("mean", "each participant's own mean")], label="Participant normalisation")
    site_standardise = forms.BooleanField(required=False,
                                          label="Standardise per site (fitted on training folds)")
    paired_test = forms.BooleanField(required=False, initial=True,
                                     label="Compare ensembles with their learners "
                                           f"(repeated {STATISTICS_DEFAULTS['paired_repeats']}"
                                           f" × {STATISTICS_DEFAULTS['paired_splits']} "
                                           "grouped folds)")
    permutations = forms.IntegerField(
        min_value=0, max_value=1000, initial=200,
        label="Block permutations for the p-value (0: none)",
        help_text="The smallest p n permutations can give is 1/(n + 1): 200 allow 0.005. "
                  "Each permutation repeats the choice among all models, so it costs up to "
                  "one fit per model and fold.")
    per_site = forms.BooleanField(required=False, label="Also release a model per site")
    seed = forms.IntegerField(initial=0, label="Seed")
    spec_json = forms.CharField(required=False, widget=forms.Textarea(attrs={"rows": 6}),
                                label="Or paste a whole spec (JSON)",
                                help_text="Overrides every choice above; format in the README.")

    def __init__(self, *args, feature_sets, **kwargs):
        super().__init__(*args, **kwargs)
        self.fields["feature_set"].choices = [
            (str(fs.pk), f"set {fs.pk} ({fs.n_rows} windows)") for fs in feature_sets]
        # Read when the form is made, so that a learner added to the table is offered.
        self.fields["learners"].choices = learner_choices()
        self.fields["scheme"].choices = list(SCHEME_LABELS.items())
        defaults = Scheme()
        self.fields["scheme"].initial = defaults.name
        self.fields["n_splits"].initial = defaults.n_splits

    def clean(self):
        """The spec checked by the science (without the feature table, which the service
        adds); each problem on the field it concerns."""
        data = super().clean()
        if self.errors:
            return data
        try:
            spec = self.spec()
        except forms.ValidationError as exc:
            self.add_error("spec_json" if data.get("spec_json", "").strip() else "members",
                           exc)
            return data
        try:
            TrainingSpec.from_dict(spec)
        except SpecError as exc:
            self.add_spec_errors(exc.errors)
        return data

    def add_spec_errors(self, errors):
        """Put a spec's problems ({path: [messages]}) on the form: on the pasted spec when
        there is one, else on the field that made the value (or above the form)."""
        pasted = bool((self.data.get("spec_json") or "").strip())
        for path, messages in errors.items():
            field = "spec_json" if pasted else FIELD_FOR.get(path)
            for message in messages:
                if field and field in self.fields and not pasted:
                    self.add_error(field, message)
                else:
                    self.add_error(field if pasted else None, f"{path}: {message}")

    def spec(self):
        data = self.cleaned_data
        if data.get("spec_json", "").strip():
            try:
                spec = json.loads(data["spec_json"])
            except json.JSONDecodeError as exc:
                raise forms.ValidationError(f"spec: not valid JSON (line {exc.lineno}, column "
                                            f"{exc.colno}): {exc.msg}") from None
            return spec
        return {
            "feature_set": int(data["feature_set"]),
            "label": {"kind": data["label_kind"]},
            "validation": {"scheme": data["scheme"], "n_splits": data["n_splits"]},
            "comparison": {"strategies": data.get("strategies") or [],
                           "learners": data["learners"],
                           "members": _numbers(data["members"], "member counts")},
            "normalisation": {"participant": data["normalisation"],
                              "site_standardise": bool(data.get("site_standardise"))},
            "statistics": {"paired_test": bool(data.get("paired_test")),
                           "permutations": data["permutations"]},
            "release": {"pooled": True, "per_site": bool(data.get("per_site"))},
            "seed": data["seed"],
        }
