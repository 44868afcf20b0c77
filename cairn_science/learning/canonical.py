"""A fitted model's identity and its release file.

``model_digest`` hashes what a fitted model *is*, not how one file stores it: two skops dumps
of one model differ byte-wise (zip member names come from object ids, the archive carries
timestamps), so the file's bytes cannot identify the model. The digest walks the object
graph instead and feeds every leaf to SHA-256 with a type tag and a length, containers in a
fixed order (mappings by sorted key):

- scikit-learn estimators: class path, ``get_params(deep=False)``, then every instance
  attribute -- the fitted ones ending in ``_`` and the private ones some estimators keep
  their fit in (e.g. ``SVC._dual_coef_``, ``_probA``; ``HistGradientBoostingClassifier.
  _predictors``);
- numpy arrays: dtype, shape and C-order bytes; structured arrays field by field (so padding
  bytes, which may hold anything, are never read); object arrays element by element;
- lists, tuples, dicts, sets, scalars, strings, bytes, classes and functions (by path);
- anything else through its pickle protocol (``__reduce_ex__``): the reconstructor's path,
  its arguments and the ``__getstate__`` state -- this is how scikit-learn's Cython ``Tree``
  (its node and value arrays) is read; k-NN's search trees (``KDTree``, ``BallTree``) the
  same way but without their query counters, which every prediction changes;
- numpy random generators by their state only (not the seed sequence they were made from).

Same fit twice -> same digest; a model loaded from a skops file -> the digest of the model
dumped. ``skops_bytes`` / ``load_release`` / ``trusted_types`` wrap ``skops.io`` with an
explicit trusted list: loading never trusts a type the caller did not name.
"""

from __future__ import annotations

import hashlib
import importlib
import sys
import types
from typing import TYPE_CHECKING

import numpy as np

if TYPE_CHECKING:
    from sklearn.base import BaseEstimator

_FUNCTION_TYPES = (types.FunctionType, types.BuiltinFunctionType, types.MethodType,
                   types.BuiltinMethodType, type)


def _path(obj):
    return f"{getattr(obj, '__module__', '?')}.{getattr(obj, '__qualname__', repr(obj))}"


class _Walker:
    def __init__(self):
        self.hash = hashlib.sha256()
        self.active = []  # ids of the containers being walked, for reference cycles

    def token(self, tag, payload=b""):
        self.hash.update(tag + len(payload).to_bytes(8, "little") + payload)

    def text(self, tag, value):
        self.token(tag, value.encode("utf-8", "surrogatepass"))

    def walk(self, obj):
        if obj is None or obj is Ellipsis:
            self.text(b"N", repr(obj))
        elif isinstance(obj, np.ndarray):
            self.array(obj)
        elif isinstance(obj, np.generic):
            self.array(np.asarray(obj))
        elif isinstance(obj, np.dtype):
            self.text(b"t", repr(obj))
        elif isinstance(obj, bool):
            self.text(b"B", repr(obj))
        elif isinstance(obj, int):
            self.text(b"I", repr(int(obj)))
        elif isinstance(obj, float):
            self.text(b"F", float(obj).hex())
        elif isinstance(obj, complex):
            self.text(b"Z", f"{obj.real.hex()},{obj.imag.hex()}")
        elif isinstance(obj, str):
            self.text(b"S", obj)
        elif isinstance(obj, bytes | bytearray | memoryview):
            self.token(b"Y", bytes(obj))
        elif isinstance(obj, _FUNCTION_TYPES):
            self.text(b"C", _path(obj))
        else:
            self.container(obj)

    def array(self, arr):
        self.text(b"A", f"{arr.dtype.str}|{arr.shape}")
        if arr.dtype.names is not None:
            for name in arr.dtype.names:
                self.text(b"f", name)
                self.walk(np.ascontiguousarray(arr[name]))
        elif arr.dtype.hasobject:
            for item in arr.ravel(order="C"):
                self.walk(item)
        else:
            self.token(b"a", np.ascontiguousarray(arr).tobytes())

    def container(self, obj):
        if id(obj) in self.active:
            self.text(b"R", str(len(self.active) - self.active.index(id(obj))))
            return
        self.active.append(id(obj))
        try:
            self.compound(obj)
        finally:
            self.active.pop()

    def items(self, tag, pairs):
        """Mapping entries in sorted key order (keys not all strings: by the keys' digests)."""
        pairs = list(pairs)
        if all(isinstance(k, str) for k, _ in pairs):
            keyed = sorted(((k, k, v) for k, v in pairs), key=lambda t: t[0])
        else:
            keyed = sorted(((digest_of(k), k, v) for k, v in pairs), key=lambda t: t[0])
        self.text(tag, str(len(keyed)))
        for _, key, value in keyed:
            self.walk(key)
            self.walk(value)

    def compound(self, obj):
        from sklearn.base import BaseEstimator

        if isinstance(obj, list | tuple):
            self.text(b"L" if isinstance(obj, list) else b"T", str(len(obj)))
            if type(obj) not in (list, tuple):
                self.text(b"c", _path(type(obj)))
            for item in obj:
                self.walk(item)
        elif isinstance(obj, dict):
            if type(obj) is not dict:
                self.text(b"c", _path(type(obj)))
            self.items(b"D", obj.items())
        elif isinstance(obj, set | frozenset):
            self.text(b"Q", str(len(obj)))
            for key in sorted(digest_of(item) for item in obj):
                self.text(b"q", key)
        elif isinstance(obj, BaseEstimator):
            self.text(b"E", _path(type(obj)))
            self.items(b"P", obj.get_params(deep=False).items())
            self.items(b"V", vars(obj).items())
        elif _is_neighbors_tree(obj):
            self.text(b"O", _path(type(obj)))
            self.walk(_neighbors_tree_state(obj))
        elif isinstance(obj, np.random.RandomState | np.random.Generator
                        | np.random.BitGenerator):
            # Only the generator's state decides its future draws. Its pickle also carries the
            # seed sequence it was made from, which a loaded copy draws afresh from the OS.
            self.text(b"O", _path(type(obj)))
            if isinstance(obj, np.random.RandomState):
                self.walk(obj.get_state(legacy=False))
            elif isinstance(obj, np.random.Generator):
                self.walk(obj.bit_generator.state)
            else:
                self.walk(obj.state)
        else:
            self.reduced(obj)

    def reduced(self, obj):
        self.text(b"O", _path(type(obj)))
        try:
            parts = obj.__reduce_ex__(4)
        except Exception:  # not picklable: nothing but its class can be said of it
            return
        if isinstance(parts, str):  # a module-level singleton, named by its path
            self.text(b"s", parts)
            return
        parts = list(parts) + [None] * (5 - len(parts))
        constructor, args, state, list_items, dict_items = parts[:5]
        self.text(b"C", _path(constructor))
        self.walk(tuple(args or ()))
        self.walk(state)
        self.walk(list(list_items) if list_items is not None else None)
        self.walk(dict(dict_items) if dict_items is not None else None)


