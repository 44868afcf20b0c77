"""Writing audit events. Every state change in Cairn goes through :func:`record`."""

import socket

from django.db import transaction

from cairn_science.canonical_json import canonical_sha256 as _canonical_sha256
from cairn_science.canonical_json import without_negative_zero
from portal.audit.models import ActorKind, Event
from portal.audit.versions import code_version, library_versions


def canonical_sha256(value):
    """sha256 of the canonical JSON of a JSON-ready value (sorted keys, no NaN, no negative
    zero): the content hash events give for results stored as JSON, equal before and after
    the database stored them."""
    return _canonical_sha256(without_negative_zero(value))


def actor_snapshot(user):
    """The user's name and roles at this moment, kept beside the (nullable) link."""
    if user is None or not getattr(user, "is_authenticated", False):
        return {}
    roles = [
        {"site": m.site.slug, "study": m.study.slug, "role": m.role}
        for m in user.memberships.select_related("site", "study").order_by(
            "study__slug", "site__slug", "role")
    ]
    return {"username": user.get_username(), "user_id": user.pk,
            "superuser": user.is_superuser, "roles": roles}


def describe(obj):
    """(type, id) of a model instance for an event's target."""
    if obj is None:
        return "", ""
    return obj._meta.label_lower, str(obj.pk)


def record(
    verb, *, actor=None, actor_kind=None, token=None, target=None, study=None, site=None,
    summary="", params=None, inputs=None, outputs=None, worker=False,
):
    """Append one event. ``actor`` is a user (or None for the system or a worker)."""
    if actor_kind is None:
        if worker:
            actor_kind = ActorKind.WORKER
        elif token is not None:
            actor_kind = ActorKind.TOKEN
        elif actor is not None and getattr(actor, "is_authenticated", False):
            actor_kind = ActorKind.USER
        else:
            actor_kind = ActorKind.SYSTEM
    snapshot = actor_snapshot(actor)
    if token is not None:
        snapshot["token"] = str(token)
    if worker:
        snapshot["host"] = socket.gethostname()
    target_type, target_id = describe(target)
    version = dict(code_version())
    version["libraries"] = library_versions()
    with transaction.atomic():  # the event and its queue entry: one commit
        event = Event.objects.create(
            verb=verb,
            actor_kind=actor_kind,
            actor=actor if getattr(actor, "is_authenticated", False) else None,
            actor_snapshot=snapshot,
            study=study,
            site=site,
            target_type=target_type,
            target_id=target_id,
            summary=summary[:300],
            params=params or {},
            inputs=inputs or [],
            outputs=outputs or [],
            code_version=version,
        )
        from portal.audit.chain import seal_after_commit

        seal_after_commit(event)
    return event
