"""Model releases outside the portal: the feature specification, the model card, loading a
release safely, and predicting from a new BIDS recording.

A release folder holds ``model.skops`` (the fitted scikit-learn pipeline), ``features.json``
(every parameter needed to compute the model's inputs, the trusted types and the model's
sha256) and ``model-card.md``. Loading never unpickles: ``skops.io.load`` is given the exact
list of types the release declares, and the file's sha256 is checked first.
"""

import hashlib
import json
import os
from pathlib import Path

FORMAT = "cairn-release-1"


def feature_specification(*, feature_set_params, columns, labels, label, normalisation,
                          site_stats, model_sha256, trusted, caution):
    """Everything needed to compute a release's inputs and read its outputs (JSON-ready)."""
    return {
        "format": FORMAT,
        "preprocessing": feature_set_params["preprocessing"],
        "features": feature_set_params["features"],
        "columns": list(columns),
        "label": label, "classes": list(labels),
        "normalisation": normalisation, "site_stats": site_stats,
        "model": {"file": "model.skops", "sha256": model_sha256, "trusted_types": trusted},
        "caution": caution,
    }


def _fmt(summary):
    sd = summary.get("sd")
    return f"{summary['mean']:.3f} ± {sd:.3f} SD" if sd is not None else f"{summary['mean']:.3f}"


def _scheme_warning(scores):
    """The run page's warning for a validation that did not test new people (this model's
    or, quoted on the card, the pooled model's), followed by a space; else ""."""
    from workers.learning.validation import warning_of

    for item in (scores, scores.get("pooled_model") or {}):
        scheme = item.get("scheme")
        warning = warning_of(scheme.get("scheme") if isinstance(scheme, dict) else scheme)
        if warning:
            return f"{warning} "
    return ""


def model_card(estimator, *, name, kind, training, scores, caution, trusted, site=None):
    """The model card as Markdown (skops' card support)."""
    from skops import card

    c = card.Card(estimator, template=None)
    scheme = scores["scheme"]
    per_fold = scores["per_fold"]
    pooled = scores["pooled"]
    c.add(**{
        "Model": f"{name} ({'trained on one site' if kind == 'site_only' else 'pooled'}"
                 + (f": {site}" if site else "") + "), a scikit-learn pipeline (median "
                 "imputation, standardisation, classifier) fitted on all included windows.",
        "Intended use": "Research on mental workload with EEG within the consortium's approved "
                        "protocols: classifying windows of a recording into the workload "
                        f"classes {', '.join(training['labels'])}. " + caution,
        "Training data": (
            f"Sites: {', '.join(training['sites'])}. Participants: {training['participants']}. "
            f"Windows: {training['windows']}. Recordings with quality verdicts "
            f"{', '.join(training['qc_verdicts'])}. Label: {training['label']['kind']}"
            + (f" mapped by {json.dumps(training['label'].get('map'))}"
               if training['label'].get('map') else "")
            + f". Feature set {training['feature_set']}, training run "
              f"{training['training_run']}."),
        "Evaluation": (
            f"Validation: {scheme['scheme']}"
            + (f", {scheme.get('n_splits')} folds × {scheme.get('n_repeats', 1)} repeat(s)"
               if scheme["scheme"] == "grouped_kfold" else "")
            + f". Balanced accuracy per fold {_fmt(per_fold['balanced_accuracy'])} over "
              f"{per_fold['balanced_accuracy']['n']} folds; accuracy per fold "
              f"{_fmt(per_fold['accuracy'])}; macro-F1 per fold {_fmt(per_fold['macro_f1'])}; "
              f"Cohen's kappa per fold {_fmt(per_fold['kappa'])}. Pooled over folds: balanced "
              f"accuracy {pooled['balanced_accuracy']:.3f} (95% interval by bootstrap over "
              f"participants {scores['ci']['low']:.3f}–{scores['ci']['high']:.3f}); chance "
              f"level {scores['chance']['balanced_accuracy']:.3f}."),
        "Evaluation/Per site": "; ".join(
            f"{s}: balanced accuracy {v['balanced_accuracy']:.3f} on {v['n']} held-out windows"
            for s, v in sorted(scores["per_site"].items())) or "one site",
        "Cautions": _scheme_warning(scores) + caution + " Scores were measured on the "
                    "consortium's participants and equipment; they may not hold for other "
                    "people, amplifiers or tasks.",
        "How to load": (
            "Check the sha256 in features.json, then `skops.io.load('model.skops', "
            f"trusted={json.dumps(trusted)})` — review this list before trusting it. "
            "Or use `workers.release.load(folder)` from the cairn-science package."),
    })
    return c.render()


