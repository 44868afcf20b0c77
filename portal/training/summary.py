"""How a training run's results are summarised and stored: which model is released, how it
was chosen, what a release keeps of its validation, and the JSON-safe form of it all. Used by
the training job and by the bulk study of ``portal.demo``, so both store the same shapes."""


def plain(value):
    """JSON-safe copy: NaN and infinities become None (PostgreSQL's jsonb refuses them),
    numpy scalars become Python numbers."""
    import math

    import numpy as np

    if isinstance(value, dict):
        return {str(k): plain(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [plain(v) for v in value]
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return value


def best_model(spec, results):
    """The release model: the one the spec names, else the best mean balanced accuracy over
    the folds (ties to the later name)."""
    if spec.release.get("model"):
        return spec.release["model"]
    return max(results, key=lambda name: (results[name]["per_fold"]["balanced_accuracy"]["mean"],
                                          name))


def selection(spec, results, outer_scores):
    """How the release model was chosen: named in the spec, the only model, or the best of
    several by per-fold balanced accuracy, with the corrected paired test of its lead over
    each other candidate on the same outer folds."""
    from cairn_science.learning import metrics

    chosen = best_model(spec, results)
    if spec.release.get("model"):
        return {"how": "named", "chosen": chosen, "n_compared": 1, "comparisons": [],
                "no_measurable_difference": []}
    if len(results) == 1:
        return {"how": "only", "chosen": chosen, "n_compared": 1, "comparisons": [],
                "no_measurable_difference": []}
    folds = {name: sorted(outer_scores[name], key=lambda r: r["fold"]) for name in results}
    report = metrics.selection_report(
        {name: [r["scores"]["balanced_accuracy"] for r in folds[name]] for name in results},
        chosen=chosen,
        n_train=sum(r["n_train"] for r in folds[chosen]) / len(folds[chosen]),
        n_test=sum(r["n_test"] for r in folds[chosen]) / len(folds[chosen]))
    return {"how": "best", **report}


def evaluation(result):
    """The stored summary of one model's validation: per fold, pooled, interval, chance and
    per site."""
    return {"per_fold": result["per_fold"],
            "pooled": {k: result["pooled"][k] for k in ("accuracy", "balanced_accuracy",
                                                        "macro_f1", "kappa")},
            "ci": result["ci"], "chance": result["chance"],
            "per_site": {s: {k: v[k] for k in ("accuracy", "balanced_accuracy", "n")}
                         for s, v in result["per_site"].items()}}
