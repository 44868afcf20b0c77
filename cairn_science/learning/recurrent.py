"""Recurrent classifiers over a recording's window sequence (GRU, LSTM and their
bidirectional forms), as scikit-learn classifiers, on the CPU with PyTorch.

Input. A recurrent learner classifies a window from the sequence of the ``n_windows``
windows ending at it (itself and the ``n_windows - 1`` before it) of the same recording. It
learns which rows belong together from two key columns that the caller appends to the
feature matrix (:func:`with_sequence_keys`): the recording's id and the window's start (s).
The sequence of a row is built only from the rows the learner is given in that call: at
``fit`` the training rows, at ``predict`` the rows being predicted. So a test row's sequence
holds only windows of its own recording that are in the same part of the fold, never a
window of another recording, participant or part: the keys travel with the rows through
every subset an ensemble makes (bagging draws, stacking's inner folds, a fold's test part).
A recording's first windows, which have fewer than ``n_windows - 1`` predecessors among the
rows given, are padded by repeating the earliest window of that recording (edge padding): no
window is borrowed from another recording and no statistic of other rows is used. A window
given twice (a bagging draw of a participant drawn twice) counts once in the sequences.
The predecessors are the preceding windows among the rows given, in start order: windows
not given (unlabelled ones, windows in rejected segments) are skipped, not filled in.

The two key columns pass through the pipeline's median imputation (they are never missing)
and standardisation (an increasing affine map per column), which keep what the learner reads
from them: which rows share a recording (equal values stay equal) and their order in time.
The learner never uses them as features. In a stacking that mixes recurrent and feature
learners, each feature learner is wrapped in :class:`CurrentWindow`, which drops the keys.

Network. ``hidden`` recurrent layers (e.g. (64, 32): a layer of 64 units feeding a layer of
32), each a GRU or LSTM, bidirectional when asked; the last layer's final hidden state (for a
bidirectional layer: the forward direction's after the last window and the backward
direction's after the first, concatenated) feeds a dense head with one unit per class
(softmax, cross-entropy). Adam, a fixed number of epochs on minibatches shuffled by
``random_state``. No early stopping and no validation split inside the learner: a split of
windows would put a participant on both sides, and the learner does not know participants
(the number of epochs is a parameter; the run's outer folds judge it).

CPU only, deterministic on one machine: the seed fixes the initial weights (PyTorch's
generator, forked so the process's own stream is untouched) and the minibatch order;
PyTorch's deterministic algorithms are on during fit and predict; the thread count is
``CAIRN_WORKER_THREADS`` (``torch.set_num_threads``).

Releases. The fitted weights are kept as numpy arrays (``weights_``: parameter name ->
array), not as PyTorch objects; the network is rebuilt from them at prediction. A release
holding a recurrent learner saves and loads with skops like any other: the types to trust
are this module's classes (``cairn_science.learning.recurrent.RecurrentClassifier`` and,
in a mixed stacking, ``...CurrentWindow``); nothing of PyTorch is stored. PyTorch is imported
only when a network is fitted or run.

These classes must stay importable as ``cairn_science.learning.recurrent.<name>``: a skops
release names them by that path.
"""

from __future__ import annotations

import numbers
from typing import Any

import numpy as np
from sklearn.base import BaseEstimator, ClassifierMixin, clone
from sklearn.utils import check_random_state
from sklearn.utils.metaestimators import available_if
from sklearn.utils.multiclass import check_classification_targets
from sklearn.utils.validation import check_is_fitted, has_fit_parameter, validate_data

#: Columns appended after the features: the recording's id, the window's start (s).
N_KEYS = 2
CELLS = ("gru", "lstm")
MAX_INT = np.iinfo(np.int32).max


def with_sequence_keys(X: Any, recordings: Any, starts: Any) -> np.ndarray:
    """``X`` with the two key columns a recurrent learner reads appended: the id of each
    row's recording (any number, equal for rows of one recording) and its window start."""
    X = np.asarray(X, dtype=float)
    recordings = np.asarray(recordings, dtype=float).reshape(-1)
    starts = np.asarray(starts, dtype=float).reshape(-1)
    if not (X.ndim == 2 and recordings.size == starts.size == X.shape[0]):
        raise ValueError(f"sequence keys: give one recording id and one window start per row "
                         f"of X ({X.shape[0] if X.ndim else 0} rows), got {recordings.size} "
                         f"and {starts.size}")
    if not (np.isfinite(recordings).all() and np.isfinite(starts).all()):
        raise ValueError("sequence keys: recording ids and window starts must be finite numbers")
    return np.column_stack([X, recordings, starts])


