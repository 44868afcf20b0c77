"""The table of features: one entry per feature, so that a new feature is one function and one
entry in its family's module.

A feature function takes a :class:`~cairn_science.features.batch.WindowBatch` and, for features
computed per band or on a band-filtered signal, the :class:`Band`; it returns an array of
shape (n_windows, n_channels), or (n_windows,) for an index that combines channels.
Parameters are keyword arguments with the defaults given in the entry.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import dataclass, field

FAMILIES = ("spectral", "time", "distribution", "complexity", "index")


@dataclass(frozen=True)
class Band:
    """A frequency band, lower edge included, upper edge excluded (Hz)."""

    name: str
    l_freq_hz: float
    h_freq_hz: float

    @classmethod
    def from_dict(cls, item: Mapping) -> Band:
        return cls(str(item["name"]), float(item["l_freq_hz"]), float(item["h_freq_hz"]))


@dataclass(frozen=True)
class Feature:
    """One feature.

    ``per_band``: computed once for each of the study's bands from the spectrum of the
    broadband signal (``alpha.relative_power.Pz``). ``on_bands``: a signal feature that may
    also run on each band-filtered signal when the request asks (``theta.line_length.Fz``);
    on the broadband signal its column has no band (``line_length.Fz``). ``per_channel``
    False: one value per window (an index over channel groups).
    """

    name: str
    family: str
    function: Callable
    unit: str
    description: str
    defaults: dict = field(default_factory=dict)
    per_band: bool = False
    on_bands: bool = False
    per_channel: bool = True

    def __post_init__(self):
        if self.family not in FAMILIES:
            raise ValueError(f"feature {self.name!r}: family must be one of {FAMILIES}")
        if not self.name.replace("_", "").isalnum():
            raise ValueError(f"feature {self.name!r}: use letters, digits and '_' only")

    def params(self, overrides: Mapping | None = None) -> dict:
        """The entry's defaults updated with ``overrides``; unknown names are an error."""
        overrides = dict(overrides or {})
        unknown = sorted(set(overrides) - set(self.defaults))
        if unknown:
            known = ", ".join(sorted(self.defaults)) or "none"
            raise ValueError(f"feature {self.name!r} has no parameter {', '.join(unknown)}; "
                             f"its parameters: {known}")
        return {**self.defaults, **overrides}


def _collect():
    from . import complexity, distribution, indices, spectral, timedomain

    table = {}
    for module in (spectral, timedomain, distribution, complexity, indices):
        for feature in module.FEATURES:
            if feature.name in table:
                raise ValueError(f"feature {feature.name!r} is registered twice")
            table[feature.name] = feature
    return table


_TABLE = None


def registry() -> dict[str, Feature]:
    """{name: Feature} for every known feature, in family order."""
    global _TABLE
    if _TABLE is None:
        _TABLE = _collect()
    return _TABLE


def get_feature(name: str) -> Feature:
    table = registry()
    try:
        return table[name]
    except KeyError:
        raise ValueError(f"unknown feature {name!r}; known features: "
                         f"{', '.join(table)}") from None
