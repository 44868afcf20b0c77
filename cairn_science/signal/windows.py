"""Analysis windows of a prepared recording: a fixed grid, minus bad time, split by block."""

from dataclasses import dataclass

import numpy as np

from cairn_science.params import Interval, Real, raise_for, validate

#: The window length's limits (s): a quarter second holds a few cycles of the fastest band;
#: ten minutes is longer than any block of a session. The study protocol's limits, which
#: every caller now uses (``PrepSettings.window_s``).
WINDOW_S = Interval(Real, 0.25, 600, closed="both")
#: The share of a window two neighbours share: from 0 to 0.9. At 0.9 the step is a tenth
#: of a window; beyond it neighbouring windows are near-copies that multiply the rows of one
#: stretch of signal without adding information. The rule the study protocol form already
#: showed; the science formerly allowed anything below 1 (``PrepSettings.overlap``).
OVERLAP = Interval(Real, 0, 0.9, closed="both")

# Slack for times that land on a sample boundary up to float rounding (in samples).
_EDGE_SLACK = 1e-6


@dataclass
class WindowPlan:
    """The kept windows of a recording and why the other candidates were left out.

    ``starts`` are sample indices at the analysis rate; ``block`` the index into the blocks
    of each kept window (-1 when no blocks were given). ``counts`` holds "candidates",
    "kept", "bad_segment", "straddles_blocks" and "outside_blocks"; each candidate is counted
    once, under the first reason in that order.
    """

    starts: np.ndarray
    block: np.ndarray
    window_samples: int
    step_samples: int
    counts: dict


def _touched_samples(onset_s, duration_s, sfreq_hz):
    """Half-open sample range [first, stop) of every sample whose time span meets the
    interval; an instant (duration 0) touches the sample it falls in."""
    first = int(np.floor(onset_s * sfreq_hz + _EDGE_SLACK))
    stop = int(np.ceil((onset_s + duration_s) * sfreq_hz - _EDGE_SLACK))
    return first, max(stop, first + 1)


def _contained_samples(onset_s, duration_s, sfreq_hz):
    """Half-open sample range [first, stop) of the samples wholly inside the interval."""
    first = int(np.ceil(onset_s * sfreq_hz - _EDGE_SLACK))
    stop = int(np.floor((onset_s + duration_s) * sfreq_hz + _EDGE_SLACK))
    return first, stop


def _interval(item, *, what, index):
    if what == "block":
        if not isinstance(item, dict):
            raise ValueError(f"block {index} must be a dict with onset_s and duration_s, "
                             f"got {item!r}")
        missing = [key for key in ("onset_s", "duration_s") if key not in item]
        if missing:
            raise ValueError(f"block {index} lacks {', '.join(missing)}; give every block "
                             "its onset_s and duration_s in seconds")
        onset, duration = item["onset_s"], item["duration_s"]
    else:
        try:
            onset, duration = item
        except (TypeError, ValueError):
            raise ValueError(f"bad segment {index} must be (onset_s, duration_s), "
                             f"got {item!r}") from None
    onset, duration = float(onset), float(duration)
    if not (np.isfinite(onset) and np.isfinite(duration)):
        raise ValueError(f"{what} {index} has a non-finite onset or duration "
                         f"({onset}, {duration})")
    if duration < 0 or (what == "block" and duration == 0):
        raise ValueError(f"{what} {index} has duration_s {duration}; durations must be "
                         f"{'positive' if what == 'block' else 'zero or more'}")
    return onset, duration


