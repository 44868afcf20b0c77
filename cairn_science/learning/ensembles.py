"""Bagging and stacking that respect participants, as scikit-learn classifiers.

Windows of one participant are not independent: a bootstrap over windows puts near-copies of a
held-in participant's windows in and out of bag, and a stacking whose inner split separates
windows of one participant trains its final estimator on optimistic member outputs. Here the
bootstrap draws participants (``GroupBaggingClassifier(sample_by="participant")``) and the
stacking's inner splits keep each participant's windows together
(``GroupStackingClassifier``). Both take ``fit(X, y, groups=None)``, ``groups`` being the
participant of each row; both fit their members on labels encoded as 0..n_classes-1 (the
order of ``classes_``) and map back on prediction, as scikit-learn's ensembles do, and pass
each member whose ``fit`` takes ``groups`` the participants of its rows.
``GroupCalibratedClassifier`` gives a classifier probabilities by Platt scaling on inner
folds grouped by participant (the SVMs' own calibration splits windows).

These classes must stay importable as ``cairn_science.learning.ensembles.<name>``: a skops release
names them by that path, and loading one means trusting those names.
"""

from __future__ import annotations

import numbers
from typing import Self

import numpy as np
from numpy.typing import ArrayLike
from sklearn.base import BaseEstimator, ClassifierMixin, clone
from sklearn.utils import check_random_state, get_tags
from sklearn.utils.multiclass import check_classification_targets
from sklearn.utils.random import sample_without_replacement
from sklearn.utils.validation import check_is_fitted, has_fit_parameter, validate_data

from .validation import inner_splits

MAX_INT = np.iinfo(np.int32).max
SAMPLE_BY = ("participant", "window")
#: How often a bootstrap draw holding one class only is drawn again.
ONE_CLASS_REDRAWS = 100
VOTING = ("soft", "hard")
STACK_METHODS = ("auto", "predict_proba", "decision_function", "predict")


def _check_int(value, field, minimum):
    if isinstance(value, bool) or not isinstance(value, numbers.Integral) or value < minimum:
        raise ValueError(f"{field}: give a whole number >= {minimum}, got {value!r}")
    return int(value)


def _check_choice(value, field, choices):
    if value not in choices:
        raise ValueError(f"{field}: choose one of {', '.join(map(repr, choices))}, "
                         f"got {value!r}")
    return value


def _check_groups(groups, n_rows, why):
    if groups is None:
        raise ValueError(f"groups: {why} needs the participant of every row; pass "
                         "fit(X, y, groups=participants)")
    groups = np.asarray(groups)
    if groups.ndim != 1 or groups.shape[0] != n_rows:
        raise ValueError(f"groups: give one participant per row of X ({n_rows} rows), got "
                         f"shape {groups.shape}")
    return groups


def _group_kwargs(estimator, groups):
    """``{"groups": groups}`` for a member whose fit takes them (and groups are known)."""
    return {"groups": groups} if groups is not None and has_fit_parameter(
        estimator, "groups") else {}


def _finite(estimators):
    """``ensure_all_finite`` for our input checks: NaN passes only if every member takes it."""
    return "allow-nan" if all(get_tags(e).input_tags.allow_nan for e in estimators) else True


def seed_random_states(estimator: BaseEstimator, seed: int) -> BaseEstimator:
    """Set every ``random_state`` parameter of ``estimator`` (nested ones too) from ``seed``.

    The parameters are visited in sorted order of their ``get_params(deep=True)`` names and
    each takes the next ``randint(2**31 - 1)`` of ``RandomState(seed)`` -- the rule
    scikit-learn's ensembles use for their members, so a member seeded here is the member
    scikit-learn would build from the same seed.
    """
    rng = np.random.RandomState(seed)
    to_set = {key: rng.randint(MAX_INT) for key in sorted(estimator.get_params(deep=True))
              if key == "random_state" or key.endswith("__random_state")}
    if to_set:
        estimator.set_params(**to_set)
    return estimator


