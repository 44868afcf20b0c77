import os
import signal
import subprocess
import sys
import time

from django.conf import settings
from django.core.management.base import BaseCommand, CommandError


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
                       "--queues", "intake,compute", "--concurrency", str(worker_processes),
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
