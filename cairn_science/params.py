"""Declarative limits of the science's parameter objects, checked in one place.

A parameter object (a frozen dataclass such as
:class:`~cairn_science.signal.prepare.PrepSettings`) names the values each of its fields
takes in a class attribute ``_parameter_constraints``: ``{field: [constraint, ...]}``, where
a value is valid when it satisfies any one of the field's constraints. A constraint is an
:class:`Interval` (numbers between two bounds, each open or closed), :class:`Options` (one
of a set of values), :class:`InstanceOf` (a type), :class:`ListOf` (a list whose items
satisfy a constraint) or ``None`` (the value may be null). Rules that tie fields together
go in ``_parameter_checks``: functions of the values that yield (field, message) pairs;
they run only when every field is valid on its own.

:func:`validate` returns every problem of an object or of a plain dict of its fields as a
:class:`Problem` (the field's path and a message saying what to give), so that a web form,
an API answer and a worker report the same words. Nothing here imports Django.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Callable, Iterable, Mapping
from numbers import Integral, Real
from typing import Any, NamedTuple

__all__ = [
    "Integral",
    "InstanceOf",
    "Interval",
    "ListOf",
    "Options",
    "ParamError",
    "Problem",
    "Real",
    "check",
    "constraints_of",
    "defaults_of",
    "describe",
    "raise_for",
    "validate",
]


class Problem(NamedTuple):
    """One invalid value: ``field`` is its path (e.g. ``validation.n_splits``), ``message``
    says what to give instead."""

    field: str
    message: str

    def __str__(self) -> str:
        return f"{self.field}: {self.message}"


class ParamError(ValueError):
    """Invalid parameters; ``problems`` lists every one (field path, what to give)."""

    def __init__(self, problems: Iterable[Problem]):
        self.problems = list(problems)
        super().__init__("; ".join(str(p) for p in self.problems))

    @property
    def errors(self) -> dict[str, list[str]]:
        """{field path: [messages]}, in the order the problems were found."""
        return errors_by_field(self.problems)


def errors_by_field(problems: Iterable[Problem]) -> dict[str, list[str]]:
    out: dict[str, list[str]] = {}
    for problem in problems:
        out.setdefault(problem.field, []).append(problem.message)
    return out


def _show(value: Any) -> str:
    if value is None:
        return "null"
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, float) and value == int(value) and abs(value) < 1e15:
        return f"{value:g}"
    return repr(value)


def _is_real(value: Any) -> bool:
    return isinstance(value, Real) and not isinstance(value, bool)


def _is_integral(value: Any) -> bool:
    return isinstance(value, Integral) and not isinstance(value, bool)


class Interval:
    """Numbers of ``kind`` (``Real`` or ``Integral``) between ``left`` and ``right`` (None:
    unbounded); ``closed`` is "left", "right", "both" or "neither" (which bounds belong to
    the interval). Booleans and non-finite numbers are never numbers here."""

    def __init__(self, kind: type, left: float | None, right: float | None, *,
                 closed: str = "both"):
        if kind not in (Real, Integral):
            raise TypeError("Interval kind must be numbers.Real or numbers.Integral")
        if closed not in ("left", "right", "both", "neither"):
            raise ValueError("closed must be 'left', 'right', 'both' or 'neither'")
        if left is not None and right is not None and left > right:
            raise ValueError(f"Interval left bound {left} is above its right bound {right}")
        self.kind, self.left, self.right, self.closed = kind, left, right, closed

    def is_satisfied_by(self, value: Any) -> bool:
        if not (_is_integral(value) if self.kind is Integral else _is_real(value)):
            return False
        if not math.isfinite(float(value)):
            return False
        if self.left is not None:
            if value < self.left or (value == self.left and self.closed in ("right", "neither")):
                return False
        if self.right is not None:
            if value > self.right or (value == self.right and self.closed in ("left",
                                                                               "neither")):
                return False
        return True

    def describe(self) -> str:
        noun = "a whole number" if self.kind is Integral else "a number"
        left_in = self.closed in ("left", "both")
        right_in = self.closed in ("right", "both")
        lo, hi = self.left, self.right
        if lo is None and hi is None:
            return noun
        if hi is None:
            return f"{noun} of at least {_show(lo)}" if left_in else f"{noun} above {_show(lo)}"
        if lo is None:
            return f"{noun} of at most {_show(hi)}" if right_in else f"{noun} below {_show(hi)}"
        if left_in and right_in:
            return f"{noun} from {_show(lo)} to {_show(hi)}"
        low = f"at least {_show(lo)}" if left_in else f"above {_show(lo)}"
        high = f"at most {_show(hi)}" if right_in else f"below {_show(hi)}"
        return f"{noun} {low} and {high}"

    def __repr__(self) -> str:
        return (f"Interval({self.kind.__name__}, {self.left!r}, {self.right!r}, "
                f"closed={self.closed!r})")


class Options:
    """One of ``values`` (their order is the order shown). ``values`` may be a live mapping
    such as a table of learners: its keys at the time of the check are the options."""

    def __init__(self, values: Iterable[Any] | Mapping[str, Any]):
        self.values = values

    def options(self) -> list[Any]:
        return list(self.values.keys() if isinstance(self.values, Mapping) else self.values)

    def is_satisfied_by(self, value: Any) -> bool:
        try:
            return any(value == option and type(value) is type(option)
                       for option in self.options())
        except TypeError:
            return False

    def describe(self) -> str:
        shown = [_show(option) for option in self.options()]
        return shown[0] if len(shown) == 1 else f"one of {', '.join(shown)}"

    def __repr__(self) -> str:
        return f"Options({self.options()!r})"


class InstanceOf:
    """A value of ``kind`` (``bool`` is no ``int`` here), described as ``what``."""

    def __init__(self, kind: type | tuple[type, ...], what: str):
        self.kind, self.what = kind, what

    def is_satisfied_by(self, value: Any) -> bool:
        if isinstance(value, bool) and self.kind is not bool and (
                not isinstance(self.kind, tuple) or bool not in self.kind):
            return False
        return isinstance(value, self.kind)

    def describe(self) -> str:
        return self.what

    def __repr__(self) -> str:
        return f"InstanceOf({self.kind!r}, {self.what!r})"


class ListOf:
    """A list (or tuple) of at least ``min_length`` items, each satisfying ``item``."""

    def __init__(self, item: Any, *, min_length: int = 0, what: str | None = None):
        self.item, self.min_length, self.what = item, min_length, what

    def is_satisfied_by(self, value: Any) -> bool:
        return (isinstance(value, list | tuple) and len(value) >= self.min_length
                and all(_satisfies(self.item, v) for v in value))

    def describe(self) -> str:
        items = self.what or (describe([self.item]) + " each")
        if self.min_length:
            return f"a list of at least {self.min_length} {items}"
        return f"a list of {items}"

    def __repr__(self) -> str:
        return f"ListOf({self.item!r}, min_length={self.min_length})"


def _satisfies(constraint: Any, value: Any) -> bool:
    if constraint is None:
        return value is None
    return constraint.is_satisfied_by(value)


def describe(constraints: list[Any]) -> str:
    """What a field takes, in words: its constraints' descriptions joined by "or"."""
    parts = ["null" if c is None else c.describe() for c in constraints]
    return " or ".join(parts)