def sequence_rows(recordings: Any, starts: Any, n_windows: int) -> np.ndarray:
    """(n_rows, n_windows) row indices: row i's sequence, oldest first, ending at a row of
    i's own window. Only rows with i's recording id take part; missing predecessors are the
    recording's earliest window repeated (edge padding); rows with the same (recording,
    start) are one window (the first of them stands for it)."""
    recordings = np.asarray(recordings)
    starts = np.asarray(starts)
    n = recordings.size
    out = np.empty((n, n_windows), dtype=np.intp)
    order = np.lexsort((np.arange(n), starts, recordings))
    recs, sts = recordings[order], starts[order]
    cuts = np.flatnonzero(recs[1:] != recs[:-1]) + 1
    for part in np.split(np.arange(n), cuts):
        rows = order[part]
        new_window = np.r_[True, sts[part][1:] != sts[part][:-1]]
        windows = rows[new_window]            # one row per window, in time order
        position = np.cumsum(new_window) - 1  # each row's window number in its recording
        for lag in range(n_windows):
            out[rows, lag] = windows[np.maximum(position - (n_windows - 1 - lag), 0)]
    return out


def _split(X):
    if X.shape[1] <= N_KEYS:
        raise ValueError(f"X: a recurrent learner needs feature columns followed by {N_KEYS} "
                         f"sequence-key columns (recording id, window start; see "
                         f"with_sequence_keys), got {X.shape[1]} column(s)")
    return X[:, :-N_KEYS], X[:, -N_KEYS], X[:, -N_KEYS + 1]


def _check_int(value, field, minimum):
    if isinstance(value, bool) or not isinstance(value, numbers.Integral) or value < minimum:
        raise ValueError(f"{field}: give a whole number >= {minimum}, got {value!r}")
    return int(value)


def _check_positive(value, field, allow_zero=False):
    if (isinstance(value, bool) or not isinstance(value, numbers.Real)
            or not np.isfinite(value) or value < 0 or (value == 0 and not allow_zero)):
        raise ValueError(f"{field}: give a number {'>= 0' if allow_zero else '> 0'}, "
                         f"got {value!r}")
    return float(value)


_NET = {}


def _net_class():
    """The PyTorch module (defined on first use, so importing this module needs no torch)."""
    if "class" not in _NET:
        import torch
        from torch import nn

        class SequenceNet(nn.Module):
            def __init__(self, cell, bidirectional, n_inputs, hidden, n_classes):
                super().__init__()
                rnn = nn.GRU if cell == "gru" else nn.LSTM
                layers, size = [], n_inputs
                for units in hidden:
                    layers.append(rnn(size, units, batch_first=True,
                                      bidirectional=bidirectional))
                    size = units * (2 if bidirectional else 1)
                self.layers = nn.ModuleList(layers)
                self.head = nn.Linear(size, n_classes)

            def forward(self, x):
                for layer in self.layers:
                    x, state = layer(x)
                h_n = state[0] if isinstance(state, tuple) else state  # LSTM: (h_n, c_n)
                return self.head(torch.cat(list(h_n), dim=1))

        _NET["class"] = SequenceNet
    return _NET["class"]


class _Torch:
    """PyTorch set for one fit or prediction: threads from CAIRN_WORKER_THREADS,
    deterministic algorithms on, the process's random stream forked (restored on exit)."""

    def __init__(self, seed=None):
        self.seed = seed

    def __enter__(self):
        import torch

        from cairn_science.runtime import worker_threads

        self.torch = torch
        self.threads = torch.get_num_threads()
        torch.set_num_threads(worker_threads())
        self.deterministic = torch.are_deterministic_algorithms_enabled()
        torch.use_deterministic_algorithms(True)
        self.fork = torch.random.fork_rng(devices=[])
        self.fork.__enter__()
        if self.seed is not None:
            torch.manual_seed(self.seed)
        return torch

    def __exit__(self, *exc):
        self.fork.__exit__(*exc)
        self.torch.use_deterministic_algorithms(self.deterministic)
        self.torch.set_num_threads(self.threads)
        return False


