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

from collections.abc import Callable
from dataclasses import dataclass


@dataclass(frozen=True)
class Learner:
    """One learner: ``factory(random_state, **params)`` returns an unfitted classifier.
    ``grouped``: wrapped so that its probabilities come from participant-grouped inner folds
    (fit needs ``groups``); ``refused``: parameters that would split windows internally."""

    name: str
    description: str
    defaults: dict
    factory: Callable
    grouped: bool = False
    refused: tuple = ()


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


LEARNERS: dict[str, Learner] = {
    learner.name: learner
    for learner in (
        Learner("lda", "Linear discriminant analysis, least squares with Ledoit-Wolf "
                "shrinkage of the covariance (suits many correlated features, few windows).",
                {"solver": "lsqr", "shrinkage": "auto"}, _lda),
        Learner("logistic", "L2-regularised logistic regression (lbfgs).",
                {"C": 1.0, "max_iter": 5000}, _logistic),
        Learner("linear_svm", "Support vector machine, linear kernel; predictions from its "
                "decision function, probabilities by Platt scaling on 5 inner folds grouped "
                "by participant, so it can vote softly and be stacked.",
                {"kernel": "linear", "C": 1.0}, _svc, grouped=True,
                refused=(("probability", _PLATT),)),
        Learner("rbf_svm", "Support vector machine, RBF kernel (gamma='scale'); "
                "probabilities by Platt scaling on 5 inner folds grouped by participant.",
                {"kernel": "rbf", "C": 1.0, "gamma": "scale"}, _svc, grouped=True,
                refused=(("probability", _PLATT),)),
        Learner("knn", "k nearest neighbours (15, uniform weights, Euclidean).",
                {"n_neighbors": 15}, _knn),
        Learner("random_forest", "Random forest of 100 trees.",
                {"n_estimators": 100}, _random_forest),
        Learner("extra_trees", "Extremely randomised trees, 100 trees.",
                {"n_estimators": 100}, _extra_trees),
        Learner("hist_gradient_boosting", "Histogram gradient boosting, 100 iterations, "
                "no early stopping (its validation share would be windows, not people; and "
                "the same fit whatever the number of rows).",
                {"max_iter": 100, "early_stopping": False}, _hist_gradient_boosting,
                refused=(("early_stopping", _WINDOW_SPLIT),)),
        Learner("mlp", "Multi-layer perceptron, one hidden layer of 32 units, adam (step "
                "0.01), at most 500 epochs, stopping after 20 epochs in which the training "
                "loss gains less than 1e-4 (no early stopping on a validation share: it "
                "would be windows of the training people).",
                {"hidden_layer_sizes": (32,), "alpha": 1e-3, "learning_rate_init": 0.01,
                 "max_iter": 500, "early_stopping": False, "n_iter_no_change": 20}, _mlp,
                refused=(("early_stopping", _WINDOW_SPLIT),)),
    )
}


def make_learner(name, params=None, *, random_state=0):
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
    estimator = learner.factory(random_state, **{**learner.defaults, **params})
    if learner.grouped:
        from .ensembles import GroupCalibratedClassifier

        return GroupCalibratedClassifier(estimator, n_inner_splits=5,
                                         random_state=random_state)
    return estimator
