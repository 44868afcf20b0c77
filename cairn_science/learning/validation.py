"""Outer and inner validation splits that keep a participant's windows together.

Windows cut from one recording share the participant's fingerprint (skull, electrode fit,
alpha frequency). A classifier scored on windows of people it was trained on can recognise
the person and, through the person, the label; grouping by participant (or by site) is what
makes a score say something about new people.

Schemes (``SCHEMES``):

``leave_one_participant_out``
    one fold per participant (scikit-learn ``LeaveOneGroupOut`` on participants);
``grouped_kfold``
    ``n_splits`` participant-grouped folds, repeated ``n_repeats`` times with seeds
    ``seed + repeat``: ``StratifiedGroupKFold`` when every class is seen in at least
    ``n_splits`` participants, otherwise ``GroupKFold`` (shuffled with the same seed), see
    :func:`describe_outer`;
``leave_one_site_out``
    one fold per site (``LeaveOneGroupOut`` on sites);
``within_participant_time``
    one fold of each participant's later data (time order). A participant with several
    sessions gives their latest sessions, one with several recordings (one session) their
    latest recordings, whole, about ``test_share`` of their windows; a participant with one
    recording gives the last ``test_share`` of its windows, and the windows that start less
    than two window lengths before the test part are left out, so that one window length of
    signal separates the training part from the test part (with overlapping windows,
    neighbours share samples). Not grouped: it measures recognition of known people.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import ClassVar

import numpy as np

from cairn_science.params import Integral, Interval, Options, Real, raise_for, validate

#: Every scheme in the words a page shows for it (a run known to measure known people only
#: carries its own warning beside them).
SCHEME_WORDS = {
    "leave_one_participant_out": "leave one participant out",
    "grouped_kfold": "k folds grouped by participant",
    "leave_one_site_out": "leave one site out",
    "within_participant_time": "within participant, later windows held out",
}
#: Every scheme with the few words a form shows for it (its label).
SCHEME_LABELS = {**SCHEME_WORDS, "within_participant_time":
                 SCHEME_WORDS["within_participant_time"] + " (known people only)"}
SCHEMES = tuple(SCHEME_LABELS)

_WITHIN_WARNING = (
    "Within-participant validation tests on later data of the same people the model was "
    "trained on: it measures recognition of known people, not generalisation to new people."
)
WITHIN_RULE = (
    "Split: each participant's later sessions (or, with one session, later recordings) in "
    "the order of their session, run and file name are the test part, whole; a participant "
    "with a single recording is tested on its last windows, and the windows less than one "
    "window length before them are left out, so that no training window shares a sample "
    "with a test window."
)


def warning_of(scheme_name: str) -> str:
    """The sentence a report must carry for a scheme that does not test new people, else
    "" (also for a name that is not a scheme)."""
    return f"{_WITHIN_WARNING} {WITHIN_RULE}" if scheme_name == "within_participant_time" \
        else ""


class SchemeError(ValueError):
    """The validation scheme cannot be applied to these data (names the scheme and what is
    missing)."""


@dataclass(frozen=True)
class Fold:
    """One outer fold: sorted row indices of its training and test parts (rows in neither,
    e.g. the gap of a time-ordered split, are left out of the fold)."""

    index: int
    repeat: int
    train: np.ndarray
    test: np.ndarray
    held_out: tuple


#: How a scheme's fields are called in a training spec's "validation" object.
_SPEC_KEYS = {"name": "scheme", "n_splits": "n_splits", "n_repeats": "n_repeats",
              "test_share": "test_share"}


@dataclass(frozen=True)
class Scheme:
    """A validation scheme by name, with its few parameters; these defaults and limits are
    the only ones (a training spec's "validation" object is :meth:`as_dict`)."""

    name: str = "grouped_kfold"
    n_splits: int = 5
    n_repeats: int = 1
    test_share: float = 0.25

    _parameter_constraints: ClassVar[dict] = {
        "name": [Options(SCHEMES)],
        "n_splits": [Interval(Integral, 2, None, closed="left")],
        "n_repeats": [Interval(Integral, 1, None, closed="left")],
        "test_share": [Interval(Real, 0, 1, closed="neither")],
    }

    def __post_init__(self):
        raise_for(validate(self), SchemeError)
        object.__setattr__(self, "n_splits", int(self.n_splits))
        object.__setattr__(self, "n_repeats", int(self.n_repeats))
        object.__setattr__(self, "test_share", float(self.test_share))

    def as_dict(self) -> dict:
        """The spec's "validation" object: scheme, n_splits, n_repeats, test_share."""
        return {key: getattr(self, name) for name, key in _SPEC_KEYS.items()}

    @classmethod
    def problems_of(cls, data: dict, *, prefix: str = "validation") -> list:
        """Every problem of a spec's "validation" object (paths like validation.n_splits)."""
        constraints = {key: cls._parameter_constraints[name] for name, key in _SPEC_KEYS.items()}
        return validate(data, constraints, prefix=prefix)

    @classmethod
    def from_dict(cls, data: dict) -> Scheme:
        """A scheme from a spec's "validation" object; missing keys take the defaults.
        Raises :class:`SchemeError` naming every bad key and what to give."""
        raise_for(cls.problems_of(data), SchemeError)
        names = {key: name for name, key in _SPEC_KEYS.items()}
        return cls(**{names[key]: value for key, value in data.items()})

    @property
    def warning(self) -> str:
        """A sentence for the report when the scheme does not test new people, else ""."""
        return warning_of(self.name)

    @property
    def grouped(self) -> bool:
        """True when no participant is in both the training and the test part of a fold."""
        return self.name != "within_participant_time"


# --------------------------------------------------------------------------- helpers


def _labels_array(y, field="y"):
    arr = np.asarray(y)
    if arr.ndim != 1:
        raise SchemeError(f"{field} must be one label per row (1-D), got shape {arr.shape}")
    if arr.size == 0:
        raise SchemeError(f"{field} is empty; give at least one row")
    return arr


def _ids_array(values, n_rows, field):
    if values is None:
        raise SchemeError(f"{field} is missing; give one value per row")
    arr = np.asarray(values)
    if arr.ndim != 1 or arr.shape[0] != n_rows:
        raise SchemeError(
            f"{field} must have one value per row ({n_rows}), got shape {arr.shape}")
    # Ids as strings: held_out is reported as strings and sklearn groups by equality.
    return arr.astype(str)


def _class_participant_counts(y, participants):
    """{class: number of distinct participants with at least one row of that class}."""
    return {cls: int(np.unique(participants[y == cls]).size) for cls in np.unique(y)}


def _stratifiable(y, participants, n_splits):
    counts = _class_participant_counts(y, participants)
    return all(c >= n_splits for c in counts.values()), counts


def _grouped_splitter(y, participants, n_splits, seed):
    from sklearn.model_selection import GroupKFold, StratifiedGroupKFold

    stratified, _ = _stratifiable(y, participants, n_splits)
    if stratified:
        return StratifiedGroupKFold(n_splits=n_splits, shuffle=True, random_state=seed), True
    return GroupKFold(n_splits=n_splits, shuffle=True, random_state=seed), False


def _plain(value):
    """numpy scalar -> Python scalar, so that messages read 'p1', not np.str_('p1')."""
    return value.item() if isinstance(value, np.generic) else value


def _sorted_unique(values):
    return tuple(sorted({str(v) for v in values}))


def _fallback_reason(counts, n_splits):
    """Why stratification is off, naming the classes seen in too few participants."""
    short = [f"class {_plain(cls)!r} is seen in {n} participant(s)" for cls, n in counts.items()
             if n < n_splits]
    if not short:
        return ""
    return (f"{'; '.join(short)}, fewer than the {n_splits} folds: folds are grouped by "
            "participant but not stratified by class (GroupKFold)")


def _check_training_classes(folds, y, groups, scheme_name):
    """Every class of the data must be in every training part, else the fold cannot learn it."""
    classes = np.unique(y)
    for fold in folds:
        missing = np.setdiff1d(classes, np.unique(y[fold.train]))
        if missing.size:
            cls = _plain(missing[0])
            owners = _sorted_unique(groups[y == cls])
            raise SchemeError(
                f"{scheme_name}: in fold {fold.index} class {cls!r} is absent from the training "
                f"part because it is recorded only in {', '.join(owners)}; record that class in "
                "more participants/sites, drop it, or choose another scheme")


# --------------------------------------------------------------------------- outer folds


def describe_outer(scheme: Scheme, *, y, participants, sites=None, order=None,
                   seed: int = 0) -> dict:
    """How :func:`outer_folds` splits these data, without splitting them.

    Returns ``{"scheme", "grouped", "group_by", "n_groups", "n_folds", "stratified",
    "splitter", "stratification_note", "warning"}``. ``stratified`` is True only for
    ``grouped_kfold`` when every class is present in at least ``n_splits`` participants
    (``StratifiedGroupKFold``); otherwise ``GroupKFold`` is used, ``stratified`` is False and
    ``stratification_note`` names the classes seen in too few participants.
    """
    y = _labels_array(y)
    participants = _ids_array(participants, y.size, "participants")
    name = scheme.name
    stratified = False
    reason = ""
    if name == "leave_one_site_out":
        sites_arr = _ids_array(sites, y.size, "sites")
        group_by, n_groups = "site", int(np.unique(sites_arr).size)
        n_folds, splitter = n_groups, "LeaveOneGroupOut"
    elif name == "leave_one_participant_out":
        group_by, n_groups = "participant", int(np.unique(participants).size)
        n_folds, splitter = n_groups, "LeaveOneGroupOut"
    elif name == "grouped_kfold":
        group_by, n_groups = "participant", int(np.unique(participants).size)
        stratified, counts = _stratifiable(y, participants, scheme.n_splits)
        splitter = "StratifiedGroupKFold" if stratified else "GroupKFold"
        reason = _fallback_reason(counts, scheme.n_splits)
        n_folds = scheme.n_splits * scheme.n_repeats
    else:
        group_by, n_groups = None, int(np.unique(participants).size)
        n_folds, splitter = 1, WITHIN_RULE
    return {
        "scheme": name,
        "grouped": scheme.grouped,
        "group_by": group_by,
        "n_groups": n_groups,
        "n_folds": n_folds,
        "stratified": bool(stratified),
        "splitter": splitter,
        "stratification_note": reason,
        "warning": scheme.warning,
    }


def _fold(index, repeat, train, test, held_out):
    train = np.sort(np.asarray(train, dtype=np.intp))
    test = np.sort(np.asarray(test, dtype=np.intp))
    return Fold(index=index, repeat=repeat, train=train, test=test, held_out=held_out)


def _leave_one_group_out(y, groups, what, scheme_name):
    from sklearn.model_selection import LeaveOneGroupOut

    unique = np.unique(groups)
    if unique.size < 2:
        raise SchemeError(
            f"{scheme_name} needs at least 2 {what}s; the data have {unique.size}")
    folds = []
    dummy = np.zeros((groups.size, 1))
    for i, (train, test) in enumerate(LeaveOneGroupOut().split(dummy, groups=groups)):
        folds.append(_fold(i, 0, train, test, _sorted_unique(groups[test])))
    _check_training_classes(folds, y, groups, scheme_name)
    return folds


def _grouped_kfold(scheme, y, participants, seed):
    n_splits = scheme.n_splits
    n_participants = int(np.unique(participants).size)
    if n_participants < n_splits:
        raise SchemeError(
            f"grouped_kfold with {n_splits} folds needs at least {n_splits} participants; "
            f"the data have {n_participants}. Use fewer folds or leave_one_participant_out")
    folds = []
    dummy = np.zeros((y.size, 1))
    for repeat in range(scheme.n_repeats):
        splitter, _ = _grouped_splitter(y, participants, n_splits, seed + repeat)
        for train, test in splitter.split(dummy, y, groups=participants):
            if test.size == 0:  # cannot happen with >= n_splits groups; kept as a guard
                raise SchemeError(
                    f"grouped_kfold produced an empty test fold (repeat {repeat}); "
                    "use fewer folds")
            folds.append(_fold(len(folds), repeat, train, test,
                               _sorted_unique(participants[test])))
    _check_training_classes(folds, y, participants, "grouped_kfold")
    return folds


def _per_row(values, n_rows, field):
    if values is None:
        return None
    arr = np.asarray(values)
    if arr.ndim != 1 or arr.shape[0] != n_rows:
        raise SchemeError(f"{field} must have one value per row ({n_rows}), got shape {arr.shape}")
    return arr


def _n_test(share, n_rows):
    """Round half up, and keep at least one row on each side."""
    return min(max(int(math.floor(share * n_rows + 0.5)), 1), n_rows - 1)


def _later_units(units, share):
    """Rows of the latest units (sorted ids = time order) holding about ``share`` of the
    rows: units are added from the latest until they hold the rounded share, leaving at
    least one unit for training."""
    ids, counts = np.unique(units, return_counts=True)
    wanted = _n_test(share, int(counts.sum()))
    taken, n_taken = [], 0
    for unit, count in zip(ids[::-1], counts[::-1], strict=True):
        if n_taken >= wanted or len(taken) == ids.size - 1:
            break
        taken.append(unit)
        n_taken += int(count)
    return np.isin(units, taken)


def _within_participant_time(scheme, y, participants, order, recordings, sessions, window_s):
    if order is None:
        raise SchemeError(
            "within_participant_time needs order (e.g. each window's start time) to know "
            "which windows are the latest; pass order=")
    order = np.asarray(order)
    if order.ndim != 1 or order.shape[0] != participants.size:
        raise SchemeError(
            f"order must have one value per row ({participants.size}), got shape {order.shape}")
    if np.issubdtype(order.dtype, np.number) and not np.all(np.isfinite(order)):
        raise SchemeError("order contains NaN or infinite values; give a time for every row")
    recordings = _per_row(recordings, participants.size, "recordings")
    sessions = _per_row(sessions, participants.size, "sessions")
    is_test = np.zeros(participants.size, dtype=bool)
    is_train = np.zeros(participants.size, dtype=bool)
    for participant in np.unique(participants):
        rows = np.flatnonzero(participants == participant)
        if rows.size < 2:
            raise SchemeError(
                f"within_participant_time needs at least 2 windows per participant; "
                f"participant {str(participant)!r} has {rows.size}")
        units = None
        for values in (sessions, recordings):
            if values is not None and np.unique(values[rows]).size > 1:
                units = values[rows]
                break
        if units is not None:
            later = _later_units(units, scheme.test_share)
            is_test[rows[later]] = True
            is_train[rows[~later]] = True
            continue
        if window_s is None or not float(window_s) > 0:
            raise SchemeError(
                f"within_participant_time: participant {str(participant)!r} has one recording, "
                "so its windows are split in time with a gap of one window length; pass "
                "window_s= (the window length in s, > 0)")
        times = order[rows].astype(float)
        by_time = np.sort(times)
        start = by_time[-_n_test(scheme.test_share, rows.size)]
        train = times + 2.0 * float(window_s) <= start  # its end + one window length
        if not train.any():
            raise SchemeError(
                f"within_participant_time: participant {str(participant)!r} has one recording "
                f"too short to leave a gap of one window length ({float(window_s):g} s) "
                f"before their last {scheme.test_share:g} of windows; give a smaller "
                "test_share or record longer")
        is_test[rows[times >= start]] = True
        is_train[rows[train]] = True
    folds = [_fold(0, 0, np.flatnonzero(is_train), np.flatnonzero(is_test),
                   _sorted_unique(participants[is_test]))]
    _check_training_classes(folds, y, participants, "within_participant_time")
    return folds


def outer_folds(scheme: Scheme, *, y, participants, sites=None, order=None, recordings=None,
                sessions=None, window_s: float | None = None, seed: int = 0) -> list[Fold]:
    """The outer folds of ``scheme`` on these rows.

    ``participants`` are per-row ids, unique across sites (the caller writes
    "site/participant"); ``sites`` per-row site ids (needed for ``leave_one_site_out``).
    ``within_participant_time`` needs ``order`` (each window's start in its recording, s),
    and uses ``sessions`` and ``recordings`` (per-row ids whose sorted order is their time
    order, e.g. ranks) to split whole sessions or recordings, and ``window_s`` (window
    length, s) for the gap within a single recording. Rows in that gap are in neither part.
    Raises :class:`SchemeError` when the data cannot support the scheme.
    """
    if not isinstance(scheme, Scheme):
        raise SchemeError(f"scheme must be a Scheme, got {type(scheme).__name__}")
    y = _labels_array(y)
    participants = _ids_array(participants, y.size, "participants")
    name = scheme.name
    if name == "leave_one_site_out":
        if sites is None:
            raise SchemeError("leave_one_site_out needs sites (one site id per row); pass sites=")
        return _leave_one_group_out(y, _ids_array(sites, y.size, "sites"), "site", name)
    if name == "leave_one_participant_out":
        return _leave_one_group_out(y, participants, "participant", name)
    if name == "grouped_kfold":
        return _grouped_kfold(scheme, y, participants, int(seed))
    return _within_participant_time(scheme, y, participants, order, recordings, sessions,
                                    window_s)


# --------------------------------------------------------------------------- inner splits


def inner_splits(y, participants, *, n_splits: int = 5,
                 seed: int = 0) -> list[tuple[np.ndarray, np.ndarray]]:
    """Participant-grouped inner folds for tuning or stacking on a training part.

    ``StratifiedGroupKFold`` when every class is present in at least ``n_splits``
    participants, else shuffled ``GroupKFold``; ``n_splits`` is reduced to the number of
    participants when there are fewer (at least 2 are needed).
    """
    y = _labels_array(y)
    participants = _ids_array(participants, y.size, "participants")
    raise_for(validate({"n_splits": n_splits},
                       {"n_splits": Scheme._parameter_constraints["n_splits"]}), SchemeError)
    n_participants = int(np.unique(participants).size)
    if n_participants < 2:
        raise SchemeError(
            f"inner participant-grouped splits need at least 2 participants in the training "
            f"part; it has {n_participants}")
    n_splits = min(int(n_splits), n_participants)
    splitter, _ = _grouped_splitter(y, participants, n_splits, int(seed))
    dummy = np.zeros((y.size, 1))
    return [(np.sort(train).astype(np.intp), np.sort(test).astype(np.intp))
            for train, test in splitter.split(dummy, y, groups=participants)]


def assert_disjoint(folds: list[Fold], participants, *, scheme: Scheme | None = None) -> None:
    """Raise AssertionError naming a participant found in both parts of a fold.

    Every fold given is checked; pass ``scheme`` to skip the check for a scheme that is not
    grouped (``within_participant_time`` shares participants by design).
    """
    if scheme is not None and not scheme.grouped:
        return
    participants = np.asarray(participants).astype(str)
    for fold in folds:
        both = np.intersect1d(participants[fold.train], participants[fold.test])
        if both.size:
            raise AssertionError(
                f"fold {fold.index} (repeat {fold.repeat}): participant {str(both[0])!r} is in "
                f"both the training and the test part ({both.size} participant(s) shared)")