class GroupBaggingClassifier(ClassifierMixin, BaseEstimator):
    """Bagging whose bootstrap draws participants (or windows).

    Parameters
    ----------
    estimator : the member classifier, cloned for each member (default: a decision tree).
    n_estimators : number of members.
    sample_by : ``"participant"`` -- each member is fitted on a bootstrap of participants:
        as many draws with replacement as there are participants, each draw contributing all
        windows of the participant drawn (a participant drawn twice contributes its windows
        twice); needs ``groups``. ``"window"`` -- a bootstrap of rows (n draws from n rows).
    voting : ``"soft"`` -- the mean of the members' ``predict_proba`` over ``classes_`` (all
        classes seen in ``fit``); a member whose draw lacked a class gives that class
        probability 0, and the mean is still over all members. ``"hard"`` -- each member votes
        for its predicted class; ``predict_proba`` is the share of votes, and ``predict`` the
        class with most votes, a tie going to the class first in ``classes_``.
    random_state : int, RandomState or None.

    Random draws: ``RandomState(random_state)`` gives one seed per member
    (``randint(2**31 - 1, size=n_estimators)``). From each seed, the member's own random
    states are set (:func:`seed_random_states`), and a fresh ``RandomState(seed)`` draws its
    rows. In ``"window"`` mode this stream first yields a permutation of the feature indices
    (``sample_without_replacement(n_features, n_features)``, discarded: all features are used)
    and then the row indices ``randint(0, n_rows, n_rows)``: the same numbers, in the same
    order, as scikit-learn 1.9's ``BaggingClassifier`` with ``bootstrap=True``,
    ``max_samples=None``, ``max_features=1.0``, so for the same ``random_state`` both fit
    their members on the same rows. (scikit-learn passes the draw as ``sample_weight`` counts
    to members whose ``fit`` accepts weights; this class always repeats the rows.) In
    ``"participant"`` mode the stream yields ``randint(0, n_participants, n_participants)``,
    indices into the sorted unique participants.

    Attributes: ``classes_``, ``n_features_in_``, ``members_`` (fitted members), ``draws_``
    (the row indices each member was fitted on, in draw order), ``seeds_``.
    """

    def __init__(self, estimator: BaseEstimator | None = None, n_estimators: int = 10,
                 sample_by: str = "participant", voting: str = "soft",
                 random_state: int | np.random.RandomState | None = None):
        self.estimator = estimator
        self.n_estimators = n_estimators
        self.sample_by = sample_by
        self.voting = voting
        self.random_state = random_state

    def __sklearn_tags__(self):
        tags = super().__sklearn_tags__()
        tags.input_tags.allow_nan = get_tags(self._template()).input_tags.allow_nan
        return tags

    def _template(self):
        if self.estimator is None:
            from sklearn.tree import DecisionTreeClassifier

            return DecisionTreeClassifier()
        return self.estimator

    def fit(self, X: ArrayLike, y: ArrayLike, groups: ArrayLike | None = None) -> Self:
        n_estimators = _check_int(self.n_estimators, "n_estimators", 1)
        _check_choice(self.sample_by, "sample_by", SAMPLE_BY)
        _check_choice(self.voting, "voting", VOTING)
        template = self._template()
        if self.voting == "soft" and not hasattr(template, "predict_proba"):
            raise ValueError(f"voting: 'soft' averages predict_proba, which "
                             f"{type(template).__name__} does not have; use voting='hard' or a "
                             "member with probabilities")
        X, y = validate_data(self, X, y, dtype=None, ensure_all_finite=_finite([template]))
        check_classification_targets(y)
        self.classes_, y_code = np.unique(y, return_inverse=True)
        n_rows = X.shape[0]
        if self.sample_by == "participant" or groups is not None:
            groups = _check_groups(groups, n_rows, f"sample_by={self.sample_by!r}")
        if self.sample_by == "participant":
            units, unit_of_row = np.unique(groups, return_inverse=True)
            rows_of_unit = [np.flatnonzero(unit_of_row == u) for u in range(units.size)]

        rng = check_random_state(self.random_state)
        self.seeds_ = rng.randint(MAX_INT, size=n_estimators)
        self.members_, self.draws_ = [], []
        for index, seed in enumerate(self.seeds_):
            member = seed_random_states(clone(template), seed)
            draw_rng = np.random.RandomState(seed)
            if self.sample_by == "window":
                sample_without_replacement(X.shape[1], X.shape[1], random_state=draw_rng)
            n_classes = self.classes_.size
            for _ in range(ONE_CLASS_REDRAWS + 1):
                if self.sample_by == "window":
                    rows = draw_rng.randint(0, n_rows, n_rows)
                else:
                    picked = draw_rng.randint(0, units.size, units.size)
                    rows = np.concatenate([rows_of_unit[u] for u in picked])
                # A member fitted on one class only votes for it whatever it sees (and some
                # learners fit it but cannot give probabilities): such a draw is drawn again
                # from the same seed's stream. Draws holding two classes or more are kept.
                if n_classes < 2 or np.unique(y_code[rows]).size > 1:
                    break
            else:
                raise ValueError(
                    f"sample_by: member {index}'s bootstrap held one class only "
                    f"({self.classes_[y_code[rows[0]]]!r}) in {ONE_CLASS_REDRAWS + 1} draws; give "
                    "more participants per class or use sample_by='window'")
            member.fit(X[rows], y_code[rows],
                       **_group_kwargs(member, None if groups is None else groups[rows]))
            self.members_.append(member)
            self.draws_.append(rows)
        return self

    def _scores(self, X):
        check_is_fitted(self, "members_")
        X = validate_data(self, X, dtype=None, ensure_all_finite=_finite(self.members_),
                          reset=False)
        scores = np.zeros((X.shape[0], self.classes_.size))
        for member in self.members_:
            columns = np.asarray(member.classes_, dtype=int)  # codes of the classes it saw
            if self.voting == "soft":
                scores[:, columns] += member.predict_proba(X)
            else:
                scores[np.arange(X.shape[0]), member.predict(X).astype(int)] += 1.0
        return scores / len(self.members_)

    def predict_proba(self, X: ArrayLike) -> np.ndarray:
        """Soft voting: mean member probability; hard voting: share of member votes."""
        return self._scores(X)

    def predict(self, X: ArrayLike) -> np.ndarray:
        """The class with the highest mean probability (or most votes); ties go to the class
        first in ``classes_``."""
        scores = self._scores(X)
        return self.classes_.take(np.argmax(scores, axis=1))


