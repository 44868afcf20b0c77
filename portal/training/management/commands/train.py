import json

from django.core.management.base import BaseCommand, CommandError

from portal.commands import read_json_object, wait_until_settled
from portal.training.models import TrainingRun
from portal.training.services import TrainingRequestError, start_run, status_of


def run_report(run):
    """The run as one JSON-ready object: per model its fold scores, pooled scores with spread,
    and the id of its release (if any)."""
    state, error = status_of(run)
    releases = {r.model: r.pk for r in run.releases.all()}
    models = {}
    for name, r in (run.results.get("models") or {}).items():
        models[name] = {
            "folds": [{"fold": f["fold"], "repeat": f["repeat"],
                       "balanced_accuracy": f["balanced_accuracy"], "accuracy": f["accuracy"],
                       "macro_f1": f["macro_f1"], "kappa": f["kappa"]}
                      for f in r["fold_scores"]],
            "per_fold": r["per_fold"],
            "pooled": {k: r["pooled"][k] for k in ("accuracy", "balanced_accuracy",
                                                   "macro_f1", "kappa")},
            "ci": r["ci"], "chance": r["chance"], "release": releases.get(name),
        }
    return {"run": run.pk, "state": state, "error": error or None,
            "warning": run.warning or None, "models": models,
            "statistics": run.results.get("statistics")}


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