class RecurrentClassifier(ClassifierMixin, BaseEstimator):
    """A GRU or LSTM classifier of a window from the sequence of windows ending at it.

    Parameters
    ----------
    cell : ``"gru"`` or ``"lstm"``.
    bidirectional : each recurrent layer reads the sequence both ways.
    hidden : units of each recurrent layer, first to last (e.g. ``(64, 32)``).
    n_windows : length k of each row's sequence (the window and the k - 1 before it).
    epochs : passes over the training rows (no early stopping; see the module docstring).
    batch_size : rows per Adam step.
    learning_rate, weight_decay : Adam's.
    random_state : int, RandomState or None: the initial weights and minibatch order.

    ``X`` is features followed by the two key columns of :func:`with_sequence_keys`.

    Attributes: ``classes_``, ``n_features_in_`` (features + 2 keys), ``weights_``
    (parameter name -> numpy array), ``loss_curve_`` (mean training loss per epoch),
    ``seed_``.
    """

    def __init__(self, cell: str = "gru", bidirectional: bool = False,
                 hidden: tuple[int, ...] | list[int] = (64, 32), n_windows: int = 5,
                 epochs: int = 30, batch_size: int = 64, learning_rate: float = 0.003,
                 weight_decay: float = 0.0, random_state: Any = None):
        self.cell = cell
        self.bidirectional = bidirectional
        self.hidden = hidden
        self.n_windows = n_windows
        self.epochs = epochs
        self.batch_size = batch_size
        self.learning_rate = learning_rate
        self.weight_decay = weight_decay
        self.random_state = random_state

    def _checked(self):
        if self.cell not in CELLS:
            raise ValueError(f"cell: choose one of {', '.join(map(repr, CELLS))}, "
                             f"got {self.cell!r}")
        if not isinstance(self.bidirectional, bool | np.bool_):
            raise ValueError(f"bidirectional: give True or False, got {self.bidirectional!r}")
        hidden = self.hidden
        if isinstance(hidden, numbers.Integral) and not isinstance(hidden, bool):
            hidden = (hidden,)
        if not isinstance(hidden, list | tuple) or not hidden:
            raise ValueError(f"hidden: give the units of each recurrent layer, e.g. (64, 32), "
                             f"got {self.hidden!r}")
        hidden = tuple(_check_int(h, "hidden", 1) for h in hidden)
        return {"hidden": hidden, "n_windows": _check_int(self.n_windows, "n_windows", 1),
                "epochs": _check_int(self.epochs, "epochs", 1),
                "batch_size": _check_int(self.batch_size, "batch_size", 1),
                "learning_rate": _check_positive(self.learning_rate, "learning_rate"),
                "weight_decay": _check_positive(self.weight_decay, "weight_decay",
                                                allow_zero=True)}

    def _sequences(self, X, n_windows):
        features, recordings, starts = _split(X)
        return features[sequence_rows(recordings, starts, n_windows)].astype(np.float32)

    def _net(self, n_inputs, hidden):
        return _net_class()(self.cell, bool(self.bidirectional), n_inputs, hidden,
                            self.classes_.size)

    def fit(self, X: Any, y: Any) -> RecurrentClassifier:
        params = self._checked()
        X, y = validate_data(self, X, y, dtype=np.float64)
        check_classification_targets(y)
        self.classes_, codes = np.unique(y, return_inverse=True)
        if self.classes_.size < 2:
            raise ValueError(f"y: a classifier needs at least 2 classes, got 1 "
                             f"({self.classes_[0]!r}); give rows of every class")
        sequences = self._sequences(X, params["n_windows"])
        self.seed_ = int(check_random_state(self.random_state).randint(MAX_INT))
        order_rng = np.random.RandomState(self.seed_)
        with _Torch(self.seed_) as torch:
            net = self._net(sequences.shape[2], params["hidden"])
            optimiser = torch.optim.Adam(net.parameters(), lr=params["learning_rate"],
                                         weight_decay=params["weight_decay"])
            inputs = torch.from_numpy(sequences)
            targets = torch.from_numpy(codes.astype(np.int64))
            n, size = len(codes), params["batch_size"]
            self.loss_curve_ = []
            net.train()
            for _ in range(params["epochs"]):
                shuffled = torch.from_numpy(order_rng.permutation(n))
                total = 0.0
                for start in range(0, n, size):
                    batch = shuffled[start:start + size]
                    optimiser.zero_grad()
                    loss = torch.nn.functional.cross_entropy(net(inputs[batch]),
                                                             targets[batch])
                    loss.backward()
                    optimiser.step()
                    total += float(loss.detach()) * len(batch)
                self.loss_curve_.append(total / n)
            self.weights_ = {name: value.detach().numpy().copy()
                             for name, value in net.state_dict().items()}
        return self

    def predict_proba(self, X: Any) -> np.ndarray:
        """Class probabilities (softmax of the head, in float64), one row per row of X, each
        from the row's sequence among the rows of X."""
        check_is_fitted(self, "weights_")
        params = self._checked()
        X = validate_data(self, X, dtype=np.float64, reset=False)
        sequences = self._sequences(X, params["n_windows"])
        with _Torch() as torch:
            net = self._net(sequences.shape[2], params["hidden"])
            net.load_state_dict({name: torch.from_numpy(np.array(value, copy=True))
                                 for name, value in self.weights_.items()})
            net.eval()
            with torch.no_grad():
                logits = net(torch.from_numpy(sequences)).numpy().astype(np.float64)
        logits -= logits.max(axis=1, keepdims=True)  # softmax in float64: rows sum to 1
        probabilities = np.exp(logits)
        return probabilities / probabilities.sum(axis=1, keepdims=True)

    def predict(self, X: Any) -> np.ndarray:
        return self.classes_.take(np.argmax(self.predict_proba(X), axis=1))