class GroupStackingClassifier(ClassifierMixin, BaseEstimator):
    """Stacking whose final estimator learns from out-of-fold member outputs, the folds
    keeping each participant's rows together.

    Parameters
    ----------
    estimators : list of (name, classifier).
    final_estimator : fitted on the members' out-of-fold outputs (default
        ``LogisticRegression()``).
    n_inner_splits : inner folds. With ``groups``: ``StratifiedGroupKFold(shuffle=True,
        random_state)`` when every class has at least that many participants, else
        ``GroupKFold``; with fewer participants than ``n_inner_splits``, that many folds
        (at least 2). Without ``groups``: ``StratifiedKFold(shuffle=True, random_state)``.
    stack_method : ``"predict_proba"``, ``"decision_function"``, ``"predict"`` or
        ``"auto"`` (the first of these a member has). As in scikit-learn, with two classes
        the first probability column of each member is dropped (it is one minus the other).
    passthrough : also give the final estimator the original features.
    random_state : the inner splits' shuffling.

    ``fit`` computes each member's out-of-fold outputs with ``cross_val_predict`` on the
    precomputed inner splits, fits the final estimator on them, then refits each member on
    all rows; prediction runs the refitted members and the final estimator. With the same
    splits this is scikit-learn's ``StackingClassifier(cv=splits)``.

    Attributes: ``classes_``, ``n_features_in_``, ``estimators_`` (members refitted on all
    rows), ``named_estimators_``, ``final_estimator_``, ``inner_splits_`` (list of
    (train, test) row indices), ``inner_cv_`` (name of the splitter used), ``stack_method_``.
    """

    def __init__(self, estimators: list[tuple[str, BaseEstimator]],
                 final_estimator: BaseEstimator | None = None, n_inner_splits: int = 5,
                 stack_method: str = "predict_proba", passthrough: bool = False,
                 random_state: int | np.random.RandomState | None = None):
        self.estimators = estimators
        self.final_estimator = final_estimator
        self.n_inner_splits = n_inner_splits
        self.stack_method = stack_method
        self.passthrough = passthrough
        self.random_state = random_state

    # get_params / set_params reach members by name ("lda-0__shrinkage"), as in scikit-learn's
    # composite estimators.
    def get_params(self, deep: bool = True) -> dict:
        out = super().get_params(deep=deep)
        if deep and isinstance(self.estimators, list | tuple):
            for item in self.estimators:
                if not (isinstance(item, tuple | list) and len(item) == 2
                        and isinstance(item[0], str)):
                    continue  # malformed: fit says so
                name, estimator = item
                out[name] = estimator
                if hasattr(estimator, "get_params"):
                    for key, value in estimator.get_params(deep=True).items():
                        out[f"{name}__{key}"] = value
        return out

    def set_params(self, **params: object) -> Self:
        if "estimators" in params:
            self.estimators = params.pop("estimators")
        members = self.estimators if isinstance(self.estimators, list | tuple) else []
        names = [item[0] for item in members if isinstance(item, tuple | list) and item]
        replace = {key: params.pop(key) for key in list(params) if key in names}
        nested = {}
        for key in list(params):
            head, sep, tail = key.partition("__")
            if sep and head in names:
                nested.setdefault(head, {})[tail] = params.pop(key)
        if replace or nested:
            members = []
            for name, estimator in self.estimators:  # a new list: the caller's is untouched
                estimator = replace.get(name, estimator)
                if name in nested:
                    estimator.set_params(**nested[name])
                members.append((name, estimator))
            self.estimators = members
        return super().set_params(**params)

    def _members(self):
        if not isinstance(self.estimators, list | tuple) or not self.estimators:
            raise ValueError("estimators: give a non-empty list of (name, classifier) pairs")
        names = []
        for item in self.estimators:
            if not (isinstance(item, tuple | list) and len(item) == 2
                    and isinstance(item[0], str) and hasattr(item[1], "fit")):
                raise ValueError(f"estimators: each item must be a (name, classifier) pair, "
                                 f"got {item!r}")
            names.append(item[0])
        duplicated = sorted({n for n in names if names.count(n) > 1})
        if duplicated:
            raise ValueError(f"estimators: member names must be unique; repeated: "
                             f"{', '.join(duplicated)}")
        bad = [n for n in names if "__" in n or n in self._get_param_names()]
        if bad:
            raise ValueError(f"estimators: member names may not contain '__' or equal a "
                             f"parameter of the stacking: {', '.join(bad)}")
        return [tuple(item) for item in self.estimators]

    def _inner_splits(self, X, y_code, groups):
        from sklearn.model_selection import GroupKFold, StratifiedGroupKFold, StratifiedKFold

        k = _check_int(self.n_inner_splits, "n_inner_splits", 2)
        if groups is None:
            splitter = StratifiedKFold(k, shuffle=True, random_state=self.random_state)
            return splitter, list(splitter.split(X, y_code))
        groups = _check_groups(groups, X.shape[0], "grouped inner splits")
        n_groups = np.unique(groups).size
        if n_groups < 2:
            raise ValueError(f"groups: the inner splits need at least 2 participants, got "
                             f"{n_groups}; fit without groups or give more participants")
        k = min(k, n_groups)
        per_class = [np.unique(groups[y_code == c]).size for c in range(self.classes_.size)]
        if min(per_class) >= k:
            splitter = StratifiedGroupKFold(k, shuffle=True, random_state=self.random_state)
        else:
            splitter = GroupKFold(k)
        return splitter, list(splitter.split(X, y_code, groups))

    def _stack_methods(self, members):
        _check_choice(self.stack_method, "stack_method", STACK_METHODS)
        wanted = (["predict_proba", "decision_function", "predict"]
                  if self.stack_method == "auto" else [self.stack_method])
        methods = []
        for name, estimator in members:
            found = [m for m in wanted if hasattr(estimator, m)]
            if not found:
                raise ValueError(f"stack_method: member {name!r} has no "
                                 f"{' / '.join(wanted)}; choose another stack_method")
            methods.append(found[0])
        return methods

    def _meta_features(self, X, outputs):
        columns = []
        for method, out in zip(self.stack_method_, outputs, strict=True):
            out = np.asarray(out)
            if out.ndim == 1:
                out = out.reshape(-1, 1)
            elif method == "predict_proba" and self.classes_.size == 2:
                out = out[:, 1:]  # p(first class) = 1 - p(second): collinear, dropped
            columns.append(out)
        if self.passthrough:
            columns.append(X)
        return np.hstack(columns)

    def fit(self, X: ArrayLike, y: ArrayLike, groups: ArrayLike | None = None) -> Self:
        from sklearn.linear_model import LogisticRegression
        from sklearn.model_selection import cross_val_predict

        members = self._members()
        _check_int(self.n_inner_splits, "n_inner_splits", 2)
        X, y = validate_data(self, X, y, dtype=None,
                             ensure_all_finite=_finite([e for _, e in members]))
        check_classification_targets(y)
        self.classes_, y_code = np.unique(y, return_inverse=True)
        if self.classes_.size < 2:
            raise ValueError(f"y: stacking needs at least 2 classes, got 1 class "
                             f"({self.classes_[0]!r}); give rows of every class")
        self.stack_method_ = self._stack_methods(members)
        splitter, self.inner_splits_ = self._inner_splits(X, y_code, groups)
        if groups is not None:
            groups = np.asarray(groups)
        self.inner_cv_ = type(splitter).__name__
        outputs = [cross_val_predict(clone(estimator), X, y_code, cv=self.inner_splits_,
                                     method=method, params=_group_kwargs(estimator, groups))
                   for (_, estimator), method in zip(members, self.stack_method_, strict=True)]
        final = LogisticRegression() if self.final_estimator is None else self.final_estimator
        self.final_estimator_ = clone(final).fit(self._meta_features(X, outputs), y_code,
                                                 **_group_kwargs(final, groups))
        self.estimators_ = [clone(estimator).fit(X, y_code, **_group_kwargs(estimator, groups))
                            for _, estimator in members]
        self.named_estimators_ = {name: fitted for (name, _), fitted
                                  in zip(members, self.estimators_, strict=True)}
        return self

    def meta_features(self, X: ArrayLike) -> np.ndarray:
        """The final estimator's input: the refitted members' outputs (and X if passthrough)."""
        check_is_fitted(self, "final_estimator_")
        X = validate_data(self, X, dtype=None, ensure_all_finite=_finite(self.estimators_),
                          reset=False)
        outputs = [getattr(estimator, method)(X)
                   for estimator, method in zip(self.estimators_, self.stack_method_,
                                                strict=True)]
        return self._meta_features(X, outputs)

    def predict_proba(self, X: ArrayLike) -> np.ndarray:
        check_is_fitted(self, "final_estimator_")
        return self.final_estimator_.predict_proba(self.meta_features(X))

    def predict(self, X: ArrayLike) -> np.ndarray:
        check_is_fitted(self, "final_estimator_")
        codes = np.asarray(self.final_estimator_.predict(self.meta_features(X))).astype(int)
        return self.classes_.take(codes)


