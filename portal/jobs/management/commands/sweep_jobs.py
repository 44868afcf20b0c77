from django.core.management.base import BaseCommand

from portal.jobs.services import sweep


class Command(BaseCommand):
    help = ("Send again every job whose worker stopped (lease expired) or whose message was "
            "lost. Celery beat runs this every CAIRN_JOB_SWEEP_EVERY_S seconds.")

    def handle(self, *args, **options):
        resent = sweep()
        self.stdout.write(f"sent again: {len(resent)} job(s) {resent if resent else ''}".strip())
