"""What a QC run returns: per-channel status and reasons, segments, blinks, verdict, spectrum."""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from ..versions import QC_CODE_VERSION as CODE_VERSION
from .segments import Blinks, Segment


def _significant(value, digits=4):
    """A float rounded to ``digits`` significant digits; None for NaN or infinity."""
    if value is None:
        return None
    value = float(value)
    if not math.isfinite(value):
        return None
    if value == 0:
        return 0.0
    return round(value, digits - 1 - int(math.floor(math.log10(abs(value)))))


def _fixed(value, decimals):
    if value is None or not math.isfinite(float(value)):
        return None
    return round(float(value), decimals)


@dataclass(frozen=True)
class Reason:
    """Why a channel is bad: the check, its words for a reader, the value and threshold."""

    check: str
    words: str
    value: float | None = None
    threshold: float | None = None

    def as_dict(self) -> dict:
        return {
            "check": self.check,
            "words": self.words,
            "value": _significant(self.value),
            "threshold": _significant(self.threshold),
        }


@dataclass
class ChannelResult:
    """Status of one channel ("good" or "bad"), its reasons and every check's value."""

    status: str
    reasons: list = field(default_factory=list)
    metrics: dict = field(default_factory=dict)
    marked_by_site: bool = False
    site_description: str | None = None

    def as_dict(self) -> dict:
        return {
            "status": self.status,
            "reasons": [reason.as_dict() for reason in self.reasons],
            "metrics": {key: _significant(value) for key, value in self.metrics.items()},
            "marked_by_site": self.marked_by_site,
            "site_description": self.site_description,
        }


@dataclass(frozen=True)
class PowerSpectrum:
    """Welch spectrum for plotting: frequencies (Hz) and per-channel power in dB re 1 µV²/Hz."""

    freqs_hz: np.ndarray
    ch_names: list
    power_db: np.ndarray

    def as_dict(self) -> dict:
        return {
            "freqs_hz": [_fixed(f, 3) for f in self.freqs_hz],
            "unit": "dB re 1 µV²/Hz",
            "channels": {
                name: [_fixed(v, 1) for v in row]
                for name, row in zip(self.ch_names, self.power_db, strict=True)
            },
        }


@dataclass
class QCResult:
    """Outcome of the quality checks of one recording."""

    channels: dict
    segments: list
    rejected_share: float
    blinks: Blinks
    verdict: str
    verdict_reasons: list
    psd: PowerSpectrum
    sfreq_hz: float
    duration_s: float
    power_line_hz: float | None
    notes: list = field(default_factory=list)
    settings_digest: str = ""
    code_version: str = CODE_VERSION
    verdict_inputs: dict = field(default_factory=dict)

    @property
    def bad_channels(self) -> list[str]:
        """Names of the channels with status "bad", in recording order."""
        return [name for name, channel in self.channels.items() if channel.status == "bad"]

    def flagged_by(self, check: str) -> list[str]:
        """Names of the channels that ``check`` flagged (whatever else flagged them)."""
        return [name for name, channel in self.channels.items()
                if any(reason.check == check for reason in channel.reasons)]

    def as_dict(self, *, include_psd: bool = True) -> dict:
        """JSON-ready dict: floats rounded (values to 4 significant digits, times to 1 ms,
        shares to 0.01 %, spectra to 0.1 dB), NaN as null; the verdict's inputs are kept
        whole, so that the verdict can be decided again after people's channel decisions
        (:func:`cairn_science.qc.verdict.effective_verdict`) by the same rule and numbers."""
        out = {
            "code_version": self.code_version,
            "settings_digest": self.settings_digest,
            "verdict": self.verdict,
            "verdict_reasons": list(self.verdict_reasons),
            "verdict_inputs": dict(self.verdict_inputs),
            "sfreq_hz": _significant(self.sfreq_hz, 6),
            "duration_s": _fixed(self.duration_s, 3),
            "power_line_hz": _significant(self.power_line_hz),
            "rejected_share": _fixed(self.rejected_share, 4),
            "bad_channels": self.bad_channels,
            "channels": {name: channel.as_dict() for name, channel in self.channels.items()},
            "segments": [
                {
                    "onset_s": _fixed(segment.onset_s, 3),
                    "duration_s": _fixed(segment.duration_s, 3),
                    "reasons": list(segment.reasons),
                }
                for segment in self.segments
            ],
            "blinks": {
                "count": self.blinks.count,
                "per_minute": _significant(self.blinks.per_minute, 3),
                "channels": list(self.blinks.channels),
            },
            "notes": list(self.notes),
        }
        if include_psd:
            out["psd"] = self.psd.as_dict()
        return out


__all__ = ["CODE_VERSION", "ChannelResult", "PowerSpectrum", "QCResult", "Reason", "Segment"]
