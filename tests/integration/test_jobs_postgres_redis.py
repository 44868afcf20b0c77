"""The job system on PostgreSQL + Redis with real Celery worker processes."""

import os
import time

import pytest
from django.conf import settings
from django.db import connection, transaction
from django.utils import timezone

from portal.audit.models import Event
from portal.jobs import services
from portal.jobs.models import Job, JobState
from tests.helpers import skip_or_fail
from tests.integration.conftest import wait_for

pytestmark = [pytest.mark.integration, pytest.mark.django_db(transaction=True)]

LEASE_S = 3


@pytest.fixture
def stack(settings):
    """The environment a worker needs to reach this test's database and broker."""
    if connection.vendor != "postgresql":
        skip_or_fail("needs PostgreSQL: set DATABASE_URL=postgres://…")
    if not settings.CELERY_BROKER_URL.startswith("redis://"):
        skip_or_fail("needs Redis: set CELERY_BROKER_URL=redis://…")
    import redis

    broker = redis.Redis.from_url(settings.CELERY_BROKER_URL)
    broker.flushdb()
    db = connection.settings_dict
    env = dict(os.environ)
    env.update({
        "DATABASE_URL": f"postgres://{db['USER'] or 'postgres'}@{db['HOST'] or '127.0.0.1'}:"
                        f"{db['PORT'] or 5432}/{db['NAME']}",
        "CELERY_BROKER_URL": settings.CELERY_BROKER_URL,
        "CAIRN_JOB_LEASE_S": str(LEASE_S),
        "CAIRN_JOB_HEARTBEAT_S": "0.5",
        "CAIRN_EMBEDDED": "true",
    })
    settings.JOB_RESEND_AFTER_S = 2
    yield env, broker
    broker.flushdb()


def state_of(job):
    job.refresh_from_db()
    return job


def test_job_dispatched_on_commit_runs_reports_progress_and_finishes(stack, start_worker):
    env, broker = stack
    with transaction.atomic():
        job = services.enqueue("probe", params={"steps": 6, "step_s": 0.3})
        assert broker.llen("intake") == 0  # nothing is sent before the commit
    assert broker.llen("intake") == 1
    start_worker(env)
    seen_progress = wait_for(
        lambda: state_of(job).state == JobState.RUNNING and 0 < job.progress_done < 6,
        60, "progress reported while running",
    )
    assert seen_progress
    wait_for(lambda: state_of(job).state == JobState.DONE, 60, "the job to finish")
    assert job.attempts == 1 and job.progress_done == 6
    threads = job.result["threads"]
    assert threads["env"]["OPENBLAS_NUM_THREADS"] == "1" == threads["env"]["NUMBA_NUM_THREADS"]
    assert threads["pools"] and all(pool["num_threads"] == 1 for pool in threads["pools"])


def test_job_in_rolled_back_transaction_never_runs(stack, start_worker):
    env, broker = stack

    class Abort(Exception):
        pass

    with pytest.raises(Abort):
        with transaction.atomic():
            services.enqueue("probe", params={"steps": 1, "step_s": 0})
            raise Abort
    assert broker.llen("intake") == 0 and not Job.objects.exists()
    worker = start_worker(env)
    with transaction.atomic():
        marker = services.enqueue("probe", params={"steps": 1, "step_s": 0})
    wait_for(lambda: state_of(marker).state == JobState.DONE, 60, "a later job to finish")
    assert Job.objects.count() == 1
    assert worker.output().count("cairn.run_job") >= 1
    assert Event.objects.filter(verb="worker.checked").count() == 1


def test_worker_killed_mid_job_is_recovered_by_lease_and_sweeper(stack, start_worker):
    env, broker = stack
    with transaction.atomic():
        job = services.enqueue("probe", params={"steps": 40, "step_s": 0.25})
    first = start_worker(env, "first")
    wait_for(lambda: state_of(job).progress_done >= 2, 60, "the first worker to make progress")
    first.kill()
    job = state_of(job)
    assert job.state == JobState.RUNNING and job.progress_done > 0
    # Nothing resends while the lease is still running.
    assert job.pk not in services.sweep()
    wait_for(lambda: timezone.now() > state_of(job).lease_expires_at, 2 * LEASE_S + 5,
             "the lease to expire")
    assert services.sweep() == [job.pk]
    start_worker(env, "second")
    wait_for(lambda: state_of(job).state == JobState.DONE, 90, "the second worker to finish")
    assert job.attempts == 2
    assert Event.objects.filter(verb="worker.checked", target_id=str(job.pk)).count() == 1
    assert Event.objects.filter(verb="job.finished", target_id=str(job.pk)).count() == 1


def test_lost_broker_message_is_sent_again_by_the_sweeper(stack, start_worker):
    env, broker = stack
    with transaction.atomic():
        job = services.enqueue("probe", params={"steps": 2, "step_s": 0.1})
    assert broker.llen("intake") == 1
    broker.flushdb()  # the message is gone, as after a broker restart without persistence
    start_worker(env)
    time.sleep(1.0)
    assert state_of(job).state == JobState.QUEUED
    wait_for(lambda: job.pk in services.sweep(), settings.JOB_RESEND_AFTER_S + 10,
             "the sweeper to notice the lost message")
    wait_for(lambda: state_of(job).state == JobState.DONE, 60, "the job to finish")
    assert job.attempts == 1 and job.sends == 2
