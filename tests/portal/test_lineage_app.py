"""Lineage and reproduction as their own app on top of the others: the Reproduction model
moved out of audit without losing its table or rows, stored jobs about it still resolve, and
the pages keep their addresses."""

import io

import pytest
from django.core.management import call_command
from django.db import connection
from django.db.migrations.executor import MigrationExecutor
from django.urls import reverse

from portal.lineage.models import Reproduction


def test_the_model_keeps_its_table():
    assert Reproduction._meta.app_label == "lineage"
    assert Reproduction._meta.db_table == "audit_reproduction"


@pytest.mark.django_db(transaction=True)  # SQLite's schema editor refuses to run in atomic
@pytest.mark.parametrize("app, name", [("lineage", "0001_initial"),
                                       ("audit", "0007_reproduction_moves_to_lineage")])
def test_the_move_changes_no_table(app, name):
    """Both halves of the move are state only: no SQL at all."""
    out = io.StringIO()
    call_command("sqlmigrate", app, name, stdout=out)
    statements = [line for line in out.getvalue().splitlines()
                  if line.strip() and not line.startswith("--")
                  and line.strip().upper() not in ("BEGIN;", "COMMIT;")]
    assert statements == []


def _migrate(targets):
    """Migrate the test database to ``targets``; the historical models there."""
    executor = MigrationExecutor(connection)
    return executor.migrate(targets).apps


@pytest.mark.django_db(transaction=True)
def test_a_database_from_before_the_move_keeps_its_rows_and_jobs():
    """Back to the state before the move (Reproduction in audit), a row and a job about it
    stored as they were then, and forward again."""
    leaf = MigrationExecutor(connection).loader.graph.leaf_nodes()
    before = [("lineage", None), ("audit", "0006_reproduction")]
    old = _migrate(before)
    try:
        OldReproduction = old.get_model("audit", "Reproduction")
        Job = old.get_model("jobs", "Job")
        kept = OldReproduction.objects.create(subject="features:7", original_sha256="a" * 64)
        Job.objects.create(kind="audit.reproduce", target_type="audit.reproduction",
                           target_id=str(kept.pk))
        Job.objects.create(kind="features.set", target_type="features.featureset",
                           target_id="7")
    finally:
        _migrate(leaf)
    from portal.jobs.access import TARGET_RULES
    from portal.jobs.models import Job

    moved = Reproduction.objects.get(pk=kept.pk)
    assert (moved.subject, moved.original_sha256) == ("features:7", "a" * 64)
    assert sorted(Job.objects.values_list("target_type", "target_id")) == [
        ("features.featureset", "7"), ("lineage.reproduction", str(kept.pk))]
    assert Reproduction._meta.label_lower in TARGET_RULES
    # a new row takes the next id of the same table
    assert Reproduction.objects.create(subject="qc:1", original_sha256="b" * 64).pk > kept.pk


def test_the_pages_keep_their_addresses():
    """The pages moved app but not address: links saved before still work."""
    assert reverse("lineage:page", args=["training", 4]) == "/audit/lineage/training/4/"
    assert reverse("lineage:prov", args=["release", 2]) == "/audit/lineage/release/2/prov.json"
    assert reverse("lineage:derived", args=["upload", 3]) == "/audit/derived/upload/3/"
    assert reverse("lineage:reproduce", args=["qc", 5]) == "/audit/reproduce/qc/5/"
    assert reverse("audit:events") == "/audit/"


def test_the_reproduce_job_runs_the_lineage_handler():
    """Stored jobs keep their kind name; the handler it names now lives in lineage."""
    from portal.jobs.kinds import KINDS

    assert KINDS["audit.reproduce"].handler == "portal.lineage.jobs:run_reproduce"


@pytest.mark.django_db
def test_the_reproduction_card_of_pages_below_lineage(rf):
    """Plumbing, on invented rows: the tag the quality and feature-set pages load shows the
    latest reproduction, its job, and the button only when the page says the reader may."""
    from types import SimpleNamespace

    from django.template import Context, RequestContext, Template

    from portal.jobs.models import Job

    subject = SimpleNamespace(pk=99)
    Reproduction.objects.create(subject="qc:99", original_sha256="c" * 64,
                                new_sha256="c" * 64, matches=True)
    running = Reproduction.objects.create(subject="qc:99", original_sha256="c" * 64)
    job = Job.objects.create(kind="audit.reproduce", target_type="lineage.reproduction",
                             target_id=str(running.pk))
    template = Template('{% load lineage %}{% reproduction_card "qc" subject may %}')
    request = rf.get("/quality/somewhere/")
    shown = template.render(RequestContext(request, {"subject": subject, "may": True}))
    assert 'name="csrfmiddlewaretoken"' in shown  # the page's token reaches the form
    assert "running" in shown and f'id="job-{job.pk}"' in shown
    assert 'action="/audit/reproduce/qc/99/"' in shown
    assert 'value="/quality/somewhere/"' in shown
    hidden = template.render(Context({"subject": subject, "may": False, "request": request}))
    assert "running" in hidden and "<form" not in hidden
