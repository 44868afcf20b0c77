"""The files of a model release (bundle, model, card, feature spec) for one site: the one
answer the web page and the API both give."""

from django.http import FileResponse, Http404

from portal.accounts.permissions import Action, get_visible_site, require
from portal.audit.events import record
from portal.datasets import blobs
from portal.training.access import refuse_withdrawn, release_for_site

#: part -> (file name after "release-N", content type, field holding the blob's sha256);
#: "bundle" is the one archive a site downloads (the three files and a requirements list).
RELEASE_PARTS = {"bundle": (".zip", "application/zip", "bundle_sha256"),
                 "model": ("-model.skops", "application/octet-stream", "model_sha256"),
                 "card": ("-model-card.md", "text/markdown", "card_sha256"),
                 "spec": ("-features.json", "application/json", "spec_sha256")}


def release_file_response(request, release_id, part, site_slug):
    """One file of a release for a site the requester sees: the release must be usable by
    that site in its study (portal.training.access.release_for_site), download allowed
    there, not withdrawn (410); recorded as a download."""
    site = get_visible_site(request.user, site_slug)
    release = release_for_site(request.user, release_id, site)
    if part not in RELEASE_PARTS:
        raise Http404("no such release file")
    require(request.user, Action.DOWNLOAD, site=site, study=release.run.study)
    refused = refuse_withdrawn(request, release, f"release-{release.pk}"
                               f"{RELEASE_PARTS[part][0]}")
    if refused is not None:
        return refused
    suffix, content_type, field = RELEASE_PARTS[part]
    filename = f"release-{release.pk}{suffix}"
    sha = getattr(release, field)
    if not sha:
        raise Http404("this release has no archive; download its files one by one")
    record("download", actor=request.user, token=getattr(request, "api_token", None),
           site=site, study=release.run.study, target=release,
           summary=f"downloaded {filename} of release {release.pk} for {site.slug}",
           outputs=[{"release": release.pk, "file": filename, "sha256": sha}])
    return FileResponse(blobs.open_blob(sha), as_attachment=True, filename=filename,
                        content_type=content_type)
