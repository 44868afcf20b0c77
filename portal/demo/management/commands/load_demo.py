import json
import secrets
from pathlib import Path

from django.conf import settings
from django.contrib.auth import get_user_model
from django.core.management.base import BaseCommand

from portal.accounts.models import AccountFlags, Site
from portal.accounts.setup import add_member, add_site, add_study
from portal.datasets.models import Upload
from portal.datasets.services import submit_path
from portal.demo.consortium import FEATURES_MARKER, STUDY_NAME, STUDY_SLUG, TRAINING_MARKER
from portal.demo.logins import login_lines
from portal.features.models import FeatureSet
from portal.studies.models import current_protocol, save_protocol


class Command(BaseCommand):
    help = ("Set up the invented demo consortium: a study, three sites, one person per role, "
            "generated BIDS datasets submitted through the normal upload path, and one broken "
            "upload that validation rejects. Safe to run again.")

    def add_arguments(self, parser):
        parser.add_argument("--scale", default="full", help="demo generator scale: small or full")
        parser.add_argument("--seed", type=int, default=7)

    def handle(self, *args, scale, seed, **options):
        from fixtures.demo import generate

        study, _ = add_study(STUDY_SLUG, name=STUDY_NAME)
        protocol = current_protocol(study).data
        protocol = {**protocol, "tasks": ["rest", "disruption"]}
        save_protocol(study, protocol, user=None, note="demo consortium set-up")

        out = Path(settings.VAR_DIR) / "demo" / f"{scale}-seed{seed}"
        if not (out / "answer_key.json").exists():
            self.stdout.write(f"generating the demo consortium ({scale} scale) in {out} …")
            generate(out, scale=scale, seed=seed, overwrite=True)
        key = json.loads((out / "answer_key.json").read_text())

        logins = []
        self._member(logins, "demo-operator", "operator", None)
        for number, site_info in enumerate(key["sites"]):
            add_site(site_info["slug"], study_slug=STUDY_SLUG, name=site_info["name"])
            self._member(logins, f"dm-{site_info['slug']}", "data_manager", site_info["slug"])
            self._member(logins, f"analyst-{site_info['slug']}", "analyst", site_info["slug"])
            if number == 0:
                self._member(logins, "demo-lead", "study_lead", site_info["slug"])
            if number == 1:
                self._member(logins, "demo-auditor", "auditor", site_info["slug"])

        broken = key["broken_upload"]
        submissions = [(s["slug"], out / s["bids_root"], s["name"]) for s in key["sites"]]
        submissions.append((broken["copied_from"]["site"], out / broken["bids_root"],
                            f"the broken demo upload ({broken['reason']})"))
        for site_slug, folder, what in submissions:
            if Upload.objects.filter(site__slug=site_slug, label=folder.name).exists():
                continue
            manager = get_user_model().objects.get(username=f"dm-{site_slug}")
            upload = submit_path(folder, site=Site.objects.get(slug=site_slug), study=study,
                                   user=manager, via="command")
            self.stdout.write(f"submitted {what}: upload {upload.pk}")
        # serve_demo asks for the consortium's feature set once the quality checks are done,
        # then starts a first training run on it.
        if not FeatureSet.objects.filter(study=study).exists():
            (Path(settings.VAR_DIR) / "demo" / FEATURES_MARKER).write_text(STUDY_SLUG)
            (Path(settings.VAR_DIR) / "demo" / TRAINING_MARKER).write_text(STUDY_SLUG)
        self._print_logins(logins, study.name)

    def _member(self, logins, username, role, site_slug):
        user, _ = add_member(username, role=role, site_slug=site_slug)
        password = secrets.token_urlsafe(9)
        user.set_password(password)
        user.save(update_fields=["password"])
        AccountFlags.require_new_password(user, required=False)  # demo log-ins stay as printed
        logins.append((username, role, site_slug, password))
        return user

    def _print_logins(self, logins, study_name):
        text = "\n".join(login_lines(logins, study_name))
        path = Path(settings.VAR_DIR) / "demo" / "logins.txt"
        path.parent.mkdir(parents=True, exist_ok=True)
        path.write_text(text + "\n")
        path.chmod(0o600)
        self.stdout.write(text)
        self.stdout.write(f"(also written to {path})")
