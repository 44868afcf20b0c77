"""Cross-check of Cairn's view of a dataset with pybids' index of the same folder.

Two independent readers of the file names must agree on the participants, sessions, tasks,
runs and EEG data files; a difference points at a naming corner that one of them gets wrong.
"""

from __future__ import annotations

import os
from pathlib import Path

from .names import EEG_DATA_EXTENSIONS, check_path, is_eeg_data, walk_dataset

ENTITY_NAMES = {"sub": "subject", "ses": "session", "task": "task", "run": "run",
                "acq": "acquisition"}


def cairn_view(root: str | os.PathLike) -> dict:
    """Participants, sessions, tasks, runs and EEG data files (with entities) by Cairn."""
    checks = [check_path(path) for path in walk_dataset(root).files]
    subject_files = [check for check in checks if check.ok and check.path.startswith("sub-")]
    data = {check.path: check.entities for check in checks if is_eeg_data(check)}
    return {
        "subjects": {check.entities["sub"] for check in subject_files if "sub" in check.entities},
        "sessions": {check.entities["ses"] for check in subject_files if "ses" in check.entities},
        "tasks": {check.entities["task"] for check in subject_files if "task" in check.entities},
        "runs": {int(check.entities["run"]) for check in subject_files
                 if "run" in check.entities},
        "data_files": data,
    }


def pybids_view(root: str | os.PathLike) -> dict:
    """The same facts from ``bids.BIDSLayout(root, validate=False)``."""
    import bids

    root = Path(root).resolve()
    layout = bids.BIDSLayout(root, validate=False)
    files = layout.get(datatype="eeg", suffix="eeg",
                       extension=list(EEG_DATA_EXTENSIONS))
    data = {}
    for item in files:
        entities = item.get_entities()
        data[Path(item.path).resolve().relative_to(root).as_posix()] = {
            short: str(int(entities[long]) if long == "run" else entities[long])
            for short, long in ENTITY_NAMES.items() if long in entities
        }
    return {
        "subjects": set(layout.get_subjects()),
        "sessions": set(layout.get_sessions()),
        "tasks": set(layout.get_tasks()),
        "runs": {int(run) for run in layout.get_runs()},
        "data_files": data,
    }


def pybids_agreement(root: str | os.PathLike) -> list:
    """Differences between pybids' index and Cairn's, as sentences (empty when they agree)."""
    ours, theirs = cairn_view(root), pybids_view(root)
    differences = []
    for key in ("subjects", "sessions", "tasks", "runs"):
        only_ours = sorted(map(str, ours[key] - theirs[key]))
        only_theirs = sorted(map(str, theirs[key] - ours[key]))
        if only_ours:
            differences.append(f"{key} only Cairn sees: {', '.join(only_ours)}")
        if only_theirs:
            differences.append(f"{key} only pybids sees: {', '.join(only_theirs)}")
    our_files, their_files = ours["data_files"], theirs["data_files"]
    for path in sorted(set(our_files) - set(their_files)):
        differences.append(f"data file only Cairn indexes: {path}")
    for path in sorted(set(their_files) - set(our_files)):
        differences.append(f"data file only pybids indexes: {path}")
    for path in sorted(set(our_files) & set(their_files)):
        mine = {key: str(int(value)) if key == "run" else value
                for key, value in our_files[path].items() if key in ENTITY_NAMES}
        if mine != their_files[path]:
            differences.append(f"{path}: Cairn reads {mine}, pybids reads {their_files[path]}")
    return differences