class GroupCalibratedClassifier(ClassifierMixin, BaseEstimator):
    """A classifier whose probabilities come from Platt scaling on inner folds that keep each
    participant's rows together.

    Parameters
    ----------
    estimator : a classifier with ``decision_function`` (e.g. ``SVC()``).
    n_inner_splits : inner folds from :func:`cairn_science.learning.validation.inner_splits`
        (``StratifiedGroupKFold`` when every class has that many participants, else shuffled
        ``GroupKFold``; fewer folds with fewer participants, at least 2 participants).
    random_state : the inner folds' shuffling.

    ``fit(X, y, groups)`` fits ``estimator`` on all rows: ``predict`` and
    ``decision_function`` are its own (as an SVC predicts from its decision function,
    whatever its probabilities). ``predict_proba`` is scikit-learn's
    ``CalibratedClassifierCV(method="sigmoid", ensemble=True)`` on the inner folds: a copy of
    ``estimator`` fitted on each inner training part, its sigmoid fitted on the inner test
    part, the probabilities averaged over folds. An inner fold whose training part lacks a
    class is skipped. Without ``groups`` it refuses to fit: a split of windows is what it
    exists to avoid.

    Attributes: ``classes_``, ``n_features_in_``, ``estimator_`` (fitted on all rows),
    ``calibrated_`` (the fitted ``CalibratedClassifierCV``), ``inner_splits_``.
    """

    def __init__(self, estimator: BaseEstimator, n_inner_splits: int = 5,
                 random_state: int | np.random.RandomState | None = None):
        self.estimator = estimator
        self.n_inner_splits = n_inner_splits
        self.random_state = random_state

    def fit(self, X: ArrayLike, y: ArrayLike, groups: ArrayLike | None = None) -> Self:
        from sklearn.calibration import CalibratedClassifierCV

        name = type(self.estimator).__name__
        groups = _check_groups(groups, np.asarray(X).shape[0] if hasattr(X, "shape")
                               else len(X), f"{name}'s probabilities (grouped calibration)")
        X, y = validate_data(self, X, y, dtype=None)
        check_classification_targets(y)
        self.classes_ = np.unique(y)
        if self.classes_.size < 2:
            raise ValueError(f"y: {name} needs at least 2 classes, got 1 "
                             f"({self.classes_[0]!r}); give rows of every class")
        k = _check_int(self.n_inner_splits, "n_inner_splits", 2)
        seed = check_random_state(self.random_state).randint(MAX_INT)
        splits = [(train, test) for train, test in inner_splits(y, groups, n_splits=k, seed=seed)
                  if np.unique(y[train]).size == self.classes_.size]
        if not splits:
            raise ValueError(f"groups: no inner fold of {name}'s calibration has every class in "
                             "its training part; give more participants per class")
        self.inner_splits_ = splits
        self.calibrated_ = CalibratedClassifierCV(clone(self.estimator), method="sigmoid",
                                                  cv=splits, ensemble=True).fit(X, y)
        self.estimator_ = clone(self.estimator).fit(X, y)
        return self

    def decision_function(self, X: ArrayLike) -> np.ndarray:
        check_is_fitted(self, "estimator_")
        X = validate_data(self, X, dtype=None, reset=False)
        return self.estimator_.decision_function(X)

    def predict(self, X: ArrayLike) -> np.ndarray:
        """The estimator's own prediction (from its decision function)."""
        check_is_fitted(self, "estimator_")
        X = validate_data(self, X, dtype=None, reset=False)
        return self.estimator_.predict(X)

    def predict_proba(self, X: ArrayLike) -> np.ndarray:
        """Platt-scaled probabilities, averaged over the grouped inner folds."""
        check_is_fitted(self, "calibrated_")
        X = validate_data(self, X, dtype=None, reset=False)
        return self.calibrated_.predict_proba(X)
