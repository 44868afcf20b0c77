"""Quality checks of EEG recordings: bad channels, bad segments, blinks and a verdict.

Pure functions over arrays and :class:`mne.io.Raw` objects, no Django. ``run_qc`` runs every
check with the thresholds of a :class:`QCSettings`; the single checks live in
:mod:`cairn_science.qc.checks` and :mod:`cairn_science.qc.segments`. The names below load
their module when first used, so that reading a verdict (:mod:`cairn_science.qc.verdict`) or
the settings does not load mne and scipy into a web process.
"""

import importlib

_MODULES = {
    "ChannelCheck": "checks",
    "check_amplitude_factor": "checks",
    "check_bridging": "checks",
    "check_correlation": "checks",
    "check_deviation": "checks",
    "check_dropout": "checks",
    "check_high_frequency": "checks",
    "check_mains": "checks",
    "check_predictability": "checks",
    "no_signal_mask": "checks",
    "CODE_VERSION": "result",
    "ChannelResult": "result",
    "PowerSpectrum": "result",
    "QCResult": "result",
    "Reason": "result",
    "run_qc": "run",
    "run_qc_array": "run",
    "Blinks": "segments",
    "Segment": "segments",
    "count_blinks": "segments",
    "QCSettings": "settings",
    "effective_verdict": "verdict",
}

__all__ = sorted(_MODULES)


def __getattr__(name):
    module = _MODULES.get(name)
    if module is None:
        raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
    value = getattr(importlib.import_module(f"{__name__}.{module}"), name)
    globals()[name] = value
    return value