def plan_windows(n_times: int, *, sfreq_hz: float, window_s: float | None = None,
                 overlap: float | None = None, bad_segments=(), blocks=()) -> WindowPlan:
    """Windows of ``window_s`` on a grid from sample 0 with a step of
    round(window_samples * (1 - overlap)) samples.

    ``window_s`` and ``overlap`` are those of a
    :class:`~cairn_science.signal.prepare.PrepSettings` (limits ``WINDOW_S``, ``OVERLAP``;
    None takes its default).
    A window touching any of ``bad_segments`` ((onset_s, duration_s) pairs) is left out.
    With ``blocks`` (dicts with onset_s and duration_s; other keys ignored) a window wholly
    inside one block takes its index; one overlapping two or more blocks, or lying partly or
    wholly outside every block, is left out. Without blocks every other window is kept with
    block -1.
    """
    n_times = int(n_times)
    sfreq_hz = float(sfreq_hz)
    if n_times < 0:
        raise ValueError(f"n_times must be 0 or more, got {n_times}")
    if not sfreq_hz > 0:
        raise ValueError(f"sfreq_hz must be positive, got {sfreq_hz}")
    if window_s is None or overlap is None:
        from .prepare import PrepSettings

        window_s = PrepSettings.window_s if window_s is None else window_s
        overlap = PrepSettings.overlap if overlap is None else overlap
    raise_for(validate({"window_s": window_s, "overlap": overlap},
                       {"window_s": [WINDOW_S], "overlap": [OVERLAP]}))
    window = int(round(window_s * sfreq_hz))
    if window < 1:
        raise ValueError(f"window_s {window_s} s is shorter than one sample at {sfreq_hz} Hz; "
                         "use a longer window")
    step = max(1, int(round(window * (1.0 - overlap))))
    n_candidates = 0 if n_times < window else (n_times - window) // step + 1
    starts = np.arange(n_candidates, dtype=np.int64) * step
    ends = starts + window

    bad = np.zeros(n_candidates, dtype=bool)
    for index, item in enumerate(bad_segments):
        first, stop = _touched_samples(*_interval(item, what="bad segment", index=index),
                                       sfreq_hz)
        bad |= (starts < stop) & (ends > first)

    blocks = list(blocks)
    straddles = np.zeros(n_candidates, dtype=bool)
    outside = np.zeros(n_candidates, dtype=bool)
    block_of = np.full(n_candidates, -1, dtype=np.int64)
    if blocks:
        touches = np.zeros((n_candidates, len(blocks)), dtype=bool)
        inside = np.zeros((n_candidates, len(blocks)), dtype=bool)
        for index, item in enumerate(blocks):
            interval = _interval(item, what="block", index=index)
            first, stop = _touched_samples(*interval, sfreq_hz)
            touches[:, index] = (starts < stop) & (ends > first)
            first, stop = _contained_samples(*interval, sfreq_hz)
            inside[:, index] = (starts >= first) & (ends <= stop)
        n_touched = touches.sum(axis=1)
        straddles = (n_touched >= 2) & ~bad
        within = (n_touched == 1) & inside.any(axis=1)
        outside = ~within & ~straddles & ~bad
        block_of = np.where(within, np.argmax(inside, axis=1), -1)
    keep = ~(bad | straddles | outside)
    return WindowPlan(
        starts=starts[keep],
        block=block_of[keep],
        window_samples=window,
        step_samples=step,
        counts={
            "candidates": int(n_candidates),
            "kept": int(keep.sum()),
            "bad_segment": int(bad.sum()),
            "straddles_blocks": int(straddles.sum()),
            "outside_blocks": int(outside.sum()),
        },
    )


def cut_windows(data, plan: WindowPlan) -> np.ndarray:
    """The plan's windows of ``data`` (n_channels, n_times) as a new array of shape
    (n_windows, n_channels, window_samples)."""
    data = np.asarray(data)
    if data.ndim != 2:
        raise ValueError(f"data must be (n_channels, n_times), got shape {data.shape}")
    starts = np.asarray(plan.starts, dtype=np.int64)
    if starts.size and starts.max() + plan.window_samples > data.shape[1]:
        raise ValueError(
            f"the window plan reaches sample {int(starts.max()) + plan.window_samples}, beyond "
            f"the data's {data.shape[1]} samples; plan the windows on this recording's length"
        )
    index = starts[:, None] + np.arange(plan.window_samples)
    return np.ascontiguousarray(np.moveaxis(data[:, index], 1, 0))
