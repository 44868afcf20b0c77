"""The operator pages (/operator/) show data and change none of it.

Every model registered with the admin site is walked, so a model registered later without the
read-only base fails here. Changes an operator must make go through management commands that
record an audit event (tests/portal/test_operator_commands.py).
"""

import io
import json

import pytest
from django.apps import apps
from django.contrib import admin
from django.contrib.auth.models import Group
from django.db import models
from django.test import RequestFactory
from django.urls import reverse

from portal.accounts.models import ApiToken, LoginFailure, LoginRefusal
from portal.datasets import blobs
from portal.datasets.models import (
    Block,
    DatasetVersion,
    Participant,
    Recording,
    Upload,
    VersionFile,
)
from portal.jobs.models import Job

pytestmark = pytest.mark.django_db


@pytest.fixture
def rows(consortium):
    """At least one row of every model the operator pages show (invented; plumbing only)."""
    site = consortium["sites"]["a1"]
    study = site.studies.get()
    upload = Upload.objects.create(site=site, study=study, source="test", label="a1.zip",
                                   state="accepted")
    version = DatasetVersion.objects.create(site=site, study=study, number=1, upload=upload,
                                            manifest_sha256="0" * 64)
    sha256, size = blobs.put_stream(io.BytesIO(b"An invented dataset.\n"))
    VersionFile.objects.create(version=version, path="README", sha256=sha256, bytes=size)
    participant = Participant.objects.create(site=site, label="01")
    recording = Recording.objects.create(
        version=version, participant=participant, path="sub-01/eeg/sub-01_task-rest_eeg.edf",
        sha256="1" * 64, task="rest", sfreq_hz=250.0, n_channels=1, channel_names=["Cz"],
        duration_s=60.0)
    Block.objects.create(recording=recording, onset_s=0.0, duration_s=60.0, condition="rest",
                         rating=3, level="low")
    Job.objects.create(kind="upload.validate", site=site, study=study,
                       target_type="datasets.upload", target_id=str(upload.pk))
    ApiToken.issue(consortium["people"]["dm_a1"], "lab server")
    LoginFailure.objects.create(username="dm_a1", address="192.0.2.1")
    LoginRefusal.objects.create(key="address:192.0.2.1", window_start=upload.created_at)
    Group.objects.create(name="invented group")
    return consortium


def registered():
    return sorted(admin.site._registry.items(), key=lambda item: item[0]._meta.label)


def counts():
    return {m._meta.label_lower: m.objects.count() for m in apps.get_models()
            if m._meta.label_lower != "sessions.session"}


def stored(obj):
    """Every stored value of the row, as the database gives it back now."""
    fresh = type(obj).objects.get(pk=obj.pk)
    values = {f.attname: f.value_from_object(fresh) for f in obj._meta.concrete_fields}
    values.update({f.name: sorted(o.pk for o in getattr(fresh, f.name).all())
                   for f in obj._meta.many_to_many})
    return values


def tampered_form(obj):
    """What the admin's form for ``obj`` would post, with every free-text value altered: a
    page that accepted it would change or add a row."""
    data = {}
    for field in obj._meta.concrete_fields:
        if field.primary_key or not field.editable:
            continue
        value = field.value_from_object(obj)
        if isinstance(field, models.DateTimeField):
            if value is not None:
                data[f"{field.name}_0"] = value.date().isoformat()
                data[f"{field.name}_1"] = value.time().strftime("%H:%M:%S")
            continue
        if isinstance(field, models.BooleanField):
            if not value:
                data[field.name] = "on"
            continue
        if isinstance(field, models.JSONField):
            value = json.dumps(value)
        elif isinstance(field, models.CharField | models.TextField) and not field.choices:
            value = f"{value}x"[: field.max_length or None]
        data[field.name] = "" if value is None else value
    for field in obj._meta.many_to_many:
        data[field.name] = [o.pk for o in getattr(obj, field.name).all()]
    return data


def operator_request(user):
    request = RequestFactory().get("/operator/")
    request.user = user
    return request


def test_every_registered_model_is_read_only_for_operators(rows):
    request = operator_request(rows["people"]["operator"])
    assert len(registered()) >= 16
    for model, model_admin in registered():
        obj = model.objects.first()
        assert obj is not None, f"the rows fixture makes no {model._meta.label}: add one"
        name = model._meta.label
        assert model_admin.has_view_permission(request, obj), name
        assert not model_admin.has_add_permission(request), name
        assert not model_admin.has_change_permission(request, obj), name
        assert not model_admin.has_delete_permission(request, obj), name
        assert "delete_selected" not in model_admin.get_actions(request), name
        for inline in model_admin.get_inline_instances(request, obj):
            assert not inline.has_add_permission(request, obj), (name, inline)
            assert not inline.has_change_permission(request, obj), (name, inline)
            assert not inline.has_delete_permission(request, obj), (name, inline)


def test_posts_to_the_operator_pages_change_nothing(client, rows):
    client.force_login(rows["people"]["operator"])
    for model, _ in registered():
        obj = model.objects.first()
        base = f"admin:{model._meta.app_label}_{model._meta.model_name}"
        name = model._meta.label
        assert client.get(reverse(f"{base}_changelist")).status_code == 200, name
        assert client.get(reverse(f"{base}_change", args=[obj.pk])).status_code == 200, name
        before, values = counts(), stored(obj)
        form = tampered_form(obj)
        client.post(reverse(f"{base}_add"), form)
        client.post(reverse(f"{base}_change", args=[obj.pk]), form)
        client.post(reverse(f"{base}_delete", args=[obj.pk]), {"post": "yes"})
        client.post(reverse(f"{base}_changelist"), {
            "action": "delete_selected", "_selected_action": [obj.pk], "post": "yes"})
        assert counts() == before, f"a POST to the operator pages of {name} added or removed"
        assert stored(obj) == values, f"a POST to the operator pages of {name} changed it"


def test_the_operator_index_names_the_commands_that_change_data(client, rows):
    client.force_login(rows["people"]["operator"])
    page = client.get(reverse("admin:index")).content.decode()
    for command in ("revoke_membership", "revoke_token", "reset_password", "withdraw_upload"):
        assert command in page
