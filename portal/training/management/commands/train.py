import json

from django.core.management.base import BaseCommand, CommandError

from portal.commands import read_json_object, wait_until_settled
from portal.training.models import TrainingRun
from portal.training.services import TrainingRequestError, run_report, start_run, status_of


class Command(BaseCommand):
    help = ("Start a training run from a spec file (format in the README) and print its "
            "scores; with --wait, return when it has finished.")

    def add_arguments(self, parser):
        parser.add_argument("--spec", required=True, metavar="FILE.json")
        parser.add_argument("--wait", action="store_true")
        parser.add_argument("--timeout-s", type=float, default=6 * 3600.0)
        parser.add_argument("--json", action="store_true", help="print one JSON object")

    def handle(self, *args, spec, wait, timeout_s, **options):
        data = read_json_object(spec, "a training spec; format in the README")
        try:
            run = start_run(data, user=None)
        except TrainingRequestError as exc:
            lines = [f"  {k}: {m}" for k, ms in exc.errors.items() for m in ms]
            raise CommandError(f"{spec}: the spec cannot run:\n" + "\n".join(lines)) from None
        if wait:
            def status():
                nonlocal run
                run = TrainingRun.objects.get(pk=run.pk)
                return status_of(run)

            wait_until_settled(status, timeout_s=timeout_s, what=f"training run {run.pk}",
                               poll_s=1.0)
        run = TrainingRun.objects.get(pk=run.pk)
        report = run_report(run)
        if options["json"]:
            self.stdout.write(json.dumps(report))
        else:
            self.stdout.write(f"training run {run.pk}: {report['state']}")
            for name, m in report["models"].items():
                ba = m["per_fold"]["balanced_accuracy"]
                self.stdout.write(f"  {name}: balanced accuracy {ba['mean']:.3f} ± "
                                  f"{(ba['sd'] or 0):.3f} SD over {ba['n']} folds"
                                  + (f", release {m['release']}" if m["release"] else ""))
        if report["state"] == "failed":
            raise CommandError(f"run {run.pk} failed: {report['error']}")
