"""Box plots of one feature column by site and by workload level (SVG drawn on the server,
cached on disk by the table's hash, the column and the plot version)."""

import hashlib
import io
from pathlib import Path

from django.conf import settings

from portal.datasets import blobs

PLOT_VERSION = "1"
KINDS = ("by-site", "by-level")
BOX, MEDIAN, MEAN = "#5b6b62", "#1f2d3a", "#8a5a00"


def _cache_path(key):
    folder = Path(settings.VAR_DIR) / "plots"
    folder.mkdir(parents=True, exist_ok=True)
    return folder / f"features-{key}.svg"


def render(feature_set, kind, column, info):
    key = hashlib.sha256(f"{PLOT_VERSION}|{feature_set.table_sha256}|{kind}|{column}".encode()
                         ).hexdigest()
    path = _cache_path(key)
    if path.exists():
        return path.read_bytes()
    svg = draw(feature_set, kind, column, info)
    tmp = path.with_suffix(".tmp")
    tmp.write_bytes(svg)
    tmp.replace(path)
    return svg


def _groups(frame, kind, column):
    import numpy as np

    by = "site" if kind == "by-site" else "level"
    groups = []
    for name, values in frame.groupby(by, dropna=True)[column]:
        values = values.to_numpy(dtype=float)
        values = values[np.isfinite(values)]
        if values.size:
            groups.append((str(name) or "(none)", values))
    return by, groups


def draw(feature_set, kind, column, info):
    import matplotlib

    matplotlib.use("Agg")
    import pandas as pd
    from matplotlib.figure import Figure

    with blobs.open_blob(feature_set.table_sha256) as fh:
        frame = pd.read_parquet(fh, columns=["site", "level", column])
    by, groups = _groups(frame, kind, column)
    figure = Figure(figsize=(5.2, 3.2), dpi=100)
    figure.set_layout_engine("constrained")
    axes = figure.add_subplot()
    if groups:
        labels = [f"{name}\n(n={len(values)})" for name, values in groups]
        axes.boxplot([values for _, values in groups], tick_labels=labels, showmeans=True,
                     meanprops={"marker": "D", "markerfacecolor": MEAN,
                                "markeredgecolor": MEAN, "markersize": 4},
                     medianprops={"color": MEDIAN}, boxprops={"color": BOX},
                     whiskerprops={"color": BOX}, capprops={"color": BOX},
                     flierprops={"markersize": 2, "markeredgecolor": BOX})
    else:
        axes.text(0.5, 0.5, "no values", ha="center", va="center", transform=axes.transAxes)
    unit = info.get("unit") or ""
    axes.set_ylabel(f"{column}" + (f" ({unit})" if unit not in ("", "1") else ""))
    axes.set_xlabel("site" if by == "site" else "workload level")
    axes.set_title(f"{column} by {'site' if by == 'site' else 'workload level'} "
                   "(windows; ◆ mean)", fontsize=9)
    buffer = io.BytesIO()
    figure.savefig(buffer, format="svg", metadata={"Date": None})
    return buffer.getvalue()
