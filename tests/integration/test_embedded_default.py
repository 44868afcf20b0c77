"""The embedded default (SQLite file + kombu filesystem broker) with a real worker process,
driven through the operator commands exactly as a lab's script would."""

import json
import os
import subprocess
import sys

import pytest

from tests.integration.conftest import REPO, wait_for

pytestmark = pytest.mark.embedded


@pytest.fixture
def embedded_env(tmp_path):
    env = {k: v for k, v in os.environ.items()
           if k not in {"DATABASE_URL", "CELERY_BROKER_URL"} and not k.startswith("CAIRN_")}
    env.update({"CAIRN_VAR_DIR": str(tmp_path / "var"), "CAIRN_JOB_HEARTBEAT_S": "1"})
    return env


def manage(env, *args, check=True, timeout=300):
    out = subprocess.run([sys.executable, "manage.py", *args], cwd=REPO, env=env,
                         capture_output=True, text=True, timeout=timeout)
    if check and out.returncode != 0:
        raise AssertionError(f"manage.py {' '.join(args)} failed:\n{out.stdout}\n{out.stderr}")
    return out


def test_upload_and_worker_check_on_the_embedded_default(embedded_env, start_worker,
                                                         demo_small):
    env = embedded_env
    manage(env, "migrate", "--noinput")
    assert (REPO / env["CAIRN_VAR_DIR"] / "cairn.sqlite3").exists()
    site = demo_small.sites[-1]
    manage(env, "add_study", "rail", "--name", "Rail")
    manage(env, "add_site", site.slug, "--study", "rail", "--name", site.name)
    manage(env, "add_member", "ops", "--role", "operator")
    worker = start_worker(env, "embedded")
    check = json.loads(manage(env, "check_workers", "--json", "--timeout-s", "120").stdout)
    assert check["state"] == "done" and check["result"]["pid"] == worker.proc.pid

    accepted = manage(env, "upload_bids", str(site.bids_root), "--site", site.slug,
                      "--study", "rail", "--wait", "--json", "--timeout-s", "300")
    report = json.loads(accepted.stdout)
    assert report["state"] == "accepted" and report["dataset_version"] and not report["errors"]

    rejected = manage(env, "upload_bids", str(demo_small.broken_upload), "--site", site.slug,
                      "--study", "rail", "--wait", "--json", "--timeout-s", "300", check=False)
    assert rejected.returncode == 1, rejected.stderr
    report = json.loads(rejected.stdout)
    assert report["state"] == "rejected" and report["dataset_version"] is None
    assert {"path", "line", "field", "message"} <= set(report["errors"][0])
    assert any(e["field"] == "SamplingFrequency" for e in report["errors"])
    wait_for(lambda: "succeeded" in worker.output(), 5, "the worker log to show the jobs")
