"""Who may see and change uploads and dataset versions: each belongs to one (site, study)."""

from django.http import Http404
from django.shortcuts import get_object_or_404

from portal.accounts.models import Study
from portal.accounts.permissions import Action, can, pairs_q, scope_of
from portal.datasets.models import DatasetVersion, Recording, Upload


def upload_visible(user, upload):
    return can(user, Action.VIEW, site=upload.site_id, study=upload.study_id)


def visible_upload(user, upload_id):
    upload = get_object_or_404(Upload.objects.select_related("site", "study"), pk=upload_id)
    if not upload_visible(user, upload):
        raise Http404("no such upload")
    return upload


def version_visible(user, version):
    return can(user, Action.VIEW, site=version.site_id, study=version.study_id)


def visible_version(user, version_id):
    version = get_object_or_404(
        DatasetVersion.objects.select_related("site", "study", "parent", "upload"), pk=version_id
    )
    if not version_visible(user, version):
        raise Http404("no such dataset version")
    return version


def may_download_version(user, version):
    return can(user, Action.DOWNLOAD, site=version.site_id, study=version.study_id)


def may_upload(user, site, study):
    return can(user, Action.UPLOAD, site=site, study=study)


def upload_studies(user, site):
    """The studies in which ``user`` may upload ``site``'s data."""
    scope = scope_of(user)
    if scope.operator:
        return site.studies.all()
    return Study.objects.filter(pk__in=sorted(scope.studies_at(site.pk, Action.UPLOAD)))


def visible_recordings(user, action=Action.VIEW):
    """Recordings of dataset versions the user reaches for ``action``."""
    return Recording.objects.filter(pairs_q(user, action, site="version__site",
                                            study="version__study"))


def recording_visible(user, recording):
    return can(user, Action.VIEW, site=recording.version.site_id,
               study=recording.version.study_id)


# --- jobs about these objects (see portal.jobs.access) -------------------------------------

def upload_job_visible(user, target_id):
    upload = Upload.objects.filter(pk=target_id).only("site_id", "study_id").first()
    return upload is not None and upload_visible(user, upload)


def recording_job_visible(user, target_id):
    recording = Recording.objects.filter(pk=target_id).select_related("version").first()
    return recording is not None and recording_visible(user, recording)
