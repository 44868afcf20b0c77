"""Quality checks of EEG recordings: bad channels, bad segments, blinks and a verdict.

Pure functions over arrays and :class:`mne.io.Raw` objects, no Django. ``run_qc`` runs every
check with the thresholds of a :class:`QCSettings`; the single checks live in
:mod:`workers.qc.checks` and :mod:`workers.qc.segments`.
"""

from .checks import (
    ChannelCheck,
    check_bridging,
    check_correlation,
    check_deviation,
    check_dropout,
    check_high_frequency,
    check_mains,
    check_predictability,
    no_signal_mask,
)
from .result import CODE_VERSION, ChannelResult, PowerSpectrum, QCResult, Reason
from .run import run_qc, run_qc_array
from .segments import Blinks, Segment, count_blinks
from .settings import QCSettings

__all__ = [
    "CODE_VERSION",
    "Blinks",
    "ChannelCheck",
    "ChannelResult",
    "PowerSpectrum",
    "QCResult",
    "QCSettings",
    "Reason",
    "Segment",
    "check_bridging",
    "check_correlation",
    "check_deviation",
    "check_dropout",
    "check_high_frequency",
    "check_mains",
    "check_predictability",
    "count_blinks",
    "no_signal_mask",
    "run_qc",
    "run_qc_array",
]
