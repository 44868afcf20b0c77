"""EEG signal preparation for analysis: channel harmonisation, notch, band-pass, resampling,
bad-channel repair, re-reference and windowing.

Pure functions over arrays, no Django. :func:`prepare` runs the steps with a
:class:`PrepSettings` and records each; :func:`plan_windows` and :func:`cut_windows` split the
result into analysis windows.
"""

from .prepare import (
    BAD_CHANNEL_MODES,
    REFERENCES,
    ChannelError,
    Prepared,
    PrepSettings,
    TooShortError,
    bandpass_design,
    prepare,
    site_key,
)
from .windows import WindowPlan, cut_windows, plan_windows

__all__ = [
    "BAD_CHANNEL_MODES",
    "REFERENCES",
    "ChannelError",
    "TooShortError",
    "PrepSettings",
    "Prepared",
    "WindowPlan",
    "bandpass_design",
    "cut_windows",
    "plan_windows",
    "prepare",
    "site_key",
]
