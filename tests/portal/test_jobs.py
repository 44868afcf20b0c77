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


# --- failure hooks, transient database errors, the heartbeat (issue 13) --------------------

HOOK_CALLS = []


def remember_failure(job, cause):
    """A failure hook for the tests below: notes what it was called with."""
    from django.db import connection

    HOOK_CALLS.append((job.pk, job.state, job.error, cause, connection.in_atomic_block))


@pytest.fixture
def hooked(monkeypatch):
    """The probe kind with a failure hook that notes its calls."""
    from dataclasses import replace

    from portal.jobs.kinds import KINDS

    HOOK_CALLS.clear()
    monkeypatch.setitem(KINDS, "probe", replace(
        KINDS["probe"], on_failure="tests.portal.test_jobs:remember_failure"))
    return HOOK_CALLS


def failing_with(exc):
    def handler(ctx):
        raise exc
    return handler


@pytest.mark.parametrize("exc, cause", [
    (services.JobError("events.tsv line 4: onset is not a number"), "error"),
    (ZeroDivisionError("division by zero"), "internal"),
])
def test_failure_hook_runs_once_inside_the_failing_transaction(sent, hooked, monkeypatch,
                                                               exc, cause):
    monkeypatch.setattr(runner, "load_handler", lambda kind: failing_with(exc))
    job = services.enqueue("probe")
    assert runner.run(job.pk) == "failed"
    assert runner.run(job.pk) == "skipped"
    job.refresh_from_db()
    assert hooked == [(job.pk, JobState.FAILED, job.error, cause, True)]
    assert str(exc) in job.error


def test_failure_hook_runs_when_lost_workers_use_up_the_attempts(sent, hooked, settings):
    settings.JOB_MAX_ATTEMPTS = 1
    job = services.enqueue("probe")
    services.claim(job.pk, "w1")
    Job.objects.filter(pk=job.pk).update(lease_expires_at=timezone.now() - timedelta(seconds=1))
    services.sweep()
    services.sweep()  # a second sweep finds nothing more to do
    job.refresh_from_db()
    assert job.state == JobState.FAILED and "worker running it stopped" in job.error
    assert [(c[0], c[3]) for c in hooked] == [(job.pk, "lost")]


def test_transient_errors_are_retried_and_never_count_as_lost_workers(sent, hooked, settings,
                                                                      monkeypatch):
    """A database error is retried JOB_TRANSIENT_RETRIES times whatever JOB_MAX_ATTEMPTS is,
    then fails with words about the database, not about a stopped worker."""
    from django.db import OperationalError

    settings.JOB_MAX_ATTEMPTS = 2
    settings.JOB_TRANSIENT_RETRIES = 3
    monkeypatch.setattr(runner, "load_handler", lambda kind: failing_with(
        OperationalError("server closed the connection unexpectedly")))
    job = services.enqueue("probe")
    for retry in range(1, 4):
        with pytest.raises(runner.RetryLater):
            runner.run(job.pk)
        job.refresh_from_db()
        assert (job.state, job.transient_failures, job.attempts) == (JobState.QUEUED, retry, 0)
    assert runner.run(job.pk) == "failed"
    job.refresh_from_db()
    assert job.state == JobState.FAILED and job.transient_failures == 4
    assert "4 database or connection errors" in job.error
    assert "server closed the connection unexpectedly" in job.error
    assert "stopped each time" not in job.error
    assert Event.objects.filter(verb="job.retrying", target_id=str(job.pk)).count() == 3
    assert [(c[0], c[3]) for c in hooked] == [(job.pk, "transient")]
    from portal.jobs.views import job_json

    assert job_json(job)["transient_failures"] == 4  # what the API and the job page show


@pytest.mark.django_db(transaction=True)
def test_database_still_out_when_giving_back_is_resumed_by_token(sent, monkeypatch):
    """If the job cannot be given back (the database is still out), the next try does it
    first: the run counts as a transient retry, not as an attempt of a lost worker.

    Transactional: the runner closes the broken connection, which on PostgreSQL ends the
    test's wrapping transaction (SQLite's in-memory database ignores the close)."""
    from django.db import OperationalError

    calls = []

    def flaky(ctx):
        calls.append(1)
        if len(calls) == 1:
            raise OperationalError("could not connect to server")
        with ctx.finish() as job:
            job.result = {"ok": True}

    real_retry_later = services.retry_later
    outages = []

    def unreachable_once(*args):
        if not outages:
            outages.append(1)
            raise OperationalError("could not connect to server")
        return real_retry_later(*args)

    monkeypatch.setattr(runner, "load_handler", lambda kind: flaky)
    monkeypatch.setattr(services, "retry_later", unreachable_once)
    job = services.enqueue("probe")
    with pytest.raises(runner.RetryLater) as raised:
        runner.run(job.pk)
    assert raised.value.resume["token"]
    assert Job.objects.get(pk=job.pk).state == JobState.RUNNING
    assert runner.run(job.pk, resume=raised.value.resume) == "done"
    job.refresh_from_db()
    assert (job.state, job.attempts, job.transient_failures) == (JobState.DONE, 1, 1)


