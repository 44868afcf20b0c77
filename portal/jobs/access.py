"""Who may see a job: exactly those who may see the object it works on.

A job's site and study fields say where it runs, not what it reveals: a pooled training
fold has no site but carries other sites' scores. So visibility follows the job's target,
through the rule of the app that owns the target's model (named here by dotted path, as
handlers are in ``kinds.py``). A job without a target (a worker check) is for operators.
"""

import importlib

from django.http import Http404
from django.shortcuts import get_object_or_404

from portal.accounts.permissions import is_operator
from portal.jobs.models import Job

#: target_type → "module:function(user, target_id) -> bool".
TARGET_RULES = {
    "datasets.upload": "portal.datasets.access:upload_job_visible",
    "datasets.recording": "portal.datasets.access:recording_job_visible",
    "quality.qcround": "portal.quality.access:round_job_visible",
    "features.featureset": "portal.features.access:set_job_visible",
    "training.trainingrun": "portal.training.access:run_job_visible",
    "lineage.reproduction": "portal.lineage.access:reproduction_job_visible",
}


def _rule(target_type):
    module, func = TARGET_RULES[target_type].split(":")
    return getattr(importlib.import_module(module), func)


def job_visible(user, job):
    if is_operator(user):
        return True
    if job.target_type not in TARGET_RULES:
        return False
    return _rule(job.target_type)(user, job.target_id)


def visible_job(user, job_id):
    job = get_object_or_404(Job.objects.select_related("site", "study"), pk=job_id)
    if not job_visible(user, job):
        raise Http404("no such job")
    return job
