"""Model releases outside the portal: the feature specification, the model card, the
release archive, loading a release safely, and predicting from a new BIDS recording.

A release is one archive (``release-N.zip`` as downloaded) holding ``model.skops`` (the
fitted scikit-learn pipeline), ``features.json`` (every parameter needed to compute the
model's inputs, the trusted types and the model's sha256), ``model-card.md`` and
``requirements.txt`` (the pinned packages it was made with). Loading never unpickles:
``skops.io.loads`` is given the exact list of types the release declares, and the model's
sha256 is checked first.
"""

from __future__ import annotations

import hashlib
import io
import json
import os
import zipfile
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import TYPE_CHECKING

from cairn_science.bids.recording import read_recording

if TYPE_CHECKING:
    import numpy as np
    import pandas as pd
    from sklearn.base import BaseEstimator

FORMAT = "cairn-release-1"
#: What the science package needs to load a release and predict (pyproject.toml's
#: dependencies; a test keeps them equal). The archive pins these and what they pull in.
SCIENCE_DEPENDENCIES = ("numpy", "scipy", "pandas", "pyarrow", "mne", "mne-bids", "numba",
                        "llvmlite", "scikit-learn", "skops", "joblib", "threadpoolctl")
ARCHIVE_MEMBERS = ("features.json", "model-card.md", "model.skops", "requirements.txt")
MAX_MEMBER_BYTES = 1 << 30


def feature_specification(*, feature_set_params: Mapping, columns: Sequence[str],
                          labels: Sequence[str], label: Mapping, normalisation: Mapping,
                          site_stats: Mapping | None, model_sha256: str, trusted: Sequence[str],
                          caution: str) -> dict:
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
    if summary.get("mean") is None:
        return "undefined"
    sd = summary.get("sd")
    return f"{summary['mean']:.3f} ± {sd:.3f} SD" if sd is not None else f"{summary['mean']:.3f}"


def _number(value, digits=3):
    return "undefined" if value is None else f"{value:.{digits}f}"


def _scheme_text(scheme):
    from cairn_science.learning.validation import SCHEME_WORDS

    return (f"{SCHEME_WORDS.get(scheme['scheme'], scheme['scheme'])}"
            + (f", {scheme.get('n_splits')} folds × {scheme.get('n_repeats', 1)} repeat(s)"
               if scheme["scheme"] == "grouped_kfold" else ""))


def _scores_text(scores):
    """One model's validation in words: per fold with spread, pooled with its interval."""
    per_fold = scores["per_fold"]
    return (f"Balanced accuracy per fold {_fmt(per_fold['balanced_accuracy'])} over "
            f"{per_fold['balanced_accuracy']['n']} folds; accuracy per fold "
            f"{_fmt(per_fold['accuracy'])}; macro-F1 per fold {_fmt(per_fold['macro_f1'])}; "
            f"Cohen's kappa per fold {_fmt(per_fold['kappa'])}. Pooled over folds: balanced "
            f"accuracy {_number(scores['pooled']['balanced_accuracy'])} (95% interval by "
            f"bootstrap over participants {_number(scores['ci']['low'])}–"
            f"{_number(scores['ci']['high'])}); chance level "
            f"{_number(scores['chance']['balanced_accuracy'])}.")


def permutation_text(test: Mapping | None) -> str:
    """The permutation p-value in words, with the smallest p its count allows and, when the
    model was chosen among several, the p-value that ignores the choice."""
    if not test:
        return "No permutation test was asked for."
    n = test["n_permutations"]
    text = (f"Block permutation test ({n} permutations of whole blocks' labels): p = "
            f"{test['p_value']:.4f}; the smallest p {n} permutations allow is 1/({n} + 1) = "
            f"{test.get('min_p_value', 1 / (n + 1)):.4f}.")
    if test.get("selection") == "best":
        text += (f" Every permutation repeated the choice of the best of {test['n_models']} "
                 "models, so this p accounts for the choice; the chosen model alone, ignoring "
                 f"the choice, would give p = {test['naive_p_value']:.4f}.")
    elif test.get("selection") == "named":
        text += " The model was named in the spec: no choice among models was made."
    return text


