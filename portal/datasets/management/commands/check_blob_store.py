from django.core.management.base import BaseCommand, CommandError

from portal.datasets import blobs


class Command(BaseCommand):
    help = ("Check that the blob store the settings name (CAIRN_BLOB_STORE: the local folder "
            "or an S3-compatible object store) can be written, read and cleaned: a small probe "
            "is stored and removed. With --create-bucket a missing bucket is made first.")

    def add_arguments(self, parser):
        parser.add_argument("--create-bucket", action="store_true",
                            help="make the bucket (CAIRN_S3_BUCKET) if it does not exist")

    def handle(self, *args, create_bucket, **options):
        try:
            said = blobs.check_store(create=create_bucket)
        except (blobs.BlobStoreError, blobs.BlobIntegrityError, blobs.StorageFull,
                OSError) as exc:
            raise CommandError(str(exc)) from None
        self.stdout.write(f"blob store: {said}")
