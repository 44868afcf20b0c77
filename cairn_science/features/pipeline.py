"""One recording from raw samples to its feature part, and the parts to one table.

Pure: arrays and plain dicts in, a :class:`Part` (or a pandas table) out. The portal stores
parts as Parquet blobs and joins them with the recordings' index and label columns.
"""

from __future__ import annotations

import io
import os
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, BinaryIO

import numpy as np

from cairn_science.signal import ChannelError, PrepSettings, TooShortError, plan_windows, prepare

from .extract import FeatureRequest, compute_features

if TYPE_CHECKING:
    import pandas as pd

    from cairn_science.signal.prepare import Prepared

#: The joined table's leading columns; every other column is a feature.
INDEX_COLUMNS = ("site", "participant", "session", "task", "run", "window_start_s")
LABEL_COLUMNS = ("rating", "level", "condition")
ORIGIN_COLUMNS = ("recording", "acquisition", "block_onset_s", "qc_verdict")
NON_FEATURE_COLUMNS = INDEX_COLUMNS + LABEL_COLUMNS + ORIGIN_COLUMNS


def feature_columns(columns: Iterable[str]) -> list[str]:
    """The feature columns of a joined table, in table order."""
    return [c for c in columns if c not in NON_FEATURE_COLUMNS]


@dataclass
class Part:
    """Feature values of one recording's kept windows, or why it was left out."""

    columns: list
    window_start_s: np.ndarray
    block: np.ndarray
    values: np.ndarray
    window_counts: dict = field(default_factory=dict)
    channel_status: dict = field(default_factory=dict)
    steps: list = field(default_factory=list)
    excluded_reason: str = ""


def _settings(params, channel_names):
    pre = dict(params["preprocessing"])
    channels = pre.pop("channels")
    return PrepSettings.from_dict({**pre, "channels": channels}), (
        list(channels) if channels is not None else list(channel_names))


def filter_edges(prepared: Prepared) -> list[tuple[float, float]]:
    """The start and end of the recording where the band-pass has not settled, as
    (onset_s, duration_s) segments to leave out (half the filter length at each end)."""
    edge_s = max((float(step.get("edge_transient_s") or 0.0) for step in prepared.steps
                  if step.get("step") == "bandpass" and step.get("applied", True)), default=0.0)
    if edge_s <= 0:
        return []
    duration_s = prepared.data_v.shape[1] / prepared.sfreq_hz
    return [(0.0, edge_s), (max(0.0, duration_s - edge_s), edge_s)]


def recording_part(data_v: np.ndarray, *, sfreq_hz: float, ch_names: Sequence[str],
                   inputs: Mapping, params: Mapping) -> Part:
    """Prepare one recording (``data_v`` in volts, channels × samples) and compute its
    features. ``inputs`` holds bad_channels, bad_segments, blocks and power_line_hz;
    ``params`` is a resolved feature-set parameter dict."""
    request = FeatureRequest.from_dict(params["features"])
    try:
        settings, wanted = _settings(params, ch_names)
        prepared = prepare(np.asarray(data_v, dtype=float), sfreq_hz=sfreq_hz,
                           ch_names=list(ch_names), power_line_hz=inputs.get("power_line_hz"),
                           bad_channels=list(inputs.get("bad_channels", [])), settings=settings)
    except (ChannelError, TooShortError) as exc:
        return Part(columns=[], window_start_s=np.empty(0), block=np.empty(0, dtype=int),
                    values=np.empty((0, 0)), excluded_reason=str(exc))
    if params["preprocessing"]["channels"] is None:
        wanted = list(prepared.channel_status)
    plan = plan_windows(prepared.data_v.shape[1], sfreq_hz=prepared.sfreq_hz,
                        window_s=settings.window_s, overlap=settings.overlap,
                        bad_segments=[tuple(s) for s in inputs.get("bad_segments", [])]
                        + filter_edges(prepared), blocks=inputs.get("blocks", []))
    columns, values = compute_features(
        prepared.data_v, sfreq_hz=prepared.sfreq_hz, ch_names=prepared.ch_names,
        starts=plan.starts, window_samples=plan.window_samples, request=request,
        all_channels=wanted)
    reason = "" if plan.starts.size else "no window left after leaving out rejected time"
    return Part(columns=columns, window_start_s=plan.starts / prepared.sfreq_hz,
                block=np.asarray(plan.block, dtype=int), values=values,
                window_counts=dict(plan.counts), channel_status=dict(prepared.channel_status),
                steps=list(prepared.steps), excluded_reason=reason)


def part_to_parquet(part: Part) -> bytes:
    """Parquet bytes of a part: window_start_s, block, then one float column per feature."""
    import pandas as pd

    frame = pd.DataFrame(part.values, columns=[c["name"] for c in part.columns])
    frame.insert(0, "block", part.block.astype("int32"))
    frame.insert(0, "window_start_s", part.window_start_s.astype(float))
    return frame_to_parquet(frame)


def frame_to_parquet(frame: pd.DataFrame) -> bytes:
    """Deterministic Parquet bytes (same frame, same library versions, same bytes)."""
    import pyarrow as pa
    import pyarrow.parquet as pq

    table = pa.Table.from_pandas(frame, preserve_index=False)
    buffer = io.BytesIO()
    pq.write_table(table, buffer, compression="zstd", write_statistics=True)
    return buffer.getvalue()


def read_parquet(source: str | os.PathLike | BinaryIO) -> pd.DataFrame:
    import pandas as pd

    return pd.read_parquet(source)
