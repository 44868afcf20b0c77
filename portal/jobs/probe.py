"""A worker check: proves that a worker picks up jobs, reports progress and stores a result."""

import os
import socket
import time

from cairn_science.runtime import thread_report
from portal.audit.events import record
from portal.audit.versions import library_versions


def run_probe(ctx):
    """Work in ``steps`` steps of ``step_s`` seconds, then store what the worker looks like."""
    steps = int(ctx.params.get("steps", 3))
    step_s = float(ctx.params.get("step_s", 0.2))
    for done in range(steps):
        time.sleep(step_s)
        ctx.progress(done + 1, steps, f"step {done + 1} of {steps}")
    import numpy  # noqa: F401  (loads BLAS so its thread limit shows in the report)

    with ctx.finish() as job:
        job.result = {
            "host": socket.gethostname(),
            "pid": os.getpid(),
            "threads": thread_report(),
            "libraries": library_versions(),
        }
        record(
            "worker.checked", target=job, worker=True, summary="worker check finished",
            outputs=[{"job": job.pk, "host": job.result["host"]}],
        )