def selection_text(selection: Mapping | None) -> str:
    """How the model was chosen, in words."""
    if not selection:
        return ""
    if selection["how"] == "named":
        return "The model was named in the spec: no selection among models happened."
    if selection["how"] == "only":
        return "The run had one model: no selection among models happened."
    ties = selection["no_measurable_difference"]
    text = (f"Chosen for the highest balanced accuracy per fold among "
            f"{selection['n_compared']} models compared on the same folds. ")
    if ties:
        return text + (f"No measurable difference from {len(ties)} of them ("
                       f"{', '.join(ties)}): the corrected resampled t-test (Nadeau & Bengio, "
                       "Holm-adjusted) does not support the lead at p < 0.05.")
    return text + ("Its lead over each of them is supported by the corrected resampled t-test "
                   "(Nadeau & Bengio, Holm-adjusted p < 0.05).")


def _evaluation_sections(scores, site):
    """The card's evaluation: exactly this model's (pooled, or a site-only model's own, or
    none), and for a site-only model the pooled model's, labelled as such."""
    kind = scores.get("evaluation", "pooled")
    scheme = scores["scheme"]
    sections = {}
    if kind == "pooled":
        sections["Evaluation"] = (
            f"Validation: {_scheme_text(scheme)}. {_scores_text(scores)} "
            f"{permutation_text(scores.get('permutation'))} "
            f"{selection_text(scores.get('selection'))}").strip()
    elif kind == "site_only":
        sections["Evaluation"] = (
            f"This model's own evaluation, trained and tested on {site} only: validation "
            f"{_scheme_text(scheme)} on {site}'s windows alone ({len(scores['folds'])} "
            f"fold(s) over {site}'s participants). {_scores_text(scores)} No permutation test "
            "of its own.")
    else:
        sections["Evaluation"] = (
            f"No evaluation of its own: {scores['no_evaluation']}. The scores below are the "
            "pooled model's, not this model's.")
    if kind != "none":
        sections["Evaluation/Per site"] = "; ".join(
            f"{s}: balanced accuracy {_number(v['balanced_accuracy'])} on {v['n']} held-out "
            "windows" for s, v in sorted(scores["per_site"].items())) or "one site"
    if "pooled_model" in scores:
        other = scores["pooled_model"]
        sections["Evaluation/The pooled model, not this one"] = (
            f"For comparison only: the pooled model of the same run ({other['model']}, trained "
            f"on every site), validation {_scheme_text(other['scheme'])}. "
            f"{_scores_text(other)}")
    return sections


def _scheme_warning(scores):
    """The run page's warning for a validation that did not test new people (this model's
    or, quoted on the card, the pooled model's), followed by a space; else ""."""
    from cairn_science.learning.validation import warning_of

    for item in (scores, scores.get("pooled_model") or {}):
        scheme = item.get("scheme")
        warning = warning_of(scheme.get("scheme") if isinstance(scheme, dict) else scheme)
        if warning:
            return f"{warning} "
    return ""


def model_card(estimator: BaseEstimator, *, name: str, kind: str, training: Mapping,
               scores: Mapping, caution: str, trusted: Sequence[str],
               site: str | None = None) -> str:
    """The model card as Markdown (skops' card support)."""
    from skops import card

    from cairn_science.learning.spec import LABEL_KIND_WORDS
    from cairn_science.qc.verdict import VERDICT_WORDS

    c = card.Card(estimator, template=None)
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
            f"{', '.join(VERDICT_WORDS.get(v, v) for v in training['qc_verdicts'])}. Label: "
            f"{LABEL_KIND_WORDS.get(training['label']['kind'], training['label']['kind'])}"
            + (f" mapped by {json.dumps(training['label'].get('map'))}"
               if training['label'].get('map') else "")
            + f". Feature set {training['feature_set']}, training run "
              f"{training['training_run']}."),
        **_evaluation_sections(scores, site),
        "Cautions": _scheme_warning(scores) + caution + " Scores were measured on the "
                    "consortium's participants and equipment; they may not hold for other "
                    "people, amplifiers or tasks.",
        "How to load": (
            "Install requirements.txt and the cairn-science package, then "
            "`cairn_science.release.load('release-N.zip')` (the archive as downloaded) checks the "
            "sha256 in features.json and loads with `skops.io.loads(..., "
            f"trusted={json.dumps(trusted)})` — review this list before trusting it. "
            "`predict` and `predict_proba` take a BIDS recording; see the README."),
    })
    return c.render()


