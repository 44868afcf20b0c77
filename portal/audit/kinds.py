"""Kinds of audit events, decided once from the verb's first word.

A verb such as ``upload.accepted`` belongs to the family ``upload``: the verb itself or the
family followed by a dot (``download`` is a family of one verb). Each family belongs to one
kind; the audit trail shows the research kinds unless asked otherwise, and job bookkeeping
(the queue's own records of work being queued, finished, retried or resent, and worker
checks) only when asked for.
"""

from django.db.models import Q

#: kind -> (label, verb families). Order is the order of the page's select.
KINDS = {
    "data": ("Uploads and dataset versions (incl. restores)", ("upload", "dataset_version")),
    "quality": ("Quality rounds and channel overrides", ("qc",)),
    "features": ("Feature sets", ("features",)),
    "training": ("Training runs, releases, approvals and withdrawals", ("training",
                                                                         "release")),
    "reproduction": ("Reproductions", ("reproduction",)),
    "downloads": ("Downloads", ("download",)),
    "study": ("Protocol, membership, study and site changes", ("protocol", "membership",
                                                                "study", "site")),
    "accounts": ("Sign-in, passwords, tokens and user accounts", ("login", "logout",
                                                                   "password", "token",
                                                                   "user")),
    "system": ("Storage collection and chain checks", ("storage", "audit")),
    "jobs": ("Job bookkeeping", ("job", "worker")),
}

#: What the trail shows by default.
RESEARCH = ("data", "quality", "features", "training", "reproduction", "downloads", "study")
JOBS = "jobs"


def family(verb):
    return verb.split(".", 1)[0]


def kind_of(verb):
    """The kind of ``verb`` ("" for a verb of no known family)."""
    first = family(verb)
    for kind, (_, families) in KINDS.items():
        if first in families:
            return kind
    return ""


def kinds_q(kinds, field="verb"):
    """A filter keeping events whose verb belongs to one of ``kinds``."""
    q = Q(pk__in=[])
    for kind in kinds:
        for name in KINDS[kind][1]:
            q |= Q(**{field: name}) | Q(**{f"{field}__startswith": f"{name}."})
    return q