def _inner_has(name):
    return lambda self: hasattr(self.estimator, name)


class CurrentWindow(ClassifierMixin, BaseEstimator):
    """A feature learner beside recurrent ones: ``estimator`` fitted and run on the features
    of each row alone, the two sequence-key columns dropped. ``fit`` passes ``groups`` on
    when the estimator takes them."""

    def __init__(self, estimator: Any):
        self.estimator = estimator

    def fit(self, X: Any, y: Any, groups: Any = None) -> CurrentWindow:
        X = validate_data(self, X, dtype=None, ensure_all_finite=False)
        kwargs = ({"groups": groups} if groups is not None
                  and has_fit_parameter(self.estimator, "groups") else {})
        self.estimator_ = clone(self.estimator).fit(_split(X)[0], y, **kwargs)
        self.classes_ = self.estimator_.classes_
        return self

    def _features(self, X):
        check_is_fitted(self, "estimator_")
        return _split(validate_data(self, X, dtype=None, ensure_all_finite=False,
                                    reset=False))[0]

    def predict(self, X: Any) -> np.ndarray:
        return self.estimator_.predict(self._features(X))

    @available_if(_inner_has("predict_proba"))
    def predict_proba(self, X: Any) -> np.ndarray:
        return self.estimator_.predict_proba(self._features(X))

    @available_if(_inner_has("decision_function"))
    def decision_function(self, X: Any) -> np.ndarray:
        return self.estimator_.decision_function(self._features(X))


def reads_sequences(estimator: Any) -> bool:
    """True for an (unfitted) learner that reads sequence keys."""
    return isinstance(estimator, RecurrentClassifier)


def uses_sequences(model: Any) -> bool:
    """True when a ModelSpec has a recurrent learner (alone, bagged or among the members of
    a stacking): its input needs the sequence keys."""
    from .learners import make_learner

    return any(reads_sequences(make_learner(name, random_state=0))
               for name in model.base_learners)


def confine_members(members: list[tuple[str, Any]]) -> list[tuple[str, Any]]:
    """A stacking's (name, learner) list: when any member reads sequences, every member that
    does not is wrapped in :class:`CurrentWindow` (it must not see the keys)."""
    if not any(reads_sequences(estimator) for _, estimator in members):
        return members
    return [(name, estimator if reads_sequences(estimator) else CurrentWindow(estimator))
            for name, estimator in members]


def release_inputs(estimator: Any, values: Any, starts: Any) -> np.ndarray:
    """A release's model inputs for one recording: ``values`` (windows x the release's
    columns), with the sequence keys appended (one recording; the windows' starts) when the
    model was fitted with them (it takes 2 more columns than the release lists)."""
    values = np.asarray(values, dtype=float)
    if getattr(estimator, "n_features_in_", None) == values.shape[1] + N_KEYS:
        return with_sequence_keys(values, np.zeros(values.shape[0]), starts)
    return values
