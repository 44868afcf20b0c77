"""Quality-check thresholds of a study protocol, as one frozen, hashable parameter object."""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass
from typing import ClassVar

from ..canonical_json import canonical_sha256
from ..params import InstanceOf, Integral, Interval, Real, raise_for, validate

_SHARES = (
    "bad_channel_share_review",
    "bad_channel_share_fail",
    "rejected_time_share_review",
    "rejected_time_share_fail",
    "dropout_share_max",
    "correlation_quantile",
    "correlation_bad_window_share",
    "predict_subset_share",
    "predict_bad_window_share",
    "segment_channel_share",
    "hf_cutoff_max_nyquist_share",
)
_COUNTS = ("n_neighbours", "predict_n_subsets", "predict_min_subset", "jump_min_count")
_FLAGS = ("check_predictability",)
_POSITIVE = ("psd_window_s", "correlation_window_s", "predict_window_s", "segment_window_s")


def _constraint(name):
    if name in _FLAGS:
        return [InstanceOf(bool, "true or false")]
    if name in _COUNTS:
        return [Interval(Integral, 1, None, closed="left")]
    if name in _SHARES:
        return [Interval(Real, 0, 1, closed="both")]
    if name in _POSITIVE:
        return [Interval(Real, 0, None, closed="neither")]
    return [Interval(Real, 0, None, closed="left")]


def _ordered(values):
    """Review thresholds not above fail thresholds; band edges in order."""
    for review, fail in (("bad_channel_share_review", "bad_channel_share_fail"),
                         ("rejected_time_share_review", "rejected_time_share_fail")):
        if values[review] > values[fail]:
            yield (review, f"give a review threshold not above {fail} ({values[fail]:g}); "
                           f"got {values[review]:g}")
    for low, high in (("mains_band_hz", "mains_flank_inner_hz"),
                      ("mains_flank_inner_hz", "mains_flank_outer_hz"),
                      ("highpass_hz", "lowpass_hz"),
                      ("muscle_l_freq_hz", "muscle_h_freq_hz")):
        if values[high] <= values[low]:
            yield (high, f"give a value above {low} ({values[low]:g}); got {values[high]:g}")


