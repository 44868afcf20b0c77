"""Per-fold balanced accuracy of each model of a run as box plots with the mean marked and the
chance level drawn (SVG, cached on disk by the run's results)."""

import hashlib
import io
import json
from pathlib import Path

from django.conf import settings

PLOT_VERSION = "1"
BOX, MEAN, CHANCE = "#5b6b62", "#8a5a00", "#b3261e"


def render(run):
    key = hashlib.sha256((PLOT_VERSION + json.dumps(run.results, sort_keys=True)).encode()
                         ).hexdigest()
    folder = Path(settings.VAR_DIR) / "plots"
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / f"training-{key}.svg"
    if path.exists():
        return path.read_bytes()
    svg = draw(run)
    tmp = path.with_suffix(".tmp")
    tmp.write_bytes(svg)
    tmp.replace(path)
    return svg


def draw(run):
    import matplotlib

    matplotlib.use("Agg")
    from matplotlib.figure import Figure

    models = run.results.get("models", {})
    names = sorted(models, key=lambda n: -models[n]["per_fold"]["balanced_accuracy"]["mean"])
    height = max(2.4, 0.28 * len(names) + 1.2)
    figure = Figure(figsize=(6.4, height), dpi=100)
    figure.set_layout_engine("constrained")
    axes = figure.add_subplot()
    if names:
        values = [[f["balanced_accuracy"] for f in models[n]["fold_scores"]] for n in names]
        axes.boxplot(values[::-1], tick_labels=names[::-1], orientation="horizontal",
                     showmeans=True,
                     meanprops={"marker": "D", "markerfacecolor": MEAN,
                                "markeredgecolor": MEAN, "markersize": 4},
                     boxprops={"color": BOX}, whiskerprops={"color": BOX},
                     capprops={"color": BOX}, medianprops={"color": "#1f2d3a"})
        chance = models[names[0]]["chance"]["balanced_accuracy"]
        axes.axvline(chance, color=CHANCE, linestyle="--", linewidth=1)
        axes.text(chance, len(names) + 0.4, " chance", color=CHANCE, fontsize=8, va="bottom")
    axes.set_xlabel("balanced accuracy per fold (◆ mean)")
    axes.set_xlim(0, 1)
    axes.tick_params(axis="y", labelsize=8)
    buffer = io.BytesIO()
    figure.savefig(buffer, format="svg", metadata={"Date": None})
    return buffer.getvalue()
