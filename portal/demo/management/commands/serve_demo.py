import os
import signal
import subprocess
import sys
import time

from django.conf import settings
from django.core.management.base import BaseCommand, CommandError

from portal.demo.consortium import DEMO_SPEC, FEATURES_MARKER, TRAINING_MARKER
from portal.jobs.kinds import WORKER_QUEUES


class Command(BaseCommand):
    help = ("Run the demo portal: a Celery worker (with the sweeper's clock) on the embedded "
            "broker and the web server, until Ctrl-C.")

    def add_arguments(self, parser):
        parser.add_argument("--bind", default="127.0.0.1:8000")
        parser.add_argument("--worker-processes", type=int, default=2)

    def handle(self, *args, bind, worker_processes, **options):
        python = sys.executable
        log_dir = settings.VAR_DIR / "logs"
        log_dir.mkdir(parents=True, exist_ok=True)
        commands = {
            "worker": [python, "-m", "celery", "-A", "portal", "worker", "--beat",
                       "--queues", WORKER_QUEUES, "--concurrency", str(worker_processes),
                       "--loglevel", "INFO", "--schedule", str(settings.VAR_DIR / "beat-schedule")],
            "web": [python, "-m", "gunicorn", "portal.wsgi", "--bind", bind, "--workers", "2",
                    "--timeout", "120"],
        }
        def stop(signum, frame):
            raise KeyboardInterrupt

        signal.signal(signal.SIGINT, stop)
        signal.signal(signal.SIGTERM, stop)
        children = {}
        for name, argv in commands.items():
            log = open(log_dir / f"{name}.log", "ab")
            children[name] = subprocess.Popen(argv, stdout=log, stderr=subprocess.STDOUT,
                                              env=os.environ.copy())
        self.stdout.write(
            f"Cairn demo portal on http://{bind}/  (worker and web logs in {log_dir})\n"
            f"Log-ins: {settings.VAR_DIR / 'demo' / 'logins.txt'}\nCtrl-C stops everything."
        )
        try:
            while True:
                for name, child in children.items():
                    if child.poll() is not None:
                        raise CommandError(f"the {name} process stopped (exit {child.returncode});"
                                           f" see {log_dir / (name + '.log')}")
                self._demo_features()
                time.sleep(1)
        except KeyboardInterrupt:
            self.stdout.write("stopping …")
        finally:
            for child in children.values():
                if child.poll() is None:
                    child.send_signal(signal.SIGTERM)
            for child in children.values():
                try:
                    child.wait(timeout=20)
                except subprocess.TimeoutExpired:
                    child.kill()

    def _demo_features(self):
        """Once every demo site's quality checks are done, ask for the consortium's first
        feature set (load_demo leaves a marker asking for it)."""
        marker = settings.VAR_DIR / "demo" / FEATURES_MARKER
        now = time.monotonic()
        if now < getattr(self, "_next_try", 0):
            return
        if not marker.exists():
            self._demo_training()
            return
        self._next_try = now + 5
        from portal.accounts.models import Study
        from portal.features.services import (
            FeatureRequestError,
            latest_versions,
            request_feature_set,
        )

        study = Study.objects.filter(slug=marker.read_text().strip()).first()
        versions = latest_versions(study) if study else []
        if len(versions) < 3:
            return
        try:
            feature_set, _ = request_feature_set(versions, user=None)
        except FeatureRequestError:
            return  # checks still running
        marker.unlink()
        self.stdout.write(f"asked for the demo feature set {feature_set.pk} "
                          f"({len(versions)} sites)")

    def _demo_training(self):
        """Once the demo feature set is ready, start the demo's first comparison run."""
        marker = settings.VAR_DIR / "demo" / TRAINING_MARKER
        if not marker.exists():
            return
        self._next_try = time.monotonic() + 5
        from portal.features.models import FeatureSet
        from portal.training.services import start_run

        feature_set = FeatureSet.objects.filter(study__slug=marker.read_text().strip(),
                                                state="done").order_by("-pk").first()
        if feature_set is None:
            return
        run = start_run({**DEMO_SPEC, "feature_set": feature_set.pk}, user=None)
        # The same without participant normalisation, to compare the two side by side.
        plain = start_run({**DEMO_SPEC, "feature_set": feature_set.pk,
                           "normalisation": {"participant": "none"},
                           "release": {"pooled": False}}, user=None)
        marker.unlink()
        self.stdout.write(f"started the demo training runs {run.pk} and {plain.pk} on feature "
                          f"set {feature_set.pk}")
