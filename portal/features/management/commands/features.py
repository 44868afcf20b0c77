import json
import shutil
from pathlib import Path

from django.core.management.base import BaseCommand, CommandError

from portal.commands import read_json_object, wait_until_settled
from portal.datasets import blobs
from portal.datasets.models import DatasetVersion
from portal.features.services import FeatureRequestError, request_feature_set, status_of


class Command(BaseCommand):
    help = ("Ask for (or reuse) the feature set of one or more dataset versions and write its "
            "table as Parquet. Parameters the file leaves out come from the study's protocol.")

    def add_arguments(self, parser):
        parser.add_argument("--dataset-version", dest="versions", type=int, action="append",
                            required=True, metavar="ID",
                            help="a dataset version id; repeat for several sites")
        parser.add_argument("--params", metavar="FILE.json",
                            help='JSON with any of "channels", "preprocessing", "features"')
        parser.add_argument("--out", required=True, metavar="FILE.parquet")
        parser.add_argument("--wait", action="store_true",
                            help="wait for the workers to finish, then write the table")
        parser.add_argument("--timeout-s", type=float, default=3600.0)
        parser.add_argument("--json", action="store_true", help="print one JSON object")

    def handle(self, *args, versions, params, out, wait, timeout_s, **options):
        overrides = self._params(params)
        found = {v.pk: v for v in DatasetVersion.objects.select_related("site", "study")
                 .filter(pk__in=versions)}
        missing = [str(v) for v in versions if v not in found]
        if missing:
            raise CommandError(f"no dataset version {', '.join(missing)}; list them on the "
                               "site pages or with the API")
        try:
            feature_set, created = request_feature_set(list(found.values()),
                                                       overrides=overrides, user=None)
        except FeatureRequestError as exc:
            raise CommandError(str(exc)) from None
        state, error = status_of(feature_set)
        if wait:
            def status():
                feature_set.refresh_from_db()
                return status_of(feature_set)

            state, error = wait_until_settled(status, timeout_s=timeout_s,
                                              what=f"feature set {feature_set.pk}")
        if state == "failed":
            raise CommandError(f"feature set {feature_set.pk} failed: {error}")
        written = False
        if state == "done":
            target = Path(out)
            target.parent.mkdir(parents=True, exist_ok=True)
            partial = target.with_name(target.name + ".partial")
            with blobs.open_blob(feature_set.table_sha256) as source, open(partial, "wb") as sink:
                shutil.copyfileobj(source, sink)
            partial.replace(target)
            written = True
        report = {"feature_set": feature_set.pk, "state": state,
                  "rows": feature_set.n_rows if written else None,
                  "columns": feature_set.n_columns if written else None,
                  "reused": not created, "out": str(out) if written else None}
        if options["json"]:
            self.stdout.write(json.dumps(report))
        elif written:
            self.stdout.write(f"feature set {feature_set.pk} ({'reused' if not created else 'new'}"
                              f"): {feature_set.n_rows} rows × {feature_set.n_columns} columns "
                              f"written to {out}")
        else:
            self.stdout.write(f"feature set {feature_set.pk} is {state}; the table is not "
                              "written yet: run again with --wait, or when it is ready")

    def _params(self, path):
        if not path:
            return {}
        return read_json_object(path, "with any of channels, preprocessing, features")