@dataclass(frozen=True)
class QCSettings:
    """Every threshold the quality checks use, with its unit in its name.

    Defaults follow the published PREP definitions where a check comes from there (noted per
    group below) and common practice otherwise. Numbers are stored as floats and counts as
    ints, so that equal settings always give the same :meth:`digest`.
    """

    # Verdict (the study protocol's thresholds).
    bad_channel_share_review: float = 0.10
    bad_channel_share_fail: float = 0.25
    rejected_time_share_review: float = 0.15
    rejected_time_share_fail: float = 0.40
    min_duration_s: float = 60.0
    min_sfreq_hz: float = 100.0

    # Signal preparation: drift removal and the band of the correlation-based checks
    # (PREP removes trends below 1 Hz and low-passes at about 45-50 Hz).
    highpass_hz: float = 1.0
    lowpass_hz: float = 45.0
    psd_window_s: float = 2.0

    # No signal: flat runs of the raw samples or NaN (PREP flags a channel with more than 1 %
    # flat windows).
    flat_step_uv: float = 0.01
    dropout_min_s: float = 0.1
    dropout_share_max: float = 0.01

    # Neighbours of a channel: its n_neighbours nearest electrodes.
    n_neighbours: int = 4

    # Amplitude far from the others (PREP: robust z of the IQR-based amplitude, |z| > 5).
    # Ours: the broadband amplitude (median over 1-45 Hz of the power relative to the other
    # channels) must also be 1.5 times (or 1 / 1.5 of) the others', as a strong regional
    # rhythm such as frontal theta under workload lifts one or two channels of a sparse
    # montage above z = 5 at a few frequencies only (1.0 gives PREP's rule). And a broadband
    # amplitude beyond deviation_factor_max times (or below its inverse) the others' is
    # flagged whatever the z, which cannot reach -5 when amplitudes spread widely; it is
    # its own check, "amplitude_factor", reporting the factor (0 turns it off, as in PREP).
    deviation_z_max: float = 5.0
    deviation_ratio_min: float = 1.5
    deviation_factor_max: float = 3.0

    # High-frequency noise (PREP: ratio of the amplitude above 50 Hz to the amplitude below
    # it, robust z > 5). The cutoff is lowered to this share of the Nyquist frequency when
    # the sampling rate is too low for it; the check is skipped when the band above the
    # cutoff, mains bands removed, is narrower than hf_min_band_hz.
    hf_cutoff_hz: float = 50.0
    hf_cutoff_max_nyquist_share: float = 0.8
    hf_min_band_hz: float = 5.0
    hf_z_max: float = 5.0
    # Ours: the noise ratio must also be 1.5 times the median channel's (1.0: PREP's rule).
    hf_ratio_min: float = 1.5

    # Sudden jumps (ours): one-sample steps above jump_z_min robust SDs of the channel's
    # steps and above jump_min_uv, at least jump_abrupt_ratio times the steps beside them (a
    # blink rises over several samples); flagged above jump_rate_max_per_min with at least
    # jump_min_count jumps. A jump at a moment when segment_channel_share of the channels
    # step by jump_shared_z_min of their own robust SDs (a break between joined recordings,
    # an amplifier reset) counts against no channel: jump_margin_s on each side of it is
    # rejected as a segment instead.
    jump_z_min: float = 10.0
    jump_min_uv: float = 40.0
    jump_abrupt_ratio: float = 2.0
    jump_shared_z_min: float = 4.0
    jump_margin_s: float = 0.25
    jump_rate_max_per_min: float = 1.0
    jump_min_count: int = 2

    # Mains hum: power within mains_band_hz of each harmonic against the flanks between
    # mains_flank_inner_hz and mains_flank_outer_hz from it.
    mains_band_hz: float = 1.0
    mains_flank_inner_hz: float = 2.0
    mains_flank_outer_hz: float = 5.0
    mains_excess_db: float = 12.0
    mains_ratio_max_db: float = 40.0

    # Low correlation with the other channels (PREP: 1 s windows, 98th percentile of the
    # absolute correlations below 0.4 in more than 1 % of the windows). Ours: 2 s windows,
    # as 1 s of EEG holds so few cycles of its slow, dominant rhythms that an unrelated
    # signal reaches 0.4 with some channel by chance in half the windows; and more than half
    # of the windows, as a sound channel at the edge of a sparse montage, with no close
    # neighbour, dips below 0.4 in a good share of them (1 s and 0.01 give PREP's rule).
    correlation_window_s: float = 2.0
    correlation_min: float = 0.4
    correlation_quantile: float = 0.98
    correlation_bad_window_share: float = 0.5

    # Near-identical neighbours: variance of the difference over the pair's mean variance.
    bridge_variance_ratio_max: float = 0.01

    # Prediction from the other channels by spherical splines (PREP's random-sample method:
    # 50 subsets of 25 % of the channels, 5 s windows, correlation below 0.75 in more than
    # 40 % of the windows). Ours: correlation below 0.6, as 0.75 suits dense caps and sound
    # edge channels of 16-32 electrode layouts are predicted less well (0.75 gives PREP's);
    # and subsets of at least 6 electrodes (PREP: 4), so the check runs from 24 channels up.
    check_predictability: bool = True
    predict_n_subsets: int = 50
    predict_subset_share: float = 0.25
    predict_min_subset: int = 6
    predict_window_s: float = 5.0
    predict_correlation_min: float = 0.6
    predict_bad_window_share: float = 0.4

    # Bad segments: a window is rejected when at least segment_channel_share of the usable
    # channels show an extreme peak-to-peak amplitude, a burst of muscle-band power or no
    # signal.
    segment_window_s: float = 1.0
    segment_peak_to_peak_uv: float = 250.0
    segment_channel_share: float = 0.25
    muscle_l_freq_hz: float = 30.0
    muscle_h_freq_hz: float = 100.0
    muscle_z_max: float = 5.0

    # Blinks on the frontal channels (information only).
    blink_min_amplitude_uv: float = 40.0
    blink_z_min: float = 5.0

    # Limits of each field (shares 0-1, counts whole and >= 1, the rest >= 0, window lengths
    # > 0) and the order of thresholds and band edges; the study protocol form and a quality
    # round's thresholds are checked against these.
    _parameter_constraints: ClassVar[dict]
    _parameter_checks: ClassVar[tuple] = (_ordered,)

    def __post_init__(self):
        raise_for(validate(self))
        for item in dataclasses.fields(self):
            if item.name in _COUNTS:
                object.__setattr__(self, item.name, int(getattr(self, item.name)))
            elif item.name not in _FLAGS:
                object.__setattr__(self, item.name, float(getattr(self, item.name)))

    @classmethod
    def from_stored(cls, data: dict) -> QCSettings:
        """Settings from a stored dict (a round's settings); keys that are no setting of the
        checks are left out."""
        known = {item.name for item in dataclasses.fields(cls)}
        return cls(**{key: value for key, value in data.items() if key in known})

    def as_dict(self) -> dict:
        """Plain dict of every setting, in field order."""
        return {item.name: getattr(self, item.name) for item in dataclasses.fields(self)}

    def digest(self) -> str:
        """sha256 of the settings as canonical JSON (sorted keys, no spaces)."""
        return canonical_sha256(self.as_dict(), ascii=True, allow_nan=True)


QCSettings._parameter_constraints = {
    item.name: _constraint(item.name) for item in dataclasses.fields(QCSettings)}


#: Unit endings of QCSettings field names and how a page writes them.
_UNIT_ENDINGS = (("_per_min", "per minute"), ("_uv", "µV"), ("_hz", "Hz"), ("_db", "dB"),
                 ("_s", "s"))


def setting_words(name: str) -> str:
    """A QCSettings field name in words with its unit: ``min_duration_s`` -> "min duration
    (s)", ``bad_channel_share_review`` -> "bad channel share review (0–1)"."""
    unit = ""
    for ending, words in _UNIT_ENDINGS:
        if name.endswith(ending):
            name, unit = name[: -len(ending)], words
            break
    if not unit and ("share" in name.split("_")):
        unit = "0–1"
    text = name.replace("_", " ")
    return f"{text} ({unit})" if unit else text