def _is_neighbors_tree(obj):
    from sklearn.neighbors import BallTree, KDTree

    return isinstance(obj, KDTree | BallTree)


def _neighbors_tree_state(tree):
    """A k-NN search tree's pickled state without its query counters (``get_tree_stats()``
    and ``get_n_calls()``): every query changes them, the model stays the same."""
    state = list(tree.__getstate__())
    counters = (*tree.get_tree_stats(), tree.get_n_calls())
    if tuple(state[7:11]) != counters:
        raise RuntimeError(f"model_digest: the pickled state of {_path(type(tree))} is not "
                           "laid out as in scikit-learn 1.9 (query counters at 7-10); update "
                           "cairn_science/learning/canonical.py for this scikit-learn version")
    state[7:11] = [0, 0, 0, 0]
    return tuple(state)


def digest_of(obj: object) -> str:
    walker = _Walker()
    walker.walk(obj)
    return walker.hash.hexdigest()


def model_digest(estimator: BaseEstimator) -> str:
    """SHA-256 (hex) of the canonical content of a (fitted) model; see the module docstring."""
    return digest_of(estimator)


def skops_bytes(estimator: BaseEstimator) -> bytes:
    """The release file of a fitted model (``skops.io.dumps``)."""
    import skops.io

    return skops.io.dumps(estimator)


def trusted_types(data: bytes) -> list[str]:
    """The types in a release that skops does not trust by default: the list a person must
    review before passing it to :func:`load_release`."""
    import skops.io

    return list(skops.io.get_untrusted_types(data=data))


#: The package's import name before it became ``cairn_science``: releases saved then name their
#: own types (the participant-grouped ensembles) under it, and still load.
FORMER_PACKAGE = "workers"


def alias_former_names(trusted: list[str]) -> None:
    """Make ``workers.<module>`` import as ``cairn_science.<module>`` for every trusted type of
    a release saved before the rename. Only modules of this package are aliased, only when
    such a type is trusted, and never over a module of that name that is already loaded."""
    prefix = FORMER_PACKAGE + "."
    for name in trusted:
        if not name.startswith(prefix):
            continue
        parts = name.split(".")[:-1]
        for depth in range(1, len(parts) + 1):
            old = ".".join(parts[:depth])
            if old in sys.modules:
                continue
            new = ".".join(["cairn_science", *parts[1:depth]])
            try:
                sys.modules[old] = importlib.import_module(new)
            except ImportError:
                break


def load_release(data: bytes, trusted: list[str]) -> BaseEstimator:
    """Load a release file, trusting exactly the types named in ``trusted`` (besides skops'
    defaults). Raises ValueError naming every type the file needs that is not in the list."""
    import skops.io

    if isinstance(trusted, str) or not all(isinstance(t, str) for t in trusted or []):
        raise ValueError("trusted: give a list of full type names (strings), e.g. the "
                         "reviewed output of trusted_types(data)")
    trusted = list(trusted or [])
    missing = [name for name in trusted_types(data) if name not in trusted]
    if missing:
        raise ValueError(f"trusted: the release needs types that are not in the trusted "
                         f"list: {', '.join(missing)}; review them and add them to trusted")
    alias_former_names(trusted)
    return skops.io.loads(data, trusted=trusted)
