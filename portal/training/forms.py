"""The training form: a comparison run from a few choices, or a whole spec as JSON."""

import json

from django import forms

LEARNER_CHOICES = [
    ("lda", "linear discriminant (shrinkage)"), ("logistic", "logistic regression"),
    ("linear_svm", "linear SVM"), ("rbf_svm", "RBF SVM"), ("knn", "k nearest neighbours"),
    ("random_forest", "random forest"), ("extra_trees", "extra trees"),
    ("hist_gradient_boosting", "histogram gradient boosting"), ("mlp", "small neural network"),
]
SCHEME_CHOICES = [
    ("grouped_kfold", "k folds grouped by participant"),
    ("leave_one_participant_out", "leave one participant out"),
    ("leave_one_site_out", "leave one site out"),
    ("within_participant_time", "within participant, later windows held out (known people "
                                "only)"),
]


def _numbers(text, field):
    try:
        values = [int(v) for v in text.replace(",", " ").split()]
    except ValueError:
        raise forms.ValidationError(f"{field}: give whole numbers separated by commas") from None
    if not values or min(values) < 2:
        raise forms.ValidationError(f"{field}: each member count must be at least 2")
    return values


class TrainingForm(forms.Form):
    """A comparison run built from a few choices, or a whole spec pasted as JSON."""

    feature_set = forms.ChoiceField(label="Feature set")
    label_kind = forms.ChoiceField(choices=[("level", "workload level from the ratings"),
                                            ("condition", "condition (e.g. rest against task)")],
                                   label="What to predict")
    scheme = forms.ChoiceField(choices=SCHEME_CHOICES, label="Validation")
    n_splits = forms.IntegerField(min_value=2, max_value=20, initial=5,
                                  label="Folds (grouped k folds)")
    learners = forms.MultipleChoiceField(choices=LEARNER_CHOICES, initial=["lda", "logistic"],
                                         widget=forms.CheckboxSelectMultiple,
                                         label="Member learners (each also runs alone)")
    strategies = forms.MultipleChoiceField(choices=[("bagging", "bagging"),
                                                    ("stacking", "stacking")],
                                           initial=["bagging", "stacking"], required=False,
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
                                           "(repeated 5 × 5 grouped folds)")
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