def constraints_of(owner: Any) -> dict[str, list[Any]]:
    """The ``_parameter_constraints`` of a parameter class or object, or ``owner`` itself
    when it is such a dict."""
    if isinstance(owner, Mapping):
        return dict(owner)
    return dict(owner._parameter_constraints)


def defaults_of(cls: type) -> dict[str, Any]:
    """{field: default} of a dataclass's fields that have one (one place for defaults)."""
    out = {}
    for item in dataclasses.fields(cls):
        if item.default is not dataclasses.MISSING:
            out[item.name] = item.default
        elif item.default_factory is not dataclasses.MISSING:
            out[item.name] = item.default_factory()
    return out


def _join(prefix: str, name: str) -> str:
    return f"{prefix}.{name}" if prefix else name


def validate(obj_or_dict: Any, owner: Any = None, *, prefix: str = "",
             refuse_unknown: bool = True, defaults: bool = True) -> list[Problem]:
    """Every problem of a parameter object, or of a plain dict of its fields.

    ``obj_or_dict`` is an object with ``_parameter_constraints`` (its fields are read as
    attributes) or a dict; a dict is checked against ``owner`` (a parameter class, an
    object, or a dict of constraints). For a dict, a field that is left out takes the
    owner's default when ``defaults`` (a dataclass's defaults) before the cross-field
    checks, and keys the owner does not know are problems when ``refuse_unknown``.
    ``prefix`` is put before each field path (e.g. "validation"). Returns a list of
    :class:`Problem`, empty when everything is valid.
    """
    if isinstance(obj_or_dict, Mapping):
        if owner is None:
            raise TypeError("validate(dict) needs the owner: a parameter class or constraints")
        constraints = constraints_of(owner)
        values = dict(obj_or_dict)
        problems = []
        if refuse_unknown:
            unknown = [key for key in values if key not in constraints]
            for key in unknown:
                problems.append(Problem(_join(prefix, str(key)),
                                        f"unknown setting; known: {', '.join(constraints)}"))
        cls = owner if isinstance(owner, type) else type(owner)
        if defaults and dataclasses.is_dataclass(cls):
            values = {**defaults_of(cls), **values}
    else:
        owner = obj_or_dict if owner is None else owner
        constraints = constraints_of(owner)
        values = {name: getattr(obj_or_dict, name) for name in constraints}
        problems = []
    for name, allowed in constraints.items():
        if name not in values:
            continue
        value = values[name]
        if not any(_satisfies(c, value) for c in allowed):
            problems.append(Problem(_join(prefix, name),
                                    f"give {describe(allowed)}; got {_show(value)}"))
    if problems:
        return problems
    checks: Iterable[Callable] = getattr(owner, "_parameter_checks", ()) or ()
    for rule in checks:
        for field, message in rule(values) or ():
            problems.append(Problem(_join(prefix, field), message))
    return problems


def raise_for(problems: list[Problem], error: type[Exception] = ParamError) -> None:
    """Raise ``error`` for ``problems`` (nothing when empty): a :class:`ParamError` carries
    them; another ValueError class gets the joined message and a ``problems`` attribute."""
    if not problems:
        return
    if issubclass(error, ParamError):
        raise error(problems)
    exc = error("; ".join(str(p) for p in problems))
    exc.problems = list(problems)
    raise exc


def check(obj: Any, error: type[Exception] = ParamError) -> None:
    """Raise ``error`` naming every problem of parameter object ``obj``."""
    raise_for(validate(obj), error)