def test_celery_task_retries_with_back_off_until_the_budget_is_spent(sent, settings,
                                                                     monkeypatch):
    """Eager Celery runs the retries at once (no waiting); the Job row counts them."""
    from django.db import OperationalError

    from portal.jobs.tasks import run_job

    settings.JOB_TRANSIENT_RETRIES = 2
    monkeypatch.setattr(runner, "load_handler", lambda kind: failing_with(
        OperationalError("terminating connection due to administrator command")))
    job = services.enqueue("probe")
    assert run_job.apply(args=[job.pk]).get() == "failed"
    job.refresh_from_db()
    assert job.state == JobState.FAILED and job.transient_failures == 3
    assert "database or connection errors" in job.error
    pauses = [runner.backoff_s(n) for n in range(10)]
    assert pauses == sorted(pauses) and pauses[0] == 2 and max(pauses) <= 60


def spin_until(renewals, *, count, cap=30_000_000):
    """Pure-Python CPU work (no sleep, no I/O) until the heartbeat renewed ``count`` times."""
    x = i = 0
    while len(renewals) < count and i < cap:
        i += 1
        x = (x * 31 + i) % 1_000_003
    return x


@pytest.mark.django_db(transaction=True)
def test_heartbeat_renews_the_lease_during_a_long_pure_python_loop(sent, settings, monkeypatch):
    """The GIL is released every few milliseconds in pure-Python code, so a CPU-bound step
    does not stop the heartbeat thread (CPython's switch interval; common practice, no
    source)."""
    settings.JOB_HEARTBEAT_S = 0.01
    renewals, leases = [], []
    real = services.heartbeat

    def counting(job_id, token):
        held = real(job_id, token)
        if held:
            renewals.append(1)
        return held

    def busy(ctx):
        leases.append(Job.objects.get(pk=ctx.job.pk).lease_expires_at)
        spin_until(renewals, count=5)
        leases.append(Job.objects.get(pk=ctx.job.pk).lease_expires_at)
        with ctx.finish():
            pass

    monkeypatch.setattr(services, "heartbeat", counting)
    monkeypatch.setattr(runner, "load_handler", lambda kind: busy)
    job = services.enqueue("probe")
    assert runner.run(job.pk) == "done"
    assert len(renewals) >= 5 and leases[1] > leases[0]


@pytest.mark.django_db(transaction=True)
@pytest.mark.parametrize("error", ["OperationalError", "InterfaceError"])
def test_heartbeat_keeps_renewing_after_its_connection_dropped(sent, settings, monkeypatch,
                                                               error):
    """A dropped connection used to stop the renewals for good: Django reopens a connection
    only when it is closed, which the heartbeat thread never did (and an InterfaceError ended
    the thread). The lease then ran out under a running job and it was sent again."""
    import threading

    from django import db

    settings.JOB_HEARTBEAT_S = 0.01
    renewals, dropped = [], {"now": True}
    real = services.heartbeat
    wrapper = type(db.connections["default"])
    real_close = wrapper.close

    def close(self):
        if threading.current_thread().name.startswith("heartbeat-"):
            dropped["now"] = False  # a fresh connection opens on the next query
        return real_close(self)

    def over_dropped_connection(job_id, token):
        if dropped["now"]:
            raise getattr(db, error)("server closed the connection unexpectedly")
        held = real(job_id, token)
        if held:
            renewals.append(1)
        return held

    def busy(ctx):
        spin_until(renewals, count=3)
        with ctx.finish():
            pass

    monkeypatch.setattr(wrapper, "close", close)
    monkeypatch.setattr(services, "heartbeat", over_dropped_connection)
    monkeypatch.setattr(runner, "load_handler", lambda kind: busy)
    job = services.enqueue("probe")
    assert runner.run(job.pk) == "done"
    assert len(renewals) >= 3, "the lease was not renewed after the connection dropped"
