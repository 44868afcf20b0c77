"""From one prepared recording and its window plan to a table of features.

The request names the features (all registered ones by default), their parameters, the
bands, and the bands on which signal features also run. Columns are named
``<band>.<feature>.<channel>`` for per-band and band-filtered features, ``<feature>.<channel>``
for broadband ones and ``<feature>`` for indices over channel groups; their order depends
only on the request and the requested channels, so tables of different recordings line up.
A requested channel that a recording had to drop gives empty (NaN) values in its columns.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np

from .batch import DEFAULT_WELCH_SEGMENT_S, WindowBatch
from .registry import Band, Feature, get_feature, registry

MICROVOLTS_PER_VOLT = 1e6


@dataclass(frozen=True)
class FeatureRequest:
    """What to compute. ``features`` None means every registered feature; ``params`` maps a
    feature name to parameter overrides; ``band_signals`` lists bands whose band-filtered
    signal the signal features (``on_bands``) also run on."""

    bands: tuple
    features: tuple | None = None
    params: dict = field(default_factory=dict)
    band_signals: tuple = ()
    welch_segment_s: float = DEFAULT_WELCH_SEGMENT_S

    @classmethod
    def from_dict(cls, data: Mapping | None) -> FeatureRequest:
        data = dict(data)
        known = {"bands", "features", "params", "band_signals", "welch_segment_s"}
        unknown = sorted(set(data) - known)
        if unknown:
            raise ValueError(f"unknown feature setting(s) {', '.join(unknown)}; "
                             f"known: {', '.join(sorted(known))}")
        bands = tuple(Band.from_dict(b) for b in data.get("bands", []))
        if not bands:
            raise ValueError("bands: list at least one band (name, l_freq_hz, h_freq_hz)")
        for band in bands:
            if not 0 <= band.l_freq_hz < band.h_freq_hz:
                raise ValueError(f"bands: {band.name} needs 0 <= l_freq_hz < h_freq_hz")
        names = data.get("features")
        if names is not None:
            names = tuple(names)
            for name in names:
                get_feature(name)
        params = {str(k): dict(v) for k, v in (data.get("params") or {}).items()}
        for name, overrides in params.items():
            get_feature(name).params(overrides)
        band_names = {b.name for b in bands}
        band_signals = tuple(data.get("band_signals") or ())
        missing = sorted(set(band_signals) - band_names)
        if missing:
            raise ValueError(f"band_signals: {', '.join(missing)} is not one of the bands "
                             f"({', '.join(sorted(band_names))})")
        segment = float(data.get("welch_segment_s", DEFAULT_WELCH_SEGMENT_S))
        if segment <= 0:
            raise ValueError("welch_segment_s must be a positive number of seconds")
        return cls(bands=bands, features=names, params=params, band_signals=band_signals,
                   welch_segment_s=segment)

    def as_dict(self) -> dict:
        return {
            "bands": [{"name": b.name, "l_freq_hz": b.l_freq_hz, "h_freq_hz": b.h_freq_hz}
                      for b in self.bands],
            "features": list(self.features) if self.features is not None else None,
            "params": {k: self.params[k] for k in sorted(self.params)},
            "band_signals": list(self.band_signals),
            "welch_segment_s": self.welch_segment_s,
        }

    def selected(self) -> list[Feature]:
        table = registry()
        names = self.features if self.features is not None else tuple(table)
        return [table[name] for name in names]


def scopes(feature: Feature, request: FeatureRequest) -> list[Band | None]:
    """The bands a feature runs for: each band (per-band features), the broadband signal
    (None) plus the asked band-filtered signals (signal features), or the broadband only."""
    if feature.per_band:
        return list(request.bands)
    if feature.on_bands:
        return [None] + [b for b in request.bands if b.name in request.band_signals]
    return [None]


def describe_columns(request: FeatureRequest, ch_names: Sequence[str]) -> list[dict]:
    """One dict per feature column, in table order: name, feature, family, band, channel,
    unit, parameters and description. Used for the table and for its JSON sidecar."""
    columns = []
    for feature in request.selected():
        params = feature.params(request.params.get(feature.name))
        for band in scopes(feature, request):
            prefix = f"{band.name}." if band is not None else ""
            band_info = ({"name": band.name, "l_freq_hz": band.l_freq_hz,
                          "h_freq_hz": band.h_freq_hz} if band is not None else None)
            targets = ch_names if feature.per_channel else [None]
            for channel in targets:
                suffix = f".{channel}" if channel is not None else ""
                columns.append({
                    "name": f"{prefix}{feature.name}{suffix}", "feature": feature.name,
                    "family": feature.family, "band": band_info, "channel": channel,
                    "unit": feature.unit, "parameters": params,
                    "signal": ("band-filtered" if band is not None and not feature.per_band
                               else "broadband"),
                    "description": feature.description,
                })
    return columns


def band_filtered(data_v: np.ndarray, *, sfreq_hz: float, band: Band) -> np.ndarray:
    """Zero-phase FIR band-pass of the continuous signal (MNE's default design)."""
    import mne

    h_freq = band.h_freq_hz if band.h_freq_hz < sfreq_hz / 2.0 else None
    return mne.filter.filter_data(data_v, sfreq_hz, band.l_freq_hz or None, h_freq,
                                  verbose=False)


def compute_features(data_v: np.ndarray, *, sfreq_hz: float, ch_names: Sequence[str],
                     starts: np.ndarray, window_samples: int, request: FeatureRequest,
                     all_channels: Sequence[str] | None = None) -> tuple[list[dict], np.ndarray]:
    """Feature values for windows of one prepared recording.

    ``data_v`` (n_channels, n_times) in volts; ``starts`` the first sample of each window;
    ``all_channels`` the requested channel list (columns for channels missing from
    ``ch_names`` are NaN). Returns (columns, values) with values of shape
    (n_windows, n_columns), float64.
    """
    all_channels = list(all_channels if all_channels is not None else ch_names)
    columns = describe_columns(request, all_channels)
    starts = np.asarray(starts, dtype=int)
    values = np.full((starts.size, len(columns)), np.nan)
    if starts.size == 0:
        return columns, values
    index = starts[:, None] + np.arange(window_samples)[None, :]

    def cut(signal_v):
        # (n_channels, n_windows, n_samples) -> (n_windows, n_channels, n_samples), in µV
        return np.ascontiguousarray(signal_v[:, index].transpose(1, 0, 2)) * MICROVOLTS_PER_VOLT

    band_windows = {}
    for band in request.bands:
        if band.name in request.band_signals:
            band_windows[band.name] = cut(band_filtered(data_v, sfreq_hz=sfreq_hz, band=band))
    batch = WindowBatch(cut(data_v), sfreq_hz=sfreq_hz, ch_names=ch_names, bands=request.bands,
                        band_windows_uv=band_windows, welch_segment_s=request.welch_segment_s)
    position = {name: i for i, name in enumerate(columns_key(c) for c in columns)}
    present = {name: i for i, name in enumerate(ch_names)}
    for feature in request.selected():
        params = feature.params(request.params.get(feature.name))
        for band in scopes(feature, request):
            out = np.asarray(feature.function(batch, band=band, **params), dtype=float)
            band_name = band.name if band is not None else None
            if feature.per_channel:
                for channel, i in present.items():
                    key = (band_name, feature.name, channel)
                    if key in position:
                        values[:, position[key]] = out[:, i]
            else:
                values[:, position[(band_name, feature.name, None)]] = out
    return columns, values


def columns_key(column: Mapping) -> tuple[str, str, str]:
    band = column["band"]["name"] if column["band"] else None
    return (band, column["feature"], column["channel"])
