"""The single learners a training request can name, as unfitted scikit-learn classifiers.

Each entry is built by ``make_learner(name, params, random_state=...)``: the entry's defaults,
overridden by ``params``, with the random state fixed wherever the estimator takes one, so a
fit is deterministic given ``random_state``. No learner starts worker processes or threads of
its own (``n_jobs`` stays unset); the number of BLAS/OpenMP threads is the process's limit
(``cairn_science.runtime``). None of them scales its input: the caller puts a scaler in front
(``cairn_science.learning.run.build_estimator`` does), which the SVMs, k-NN, logistic regression and
the MLP need.

No learner splits its training rows by window on its own: windows of one participant on both
sides of an internal split make probabilities and stopping points optimistic. The SVMs'
probabilities are calibrated on inner folds grouped by participant
(:class:`~cairn_science.learning.ensembles.GroupCalibratedClassifier`, which needs ``groups`` at
fit: ``Learner.grouped``); early stopping, whose validation share scikit-learn draws from
windows, is off in the MLP and gradient boosting, and the parameters that would turn such a
split on are refused (``Learner.refused``).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field

from cairn_science.params import (
    Integral,
    Interval,
    ListOf,
    Options,
    Problem,
    Real,
    raise_for,
    validate,
)


@dataclass(frozen=True)
class Learner:
    """One learner, one entry of ``LEARNERS``: ``factory(random_state, **params)`` returns
    an unfitted classifier with ``defaults`` overridden by a spec's params.

    ``label``: the few words a form shows; ``constraints``: the values a spec's params may
    take, ``{parameter: [constraint, ...]}`` (:mod:`cairn_science.params`), checked when a
    spec is submitted; a parameter of the estimator not named here is checked by
    scikit-learn's own parameter validation then. ``grouped``: wrapped so that its
    probabilities come from participant-grouped inner folds (fit needs ``groups``);
    ``refused``: parameters that would split windows internally. A new learner is one more
    entry with these fields (the training form, the spec check and the README's list read
    the table)."""

    name: str
    description: str
    defaults: dict
    factory: Callable
    grouped: bool = False
    refused: tuple = ()
    label: str = ""
    constraints: dict = field(default_factory=dict)

    @property
    def title(self) -> str:
        """The label, or the name when the entry has none."""
        return self.label or self.name.replace("_", " ")


_WINDOW_SPLIT = ("would draw its internal validation share from windows, so one "
                 "participant's windows would be on both sides; it stays off")
_PLATT = ("would calibrate probabilities on libsvm's own 5-fold split of windows; they are "
          "calibrated on participant-grouped inner folds instead")


def _lda(random_state, **params):
    from sklearn.discriminant_analysis import LinearDiscriminantAnalysis

    return LinearDiscriminantAnalysis(**params)  # deterministic: takes no random state


def _logistic(random_state, **params):
    from sklearn.linear_model import LogisticRegression

    return LogisticRegression(random_state=random_state, **params)


def _svc(random_state, **params):
    from sklearn.svm import SVC

    return SVC(random_state=random_state, **params)


def _knn(random_state, **params):
    from sklearn.neighbors import KNeighborsClassifier

    return KNeighborsClassifier(**params)  # deterministic: takes no random state


def _random_forest(random_state, **params):
    from sklearn.ensemble import RandomForestClassifier

    return RandomForestClassifier(random_state=random_state, **params)


def _extra_trees(random_state, **params):
    from sklearn.ensemble import ExtraTreesClassifier

    return ExtraTreesClassifier(random_state=random_state, **params)


def _hist_gradient_boosting(random_state, **params):
    from sklearn.ensemble import HistGradientBoostingClassifier

    return HistGradientBoostingClassifier(random_state=random_state, **params)


def _mlp(random_state, **params):
    from sklearn.neural_network import MLPClassifier

    return MLPClassifier(random_state=random_state, **params)


def _recurrent(cell, bidirectional):
    def factory(random_state, **params):
        from .recurrent import RecurrentClassifier

        return RecurrentClassifier(cell=cell, bidirectional=bidirectional,
                                   random_state=random_state, **params)

    return factory


_FIXED = "is fixed by the learner's name (gru, lstm, bigru, bilstm): choose that instead"


_POSITIVE = Interval(Real, 0, None, closed="neither")
_NON_NEGATIVE = Interval(Real, 0, None, closed="left")
_COUNT = Interval(Integral, 1, None, closed="left")
# The limits below are scikit-learn's own for these parameters (each estimator's
# ``_parameter_constraints``, scikit-learn 1.9), narrowed where a spec should stay simple
# (no callables, no arrays); tests/unit/test_params.py compares them with scikit-learn's.
_SVM = {"C": [_POSITIVE], "kernel": [Options(("linear", "poly", "rbf", "sigmoid"))],
        "gamma": [Options(("scale", "auto")), _NON_NEGATIVE],
        "class_weight": [Options(("balanced",)), None]}
_FOREST = {"n_estimators": [_COUNT], "max_depth": [Interval(Integral, 1, None, closed="left"),
                                                    None],
           "min_samples_leaf": [_COUNT], "max_features": [Options(("sqrt", "log2")), None,
                                                          Interval(Real, 0, 1,
                                                                   closed="right")],
           "class_weight": [Options(("balanced", "balanced_subsample")), None]}
_RECURRENT = {"hidden": [ListOf(_COUNT, min_length=1, what="layer sizes (whole numbers of "
                                                          "at least 1)")],
              "n_windows": [_COUNT], "epochs": [_COUNT], "batch_size": [_COUNT],
              "learning_rate": [_POSITIVE], "weight_decay": [_NON_NEGATIVE]}

LEARNERS: dict[str, Learner] = {
    learner.name: learner
    for learner in (
        Learner("lda", "Linear discriminant analysis, least squares with Ledoit-Wolf "
                "shrinkage of the covariance (suits many correlated features, few windows).",
                {"solver": "lsqr", "shrinkage": "auto"}, _lda,
                label="linear discriminant (shrinkage)",
                constraints={"solver": [Options(("svd", "lsqr", "eigen"))],
                             "shrinkage": [Options(("auto",)), Interval(Real, 0, 1), None]}),
        Learner("logistic", "L2-regularised logistic regression (lbfgs).",
                {"C": 1.0, "max_iter": 5000}, _logistic, label="logistic regression",
                constraints={"C": [_POSITIVE], "max_iter": [_COUNT],
                             "class_weight": [Options(("balanced",)), None]}),
        Learner("linear_svm", "Support vector machine, linear kernel; predictions from its "
                "decision function, probabilities by Platt scaling on 5 inner folds grouped "
                "by participant, so it can vote softly and be stacked.",
                {"kernel": "linear", "C": 1.0}, _svc, grouped=True,
                refused=(("probability", _PLATT),), label="linear SVM", constraints=_SVM),
        Learner("rbf_svm", "Support vector machine, RBF kernel (gamma='scale'); "
                "probabilities by Platt scaling on 5 inner folds grouped by participant.",
                {"kernel": "rbf", "C": 1.0, "gamma": "scale"}, _svc, grouped=True,
                refused=(("probability", _PLATT),), label="RBF SVM", constraints=_SVM),
        Learner("knn", "k nearest neighbours (15, uniform weights, Euclidean).",
                {"n_neighbors": 15}, _knn, label="k nearest neighbours",
                constraints={"n_neighbors": [_COUNT],
                             "weights": [Options(("uniform", "distance"))]}),
        Learner("random_forest", "Random forest of 100 trees.",
                {"n_estimators": 100}, _random_forest, label="random forest",
                constraints=_FOREST),
        Learner("extra_trees", "Extremely randomised trees, 100 trees.",
                {"n_estimators": 100}, _extra_trees, label="extra trees",
                constraints=_FOREST),
        Learner("hist_gradient_boosting", "Histogram gradient boosting, 100 iterations, "
                "no early stopping (its validation share would be windows, not people; and "
                "the same fit whatever the number of rows).",
                {"max_iter": 100, "early_stopping": False}, _hist_gradient_boosting,
                refused=(("early_stopping", _WINDOW_SPLIT),),
                label="histogram gradient boosting",
                constraints={"max_iter": [_COUNT], "learning_rate": [_POSITIVE],
                             "max_depth": [_COUNT, None], "l2_regularization": [_NON_NEGATIVE],
                             "class_weight": [Options(("balanced",)), None]}),
        Learner("mlp", "Multi-layer perceptron, one hidden layer of 32 units, adam (step "
                "0.01), at most 500 epochs, stopping after 20 epochs in which the training "
                "loss gains less than 1e-4 (no early stopping on a validation share: it "
                "would be windows of the training people).",
                {"hidden_layer_sizes": (32,), "alpha": 1e-3, "learning_rate_init": 0.01,
                 "max_iter": 500, "early_stopping": False, "n_iter_no_change": 20}, _mlp,
                refused=(("early_stopping", _WINDOW_SPLIT),), label="small neural network",
                constraints={"hidden_layer_sizes": [ListOf(_COUNT, min_length=1,
                                                           what="layer sizes (whole numbers "
                                                                "of at least 1)")],
                             "alpha": [_NON_NEGATIVE], "learning_rate_init": [_POSITIVE],
                             "max_iter": [_COUNT], "n_iter_no_change": [_COUNT]}),
        *(Learner(name, f"{title} over the sequence of the window and the 4 before it in "
                  "its recording (only windows of its own recording and fold part; a "
                  "recording's first windows padded with its earliest), layers of 64 then "
                  "32 units, a dense head with one unit per class; Adam, 30 epochs, no early "
                  "stopping (PyTorch, CPU; cairn_science.learning.recurrent).",
                  {"hidden": (64, 32), "n_windows": 5, "epochs": 30, "batch_size": 64,
                   "learning_rate": 0.003}, _recurrent(cell, bidirectional),
                  refused=(("cell", _FIXED), ("bidirectional", _FIXED)), label=title,
                  constraints=_RECURRENT)
          for name, title, cell, bidirectional in (
              ("gru", "GRU network", "gru", False), ("lstm", "LSTM network", "lstm", False),
              ("bigru", "bidirectional GRU network", "gru", True),
              ("bilstm", "bidirectional LSTM network", "lstm", True))),
    )
}


def learner_choices() -> list[tuple[str, str]]:
    """(name, label) of every learner, in table order (the training form's list)."""
    return [(name, learner.title) for name, learner in LEARNERS.items()]


def param_problems(name: str, params, *, prefix: str = "params") -> list[Problem]:
    """Every problem of ``params`` for learner ``name``, as (field path, what to give):
    not a dict, an unknown learner, a parameter the estimator does not have, the random
    state, a refused parameter, or a value outside the learner's ``constraints`` (and, for
    a parameter the table does not constrain, scikit-learn's own limits)."""
    if name not in LEARNERS:
        return [Problem("learner", f"give one of {', '.join(LEARNERS)}; got {name!r}")]
    if params is None:
        return []
    if not isinstance(params, dict):
        return [Problem(prefix, f"give the parameters of learner {name!r} as an object "
                                f"(name -> value), not {type(params).__name__}")]
    learner = LEARNERS[name]
    allowed = sorted(learner.factory(0).get_params(deep=False))
    problems = []
    for key in params:
        path = f"{prefix}.{key}"
        if key == "random_state":
            problems.append(Problem(path, f"leave it out: learner {name!r} takes its random "
                                          "state from the run's seed"))
        elif key in dict(learner.refused):
            problems.append(Problem(path, f"leave it out: learner {name!r} does not take "
                                          f"{key!r}: it {dict(learner.refused)[key]}"))
        elif key not in allowed:
            problems.append(Problem(path, f"learner {name!r} has no such parameter; its "
                                          f"parameters are {', '.join(allowed)}"))
    if problems:
        return problems
    problems = validate({k: v for k, v in params.items() if k in learner.constraints},
                        learner.constraints, prefix=prefix)
    rest = {k: v for k, v in params.items() if k not in learner.constraints}
    if rest and not problems:
        problems = _library_problems(learner, rest, prefix)
    return problems


def _library_problems(learner: Learner, params: dict, prefix: str) -> list[Problem]:
    """scikit-learn's own check of parameters the table does not constrain."""
    try:
        from sklearn.utils._param_validation import InvalidParameterError
    except ImportError:  # pragma: no cover - older scikit-learn: checked at fit
        return []
    estimator = learner.factory(0, **{**learner.defaults, **params})
    check_params = getattr(estimator, "_validate_params", None)
    if check_params is None or not hasattr(estimator, "_parameter_constraints"):
        return []  # not a scikit-learn estimator with declared limits: checked at fit
    try:
        check_params()
    except InvalidParameterError as exc:
        text = str(exc)
        key = next((k for k in params if f"{k!r}" in text), None)
        return [Problem(f"{prefix}.{key}" if key else prefix, f"give a valid value: {text}")]
    return []


def make_learner(name: str, params: dict | None = None, *, random_state: int = 0):
    """An unfitted classifier: learner ``name`` with its defaults overridden by ``params``.

    Raises ValueError for an unknown name (listing the known ones), a parameter the
    estimator does not have (naming it and listing the learner's parameters) or one that
    would split windows internally (``Learner.refused``). A ``grouped`` learner comes
    wrapped in :class:`~cairn_science.learning.ensembles.GroupCalibratedClassifier`.
    """
    if name not in LEARNERS:
        raise ValueError(f"learner: unknown learner {name!r}; choose one of "
                         f"{', '.join(LEARNERS)}")
    if params is None:
        params = {}
    if not isinstance(params, dict):
        raise ValueError(f"params: give the parameters of learner {name!r} as a dict "
                         f"(name -> value), got {type(params).__name__}")
    learner = LEARNERS[name]
    allowed = sorted(learner.factory(random_state).get_params(deep=False))
    unknown = [key for key in params if key not in allowed]
    if unknown:
        raise ValueError(f"params: learner {name!r} has no parameter "
                         f"{', '.join(repr(k) for k in unknown)}; its parameters are "
                         f"{', '.join(allowed)}")
    if "random_state" in params:
        raise ValueError(f"params: do not set 'random_state' of learner {name!r} in params; "
                         "it comes from the run's seed (random_state=...)")
    for key, why in learner.refused:
        if key in params:
            raise ValueError(f"params: learner {name!r} does not take {key!r}: it {why}; "
                             "leave it out")
    raise_for(validate({k: v for k, v in params.items() if k in learner.constraints},
                       learner.constraints, prefix="params"))
    estimator = learner.factory(random_state, **{**learner.defaults, **params})
    if learner.grouped:
        from .ensembles import GroupCalibratedClassifier

        return GroupCalibratedClassifier(estimator, n_inner_splits=5,
                                         random_state=random_state)
    return estimator
