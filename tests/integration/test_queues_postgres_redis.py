"""Queues on PostgreSQL + Redis with a real Celery worker: an upload's checks start while a
long training run is still queued.

Plumbing only: the "long fold" that occupies the worker is a worker check (probe) job sent to
the training queue, and the queued folds, quality checks and upload validation are real job
kinds whose targets do not exist, so each fails at once when it runs. What is measured is the
order in which the worker starts them, which depends only on their queues.
"""

import os

import pytest
from django.db import connection, transaction

from portal.celery import app
from portal.jobs import services
from portal.jobs.kinds import WORKER_QUEUES
from portal.jobs.models import Job, JobState
from tests.helpers import skip_or_fail
from tests.integration.conftest import wait_for

pytestmark = [pytest.mark.integration, pytest.mark.django_db(transaction=True)]

QUEUED_FOLDS = 30
RECORDINGS = 5


@pytest.fixture
def stack(settings):
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
        "CAIRN_JOB_HEARTBEAT_S": "0.5",
        "CAIRN_EMBEDDED": "true",
    })
    yield env, broker
    broker.flushdb()


def _long_fold():
    """A job that keeps the worker busy for a few seconds, on the training queue."""
    with transaction.atomic():
        job = Job.objects.create(kind="probe", params={"steps": 8, "step_s": 0.5})
    app.send_task(services.RUN_TASK, args=[job.pk], queue="training", retry=False)
    return job


def _enqueue(kind, n=1):
    with transaction.atomic():
        return [services.enqueue(kind, params={"i": i}) for i in range(n)]


def test_upload_checks_start_while_a_long_training_run_is_queued(stack, start_worker):
    env, broker = stack
    busy = _long_fold()
    folds = _enqueue("training.fold", QUEUED_FOLDS)
    assert broker.llen("training") == QUEUED_FOLDS + 1
    worker = start_worker(env, queues=WORKER_QUEUES)
    wait_for(lambda: Job.objects.get(pk=busy.pk).state == JobState.RUNNING, 60,
             f"the long fold to start\n{worker.output()[-3000:]}")
    # while the fold runs, a new upload's validation and its recordings' checks arrive (under
    # kombu's default round-robin a fold would start after the first check: this tells the
    # two apart)
    checks = _enqueue("qc.recording", RECORDINGS) + _enqueue("upload.validate")
    wait_for(lambda: all(Job.objects.get(pk=j.pk).started_at for j in checks), 90,
             f"the upload's checks to start\n{worker.output()[-3000:]}")
    started = {j.pk: Job.objects.get(pk=j.pk).started_at for j in checks}
    busy_done = Job.objects.get(pk=busy.pk).finished_at
    fold_starts = [Job.objects.get(pk=j.pk).started_at for j in folds]
    first_fold = min((t for t in fold_starts if t), default=None)
    before = sum(1 for t in fold_starts if t and t < max(started.values()))
    print(f"\nqueued folds: {QUEUED_FOLDS}; folds started before the last of the "
          f"{len(checks)} checks: {before}")
    # the checks went before every queued fold, right after the one that was running
    assert first_fold is None or first_fold > max(started.values())
    assert all(t >= busy_done for t in started.values())
    # the intake queue is served before the quality queue
    validate = checks[-1].pk
    assert all(started[validate] <= started[j.pk] for j in checks[:-1])
    wait_for(lambda: Job.objects.filter(pk__in=[j.pk for j in folds],
                                        state=JobState.QUEUED).count() == 0, 120,
             "the folds to be taken afterwards")
