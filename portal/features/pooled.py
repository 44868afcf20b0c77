"""What a person of one site is shown of a pooled feature set or training run that also holds
other sites' data: aggregate facts only — which sites, how many recordings and participants
each gave, the pooled figures, dates — never rows, folds, hashes or files of other sites."""

from django.db.models import Count


def per_site_counts(feature_set, sites):
    """[{site, recordings, participants}] of the set's contents, one row per site (zero for a
    site whose recordings are not in the set yet), in one query."""
    from portal.features.models import FeatureSetItem

    counted = {row["recording__version__site_id"]: row for row in (
        FeatureSetItem.objects.filter(feature_set=feature_set)
        .values("recording__version__site_id")
        .annotate(recordings=Count("recording_id", distinct=True),
                  participants=Count("recording__participant_id", distinct=True))
        .order_by())}
    return [{"site": site, "recordings": counted.get(site.pk, {}).get("recordings", 0),
             "participants": counted.get(site.pk, {}).get("participants", 0)}
            for site in sites]


def set_summary(feature_set, sites, mine):
    counts = per_site_counts(feature_set, sites)
    return {"set": feature_set, "sites": counts, "mine": mine,
            "totals": {"recordings": sum(c["recordings"] for c in counts),
                       "participants": sum(c["participants"] for c in counts)},
            "windows": feature_set.n_rows, "state": feature_set.state,
            "created_at": feature_set.created_at, "finished_at": feature_set.finished_at}


def run_summary(run, sites, mine):
    """The run's pooled scores per model (all folds' predictions together, with their
    interval and chance level), its validation scheme and dates, and the set's counts."""
    models = []
    for name, result in (run.results.get("models") or {}).items():
        pooled = result.get("pooled") or {}
        models.append({"name": name, "balanced_accuracy": pooled.get("balanced_accuracy"),
                       "macro_f1": pooled.get("macro_f1"), "kappa": pooled.get("kappa"),
                       "ci": result.get("ci") or {},
                       "chance": (result.get("chance") or {}).get("balanced_accuracy")})
    return {**set_summary(run.feature_set, sites, mine), "run": run, "models": models,
            "scheme": (run.spec.get("validation") or {}).get("scheme", ""),
            "release_model": run.results.get("release_model"), "state": run.state,
            "created_at": run.created_at, "finished_at": run.finished_at}
