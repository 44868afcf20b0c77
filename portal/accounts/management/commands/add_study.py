from django.core.management.base import BaseCommand, CommandError

from portal.accounts.setup import SetupError, add_study


class Command(BaseCommand):
    help = "Create a consortium study (or rename it). Safe to run again."

    def add_arguments(self, parser):
        parser.add_argument("slug", help="short name used in addresses, e.g. rail-workload")
        parser.add_argument("--name", required=True, help="full name shown to people")

    def handle(self, *args, slug, name, **options):
        try:
            study, created = add_study(slug, name=name)
        except SetupError as exc:
            raise CommandError(str(exc)) from None
        self.stdout.write(f"study {study.slug}: {'created' if created else 'already there'}")
