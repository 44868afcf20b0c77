from django.core.management.base import BaseCommand, CommandError

from portal.accounts.setup import SetupError, add_site


class Command(BaseCommand):
    help = "Create a site (lab) and let it take part in a study. Safe to run again."

    def add_arguments(self, parser):
        parser.add_argument("slug", help="short name of the site, e.g. north-lab")
        parser.add_argument("--study", required=True, help="slug of the study it takes part in")
        parser.add_argument("--name", required=True, help="full name shown to people")

    def handle(self, *args, slug, study, name, **options):
        try:
            site, created = add_site(slug, study_slug=study, name=name)
        except SetupError as exc:
            raise CommandError(str(exc)) from None
        self.stdout.write(
            f"site {site.slug}: {'created' if created else 'already there'}; takes part in {study}"
        )