#: Where pip finds PyTorch's CPU-only wheels (versions like 2.13.0+cpu); from memory of
#: PyTorch's install instructions.
TORCH_CPU_INDEX = "https://download.pytorch.org/whl/cpu"


def bundle(files: Mapping[str, bytes], *, requirements: Sequence[str]) -> bytes:
    """One zip archive of a release's files (``{name: bytes}``) and its requirements list;
    byte-identical for identical inputs (sorted names, fixed timestamps). A CPU build of
    PyTorch (a ``+cpu`` version) is not on PyPI: the list then names PyTorch's CPU index."""
    index = ""
    if any("+cpu" in line for line in requirements):
        index = (f"# PyTorch's CPU builds come from its own index (PyPI has none):\n"
                 f"--extra-index-url {TORCH_CPU_INDEX}\n")
    members = {**files, "requirements.txt": (
        "# What this release was made with. Install into a fresh environment:\n"
        "#   pip install -r requirements.txt\n"
        "#   pip install --no-deps \"cairn-science @ git+<the portal's repository>\"\n"
        + index + "\n".join(requirements) + "\n").encode()}
    buffer = io.BytesIO()
    with zipfile.ZipFile(buffer, "w") as archive:
        for name in sorted(members):
            info = zipfile.ZipInfo(name, date_time=(1980, 1, 1, 0, 0, 0))
            info.compress_type = zipfile.ZIP_DEFLATED
            info.external_attr = 0o644 << 16
            archive.writestr(info, members[name])
    return buffer.getvalue()


def release_requirements(dependencies: Sequence[str] = SCIENCE_DEPENDENCIES) -> list[str]:
    """``name==version`` for each dependency as installed here and everything it pulls in
    (markers evaluated for this interpreter, no extras), sorted: what a release was made
    with."""
    from importlib import metadata

    from packaging.requirements import Requirement
    from packaging.utils import canonicalize_name

    pinned, todo = {}, list(dependencies)
    while todo:
        key = canonicalize_name(todo.pop())
        if key in pinned:
            continue
        dist = metadata.distribution(key)
        pinned[key] = f"{dist.metadata['Name']}=={dist.version}"
        for text in dist.requires or []:
            requirement = Requirement(text)
            if requirement.marker is None or requirement.marker.evaluate({"extra": ""}):
                todo.append(requirement.name)
    return [pinned[key] for key in sorted(pinned)]


def _folder_file(folder, name):
    """``name`` in a folder, or the one file saved as ``release-N-<name>`` (each file as
    downloaded on its own)."""
    exact = folder / name
    if exact.is_file():
        return exact
    found = sorted(folder.glob(f"release-*-{name}"))
    if len(found) == 1:
        return found[0]
    raise ValueError(f"{folder}: no {name} here" + (
        f" (several candidates: {', '.join(p.name for p in found)})" if found else "")
        + "; give the release archive (release-N.zip) as downloaded, or a folder holding "
          "model.skops and features.json")


def _release_files(path):
    """{"features.json": bytes, "model.skops": bytes} of a release archive or folder."""
    path = Path(path)
    if path.is_dir():
        return {name: _folder_file(path, name).read_bytes()
                for name in ("features.json", "model.skops")}
    if path.is_file() and zipfile.is_zipfile(path):
        with zipfile.ZipFile(path) as archive:
            members = {info.filename: info for info in archive.infolist()}
            out = {}
            for name in ("features.json", "model.skops"):
                if name not in members:
                    raise ValueError(f"{path}: the archive holds no {name}; download the "
                                     "release archive again from the portal")
                if members[name].file_size > MAX_MEMBER_BYTES:
                    raise ValueError(f"{path}: {name} declares {members[name].file_size} "
                                     f"bytes, more than a release holds ({MAX_MEMBER_BYTES})")
                out[name] = archive.read(name)
            return out
    raise ValueError(f"{path}: not a release archive (zip) or folder; give the path of "
                     "release-N.zip as downloaded from the portal")


