"""The job life cycle in one process: dispatch on commit, claims, leases, sweeping, finishing."""

from datetime import timedelta

import pytest
from django.db import transaction
from django.utils import timezone

from portal.audit.models import Event
from portal.jobs import runner, services
from portal.jobs.models import Job, JobState

pytestmark = pytest.mark.django_db


@pytest.fixture
def sent(monkeypatch):
    calls = []
    monkeypatch.setattr(services, "send", lambda job_id: calls.append(job_id) or True)
    return calls


def test_message_goes_out_only_when_the_transaction_commits(
        sent, django_capture_on_commit_callbacks):
    with django_capture_on_commit_callbacks(execute=True):
        job = services.enqueue("probe")
    assert sent == [job.pk]


def test_rolled_back_request_leaves_no_job_and_sends_nothing(sent):
    class Abort(Exception):
        pass

    with pytest.raises(Abort):
        with transaction.atomic():
            services.enqueue("probe")
            raise Abort
    assert not Job.objects.exists() and sent == []


def test_unknown_kind_is_refused():
    with pytest.raises(ValueError, match="unknown job kind 'nope'"):
        services.enqueue("nope")


def test_claim_is_exclusive_until_the_lease_expires(sent):
    job = services.enqueue("probe")
    first = services.claim(job.pk, "w1")
    assert first and services.claim(job.pk, "w2") is None
    Job.objects.filter(pk=job.pk).update(lease_expires_at=timezone.now() - timedelta(seconds=1))
    second = services.claim(job.pk, "w2")
    assert second and second != first
    job.refresh_from_db()
    assert job.attempts == 2 and job.worker_id == "w2"
    # The first worker comes back: it may neither report nor write results.
    assert not services.heartbeat(job.pk, first)
    with pytest.raises(services.LeaseLost):
        services.report_progress(job.pk, first, 1, 2)
    with pytest.raises(services.LeaseLost):
        with services.finishing(job.pk, first):
            pass
    with services.finishing(job.pk, second) as locked:
        locked.result = {"by": "w2"}
    job.refresh_from_db()
    assert job.state == JobState.DONE and job.result == {"by": "w2"}
    assert services.claim(job.pk, "w3") is None


def test_sweeper_resends_expired_and_lost_jobs(sent, settings):
    settings.JOB_RESEND_AFTER_S = 60
    crashed = services.enqueue("probe")
    services.claim(crashed.pk, "w1")
    Job.objects.filter(pk=crashed.pk).update(
        lease_expires_at=timezone.now() - timedelta(seconds=1))
    lost = services.enqueue("probe")
    Job.objects.filter(pk=lost.pk).update(sent_at=timezone.now() - timedelta(seconds=120))
    fresh = services.enqueue("probe")
    Job.objects.filter(pk=fresh.pk).update(sent_at=timezone.now())
    assert sorted(services.sweep()) == sorted([crashed.pk, lost.pk])
    crashed.refresh_from_db()
    assert crashed.state == JobState.QUEUED and crashed.attempts == 1
    assert Event.objects.filter(verb="job.resent").count() == 2


def test_job_fails_in_words_after_too_many_lost_workers(sent, settings):
    settings.JOB_MAX_ATTEMPTS = 2
    job = services.enqueue("probe")
    for worker in ("w1", "w2"):
        services.claim(job.pk, worker)
        Job.objects.filter(pk=job.pk).update(
            lease_expires_at=timezone.now() - timedelta(seconds=1))
        services.sweep()
    job.refresh_from_db()
    assert job.state == JobState.FAILED
    assert "Stopped after 2 attempts" in job.error


def test_runner_runs_probe_once_and_reports_progress(sent):
    job = services.enqueue("probe", params={"steps": 3, "step_s": 0})
    assert runner.run(job.pk) == "done"
    assert runner.run(job.pk) == "skipped"  # a second delivery of the same message
    job.refresh_from_db()
    assert job.state == JobState.DONE and job.progress_done == 3 and job.progress_total == 3
    assert job.result["threads"]["env"]["OMP_NUM_THREADS"] == "1"
    assert Event.objects.filter(verb="worker.checked", target_id=str(job.pk)).count() == 1


def test_handler_errors_become_readable_job_errors(sent, monkeypatch):
    def broken(ctx):
        raise services.JobError("participants.tsv line 3: sub-09 has no folder")

    monkeypatch.setattr(runner, "load_handler", lambda kind: broken)
    job = services.enqueue("probe")
    assert runner.run(job.pk) == "failed"
    job.refresh_from_db()
    assert job.state == JobState.FAILED and job.error.startswith("participants.tsv line 3")