def sha256_of(path):
    digest = hashlib.sha256()
    with open(path, "rb") as fh:
        for chunk in iter(lambda: fh.read(1 << 20), b""):
            digest.update(chunk)
    return digest.hexdigest()


def load(folder):
    """(estimator, specification) of a release folder; refuses a file whose sha256 differs
    from the specification's and any type the specification does not list as trusted."""
    import skops.io

    folder = Path(folder)
    spec = json.loads((folder / "features.json").read_text(encoding="utf-8"))
    model_path = folder / spec["model"]["file"]
    if sha256_of(model_path) != spec["model"]["sha256"]:
        raise ValueError(f"{model_path}: sha256 does not match features.json; the file was "
                         "changed or belongs to another release")
    unknown = sorted(set(skops.io.get_untrusted_types(file=model_path))
                     - set(spec["model"]["trusted_types"]))
    if unknown:
        raise ValueError(f"{model_path} holds types the release does not declare: "
                         f"{', '.join(unknown)}")
    return skops.io.load(model_path, trusted=spec["model"]["trusted_types"]), spec


def features_for_recording(bids_file, spec, *, bad_channels=(), bad_segments=(),
                           power_line_hz=None):
    """The release's input columns for every window of one BIDS EEG recording
    (a pandas DataFrame with ``window_start_s`` and the columns in the model's order)."""
    import mne
    import mne_bids
    import pandas as pd

    from workers.bids.recording import read_recording
    from workers.features.pipeline import recording_part

    root = mne_bids.get_bids_path_from_fname(bids_file).root
    if root is None:
        raise ValueError(f"{bids_file}: not inside a BIDS dataset (sub-<label>/[ses-<label>/]"
                         "eeg/); give the path of the data file in its dataset")
    raw = read_recording(root, Path(os.path.relpath(bids_file, root)).as_posix())
    picks = mne.pick_types(raw.info, eeg=True, exclude=[])
    if power_line_hz is None:
        power_line_hz = raw.info.get("line_freq")
    part = recording_part(raw.get_data(picks=picks), sfreq_hz=raw.info["sfreq"],
                          ch_names=[raw.ch_names[i] for i in picks],
                          inputs={"bad_channels": list(bad_channels),
                                  "bad_segments": [list(s) for s in bad_segments],
                                  "blocks": [], "power_line_hz": power_line_hz},
                          params={"preprocessing": spec["preprocessing"],
                                  "features": spec["features"]})
    if part.excluded_reason:
        raise ValueError(f"{bids_file}: {part.excluded_reason}")
    frame = pd.DataFrame(part.values, columns=[c["name"] for c in part.columns])
    missing = [c for c in spec["columns"] if c not in frame.columns]
    if missing:
        raise ValueError(f"{bids_file}: cannot compute {len(missing)} input column(s) of the "
                         f"release, e.g. {missing[0]}")
    out = frame[spec["columns"]].copy()
    out.insert(0, "window_start_s", part.window_start_s)
    return out


def predict(folder, bids_file, **kwargs):
    """Predicted class per window of a recording: a DataFrame (window_start_s, predicted).
    Only for releases without participant or site normalisation (those need the person's
    own baseline or the site's statistics; apply them as features.json describes)."""
    estimator, spec = load(folder)
    if spec["normalisation"].get("participant", "none") != "none" or \
            spec["normalisation"].get("site_standardise"):
        raise ValueError("this release normalises by participant or site: compute the "
                         "features with features_for_recording, normalise as features.json "
                         "says, then call the model's predict")
    frame = features_for_recording(bids_file, spec, **kwargs)
    values = frame[spec["columns"]].to_numpy(dtype=float)
    return frame[["window_start_s"]].assign(predicted=estimator.predict(values))
