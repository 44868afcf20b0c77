"""Real worker processes for integration tests."""

import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

from portal.jobs.kinds import WORKER_QUEUES

REPO = Path(__file__).resolve().parents[2]


class Worker:
    """A ``celery worker`` in its own process (solo pool: the task runs in that process)."""

    def __init__(self, env, log_path, name, queues=WORKER_QUEUES):
        self.log_path = log_path
        self.log = open(log_path, "ab")
        self.proc = subprocess.Popen(
            [sys.executable, "-m", "celery", "-A", "portal", "worker", "-P", "solo",
             "-Q", queues, "-n", f"{name}@%h", "--without-gossip", "--without-mingle",
             "--without-heartbeat", "--loglevel=INFO"],
            cwd=REPO, env=env, stdout=self.log, stderr=subprocess.STDOUT,
        )

    def kill(self):
        """SIGKILL: the process gets no chance to acknowledge, give back or clean up."""
        self.proc.send_signal(signal.SIGKILL)
        self.proc.wait(timeout=10)

    def stop(self):
        if self.proc.poll() is None:
            self.proc.terminate()
            try:
                self.proc.wait(timeout=15)
            except subprocess.TimeoutExpired:
                self.kill()
        self.log.close()

    def output(self):
        return Path(self.log_path).read_text(errors="replace")


@pytest.fixture
def start_worker(tmp_path):
    started = []

    def start(env, name="w", queues=WORKER_QUEUES):
        worker = Worker(env, tmp_path / f"{name}-{len(started)}.log", name, queues)
        started.append(worker)
        return worker

    yield start
    for worker in started:
        worker.stop()


def wait_for(predicate, timeout_s, what, poll_s=0.2):
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        value = predicate()
        if value:
            return value
        time.sleep(poll_s)
    raise AssertionError(f"timed out after {timeout_s} s waiting for {what}")