def load(path: str | os.PathLike) -> tuple[BaseEstimator, dict]:
    """(estimator, specification) of a release: the archive as downloaded (release-N.zip) or
    a folder of its files. Refuses a model whose sha256 differs from the specification's and
    any type the specification does not list as trusted."""
    import skops.io

    files = _release_files(path)
    try:
        spec = json.loads(files["features.json"].decode("utf-8"))
    except (UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise ValueError(f"{path}: features.json is not valid JSON ({exc})") from None
    if not isinstance(spec, dict) or spec.get("format") != FORMAT:
        raise ValueError(f"{path}: features.json is not a {FORMAT} specification")
    model = files["model.skops"]
    if hashlib.sha256(model).hexdigest() != spec["model"]["sha256"]:
        raise ValueError(f"{path}: model.skops's sha256 does not match features.json; the "
                         "file was changed or belongs to another release")
    trusted = spec["model"]["trusted_types"]
    unknown = sorted(set(skops.io.get_untrusted_types(data=model)) - set(trusted))
    if unknown:
        raise ValueError(f"{path}: model.skops holds types the release does not declare: "
                         f"{', '.join(unknown)}")
    from cairn_science.learning.canonical import alias_former_names

    alias_former_names(trusted)
    return skops.io.loads(model, trusted=trusted), spec


def features_for_recording(bids_file: str | os.PathLike, spec: Mapping, *,
                           bad_channels: Sequence[str] = (),
                           bad_segments: Sequence[tuple[float, float]] = (),
                           power_line_hz: float | None = None) -> pd.DataFrame:
    """The release's input columns for every window of one BIDS EEG recording
    (a pandas DataFrame with ``window_start_s`` and the columns in the model's order)."""
    import mne
    import mne_bids
    import pandas as pd

    from cairn_science.features.pipeline import recording_part

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


_REFERENCE_NEEDED = {
    "baseline": (
        "this release references each participant's features to their own resting baseline "
        "(normalisation 'baseline', as in training): pass baseline_file= the participant's "
        "resting recording (a BIDS EEG data file) or baseline_windows= the features of their "
        "rest windows (a DataFrame from features_for_recording)"),
    "mean": (
        "this release references each participant's features to their own mean over their "
        "windows (normalisation 'mean', as in training): pass baseline_windows= the features "
        "of this participant's recordings (features_for_recording of each, concatenated; "
        "training used all of a participant's windows) or baseline_file= one recording"),
}


def participant_normalise(values: np.ndarray, reference: np.ndarray) -> np.ndarray:
    """``values`` (windows × columns) referenced to one participant's ``reference`` windows:
    minus their mean, divided by their SD (columns without spread are only centred), as the
    training data were."""
    import numpy as np

    centre = np.nanmean(reference, axis=0)
    spread = np.nanstd(reference, axis=0)
    spread = np.where(np.isfinite(spread) & (spread > 0), spread, 1.0)
    return (values - np.nan_to_num(centre)) / spread


def _reference(spec, baseline_file, baseline_windows, power_line_hz):
    """The participant's reference windows (windows × the release's columns), or None."""
    import numpy as np

    mode = spec["normalisation"].get("participant", "none")
    given = baseline_file is not None or baseline_windows is not None
    if mode == "none":
        if given:
            raise ValueError("this release does not normalise by participant (normalisation "
                             "'none'); leave baseline_file and baseline_windows out")
        return None
    if not given:
        raise ValueError(_REFERENCE_NEEDED.get(mode, f"this release normalises by participant "
                                                     f"({mode!r}); see features.json"))
    if baseline_file is not None and baseline_windows is not None:
        raise ValueError("give baseline_file or baseline_windows, not both")
    if baseline_file is not None:
        frame = features_for_recording(baseline_file, spec, power_line_hz=power_line_hz)
        return frame[spec["columns"]].to_numpy(dtype=float)
    if hasattr(baseline_windows, "columns"):
        missing = [c for c in spec["columns"] if c not in baseline_windows.columns]
        if missing:
            raise ValueError(f"baseline_windows lacks {len(missing)} of the release's columns, "
                             f"e.g. {missing[0]}; compute it with features_for_recording")
        reference = baseline_windows[spec["columns"]].to_numpy(dtype=float)
    else:
        reference = np.asarray(baseline_windows, dtype=float)
        if reference.ndim != 2 or reference.shape[1] != len(spec["columns"]):
            raise ValueError(f"baseline_windows must be windows × {len(spec['columns'])} "
                             f"columns (the release's, in order), got shape {reference.shape}")
    if reference.shape[0] == 0:
        raise ValueError("baseline_windows is empty; give at least one window")
    return reference


def _site_statistics(spec, site):
    import numpy as np

    if not spec["normalisation"].get("site_standardise"):
        if site is not None:
            raise ValueError("this release does not standardise by site; leave site out")
        return None
    stats = spec.get("site_stats") or {}
    if site not in stats:
        raise ValueError("this release standardises each site's features by that site's "
                         f"training windows: pass site= one of {', '.join(sorted(stats))}; a "
                         "recording from another site has no statistics in this release")
    sd = np.asarray(stats[site]["sd"], dtype=float)
    return (np.nan_to_num(np.asarray(stats[site]["mean"], dtype=float)),
            np.where(np.isfinite(sd) & (sd > 0), sd, 1.0))


def _inputs(release, bids_file, *, baseline_file, baseline_windows, site, **kwargs):
    """(estimator, window starts, model inputs) for one recording, normalised as in
    training."""
    estimator, spec = load(release)
    site_stats = _site_statistics(spec, site)
    reference = _reference(spec, baseline_file, baseline_windows, kwargs.get("power_line_hz"))
    frame = features_for_recording(bids_file, spec, **kwargs)
    values = frame[spec["columns"]].to_numpy(dtype=float)
    if reference is not None:
        values = participant_normalise(values, reference)
    if site_stats is not None:
        values = (values - site_stats[0]) / site_stats[1]
    from cairn_science.learning.recurrent import release_inputs

    values = release_inputs(estimator, values, frame["window_start_s"].to_numpy(dtype=float))
    return estimator, frame[["window_start_s"]].reset_index(drop=True), values


def predict(release: str | os.PathLike, bids_file: str | os.PathLike, *,
            baseline_file: str | os.PathLike | None = None,
            baseline_windows: pd.DataFrame | np.ndarray | None = None, site: str | None = None,
            **kwargs: object) -> pd.DataFrame:
    """Predicted class per window of a BIDS recording: a DataFrame (window_start_s,
    predicted). ``release`` is the archive as downloaded (or a folder of its files). A
    release that normalises by participant needs that participant's reference windows
    (``baseline_file=`` a recording or ``baseline_windows=`` feature rows); one that
    standardises by site needs ``site=``. Other keywords go to
    :func:`features_for_recording`."""
    estimator, frame, values = _inputs(release, bids_file, baseline_file=baseline_file,
                                       baseline_windows=baseline_windows, site=site, **kwargs)
    return frame.assign(predicted=estimator.predict(values))


def predict_proba(release: str | os.PathLike, bids_file: str | os.PathLike, *,
                  baseline_file: str | os.PathLike | None = None,
                  baseline_windows: pd.DataFrame | np.ndarray | None = None,
                  site: str | None = None, **kwargs: object) -> pd.DataFrame:
    """Class probabilities per window of a BIDS recording: a DataFrame (window_start_s, one
    column per class). Arguments as :func:`predict`."""
    import pandas as pd

    estimator, frame, values = _inputs(release, bids_file, baseline_file=baseline_file,
                                       baseline_windows=baseline_windows, site=site, **kwargs)
    if not hasattr(estimator, "predict_proba"):
        raise ValueError("this release's model gives no probabilities (e.g. a hard-voting "
                         "bagging); use predict")
    probabilities = pd.DataFrame(estimator.predict_proba(values),
                                 columns=[str(c) for c in estimator.classes_])
    return pd.concat([frame, probabilities], axis=1)
