"""One hash of what a training run gave, to compare a re-run with its original."""

from portal.audit.events import canonical_sha256


def training_fingerprint(run):
    """sha256 over a run's fold scores (every model, purpose and fold) and its models'
    digests: equal for two runs exactly when they gave the same numbers and models."""
    folds = [[f.model, f.purpose, f.fold, f.result] for f in
             run.folds.order_by("model", "purpose", "fold")]
    models = sorted([r.model, r.kind, r.trained_on_site_id or 0, r.model_digest]
                    for r in run.releases.all())
    return canonical_sha256({"folds": folds, "models": models})
