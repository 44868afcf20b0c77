"""Which queue each kind of work goes to, and how a worker that takes them all orders them.

The ordering rests on kombu's Redis transport (checked in its 5.7 source on this machine): a
consumer sends one BRPOP naming its queues in its cycle's order, and Redis pops from the first
non-empty list named (Redis documentation of BRPOP). The default "round_robin" cycle moves the
queue just served to the back; the "priority" cycle keeps the order given to ``-Q``.
"""

import pytest

from portal.jobs.kinds import BOOKKEEPING_TASKS, KINDS, QUEUES, WORKER_QUEUES


def test_every_kind_has_one_of_the_four_queues():
    assert QUEUES == ("intake", "quality", "bookkeeping", "training")
    assert {kind.queue for kind in KINDS.values()} <= set(QUEUES)
    assert WORKER_QUEUES == "intake,quality,bookkeeping,training"


@pytest.mark.parametrize(("kind", "queue"), [
    ("probe", "intake"), ("upload.validate", "intake"),
    ("qc.version", "quality"), ("qc.recording", "quality"),
    ("features.set", "training"), ("features.recording", "training"),
    ("training.run", "training"), ("training.fold", "training"),
    ("training.finish", "training"),
])
def test_kind_goes_to_its_queue(kind, queue):
    assert KINDS[kind].queue == queue


def test_job_message_is_sent_to_its_kinds_queue(db, monkeypatch):
    from portal.celery import app
    from portal.jobs import services

    sent = []
    monkeypatch.setattr(app, "send_task", lambda name, **kw: sent.append((name, kw["queue"])))
    for kind in ("training.fold", "qc.version", "upload.validate"):
        services.send(services.enqueue(kind).pk)
    assert [queue for _, queue in sent[-3:]] == ["training", "quality", "intake"]


def test_periodic_tasks_are_bookkeeping_and_expire_after_their_period():
    from portal.celery import app

    app.loader.import_default_modules()
    schedule = app.conf.beat_schedule
    assert {entry["task"] for entry in schedule.values()} == set(BOOKKEEPING_TASKS)
    for entry in schedule.values():
        route = app.amqp.router.route({}, entry["task"])
        assert route["queue"].name == "bookkeeping", entry["task"]
        assert entry["options"]["expires"] == entry["schedule"], entry["task"]
    assert app.conf.broker_transport_options["queue_order_strategy"] == "priority"


def test_kombu_priority_cycle_keeps_the_order_given():
    """kombu's own cycle classes: "priority" never reorders, "round_robin" rotates."""
    from kombu.utils.scheduling import cycle_by_name

    queues = list(QUEUES)
    fixed = cycle_by_name("priority")(list(queues))
    fixed.rotate("intake")
    assert fixed.consume(4) == queues
    turns = cycle_by_name("round_robin")(list(queues))
    turns.rotate("intake")
    assert turns.consume(4) == ["quality", "bookkeeping", "training", "intake"]
