"""Who may see an object's lineage, what was made from it, and its reproductions.

Lineage follows the object's own rule: whoever sees a feature set sees everything it was
made from; a site's people see a release offered to their site, with other sites'
contributions summarised. A reproduction is visible to those who may see its subject, and
may be started by those who may run work on it.
"""

from django.http import Http404

from portal.accounts.permissions import Action
from portal.datasets.access import version_visible
from portal.features.access import may_run_on, may_see
from portal.lineage.models import Reproduction
from portal.lineage.prov import resolve
from portal.lineage.reproduce import subject_object
from portal.quality.access import qc_run_visible
from portal.training.access import release_sites


def lineage_object(user, kind, object_id):
    """(object, site ids shown in full or None for all) if the user may see its lineage;
    404 otherwise. Whoever sees a feature set sees everything it was made from; a site's
    people see a release offered to their site, other sites summarised."""
    try:
        obj = resolve(f"{kind}:{object_id}")
    except ValueError:
        raise Http404("no such object") from None
    if kind == "version":
        if version_visible(user, obj):
            return obj, None
        raise Http404("no such object")
    feature_set = obj if kind == "features" else (
        obj.feature_set if kind == "training" else obj.run.feature_set)
    if may_see(user, feature_set):
        return obj, None
    if kind == "release":
        mine = release_sites(user, obj)
        if mine:
            return obj, {s.pk for s in mine}
    raise Http404("no such object")


def reproduction_subject_visible(user, kind, obj, *, to_start=False):
    """A feature set or quality result may be seen (or, ``to_start``, computed again)."""
    if kind == "features":
        return may_run_on(user, obj) if to_start else may_see(user, obj)
    if kind == "qc":
        return qc_run_visible(user, obj, Action.RUN_JOBS if to_start else Action.VIEW)
    return False


def reproduction_job_visible(user, target_id):
    reproduction = Reproduction.objects.filter(pk=target_id).first()
    if reproduction is None:
        return False
    try:
        kind, obj = subject_object(reproduction.subject)
    except ValueError:
        return False
    return reproduction_subject_visible(user, kind, obj)
