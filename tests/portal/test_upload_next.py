"""An upload's report offers what comes next: a corrected dataset sent through the form set
to the same site, study and kind of upload, and the report as JSON and CSV (same access as
the upload page; CSV cells made inert for spreadsheets, times in ISO 8601 UTC); the live
status part shows problems and warnings found so far and the report when final. Invented
plumbing data (consortium fixture); formula escaping per OWASP's CSV-injection guidance
(portal/spreadsheet.py)."""

import csv
import io
import json
import re

import pytest
from django.urls import reverse

from portal.datasets.jobs import FoundSoFar
from portal.datasets.models import Upload, UploadMode, UploadState

pytestmark = pytest.mark.django_db

FORMULA = "=HYPERLINK(\"http://example.invalid\")"


def _upload(consortium, state=UploadState.REJECTED, errors=None, warnings=None):
    site = consortium["sites"]["a1"]
    return Upload.objects.create(
        site=site, study=site.studies.get(slug="study-a"), mode=UploadMode.ADDITION,
        state=state, source="web", label="lab-a1.zip",
        errors=errors if errors is not None else [
            {"path": FORMULA, "message": "channels.tsv: column 'type' is missing; add it",
             "line": 1, "field": "type", "code": "channels.missing_column"}],
        warnings=warnings or [{"path": "README", "message": "-short README", "line": None,
                               "field": None, "code": "readme.short"}])


def test_report_downloads_as_json_and_inert_csv(client, consortium):
    upload = _upload(consortium)
    client.force_login(consortium["people"]["dm_a1"])
    reply = client.get(reverse("datasets:upload_report", args=[upload.pk, "json"]))
    assert reply.status_code == 200
    assert "attachment" in reply["Content-Disposition"]
    report = json.loads(reply.content)
    assert report["state"] == "rejected" and report["errors"][0]["path"] == FORMULA
    assert report["received_at"].endswith("+00:00")  # ISO 8601, UTC
    reply = client.get(reverse("datasets:upload_report", args=[upload.pk, "csv"]))
    assert reply.status_code == 200 and reply["Content-Type"].startswith("text/csv")
    rows = list(csv.reader(io.StringIO(reply.content.decode())))
    assert rows[0][:3] == ["upload", "severity", "path"]
    assert rows[1][1:3] == ["error", "'" + FORMULA]  # inert: shown as text
    assert rows[2][1] == "warning" and rows[2][5] == "'-short README"
    assert client.get(reverse("datasets:upload_report",
                              args=[upload.pk, "xml"])).status_code == 404
    # someone of another site sees neither the page nor its report
    client.force_login(consortium["people"]["dm_b1"])
    for fmt in ("json", "csv"):
        assert client.get(reverse("datasets:upload_report",
                                  args=[upload.pk, fmt])).status_code in (403, 404)


def test_rejected_upload_offers_a_corrected_dataset_through_the_same_form(client, consortium):
    upload = _upload(consortium)
    client.force_login(consortium["people"]["dm_a1"])
    page = client.get(reverse("datasets:upload", args=[upload.pk])).content.decode()
    assert "Send a corrected dataset" in page and "data-upload-next" in page
    target = (reverse("datasets:upload_new", args=["a1"])
              + f"?study=study-a&amp;mode=addition&amp;corrects={upload.pk}")
    assert target in page
    assert reverse("datasets:upload_report", args=[upload.pk, "csv"]) in page
    form = client.get(target.replace("&amp;", "&")).content.decode()
    assert f"Correcting upload {upload.pk}" in form and "1 problem" in form
    radios = re.findall(r'<input type="radio" name="mode" value="(\w+)"[^>]*?( checked)?>', form)
    assert dict(radios) == {"addition": " checked", "snapshot": ""}
    assert re.search(r'<option value="study-a" selected>', form)
    # an analyst reads the report but may not upload: no link to the form
    client.force_login(consortium["people"]["analyst_a1"])
    page = client.get(reverse("datasets:upload", args=[upload.pk])).content.decode()
    assert "Send a corrected dataset" not in page and "report.json" in page


def test_live_status_shows_what_was_found_so_far_then_the_report(client, consortium):
    upload = _upload(consortium, state=UploadState.VALIDATING, errors=[], warnings=[])
    client.force_login(consortium["people"]["dm_a1"])

    class Ctx:
        steps = []

        def progress(self, done, total, note=""):
            self.steps.append((done, total))

    so_far = FoundSoFar(Ctx(), upload, every_s=0)
    so_far.report.error("sub-01/eeg/sub-01_task-rest_channels.tsv",
                        "column 'type' is missing; add it", line=1, field="type")
    so_far.on_file(1, 3)
    status = reverse("datasets:upload_status", args=[upload.pk])
    part = client.get(status, HTTP_HX_REQUEST="true").content.decode()
    assert "Problems found so far (1)" in part and "column &#x27;type&#x27; is missing" in part
    assert "hx-get" in part.split(">", 1)[0]  # still polling
    assert "data-upload-next" not in part
    # the final report replaces what was found so far; the partial stops polling
    Upload.objects.filter(pk=upload.pk).update(state=UploadState.REJECTED)
    so_far.report.warn("README", "README is short")
    so_far.on_file(2, 3)  # no longer validating: nothing is written over the report
    assert Upload.objects.get(pk=upload.pk).warnings == []
    part = client.get(status, HTTP_HX_REQUEST="true").content.decode()
    assert "What to fix (1 problem)" in part and "data-upload-next" in part
    assert "hx-get" not in part.split(">", 1)[0]
    assert Ctx.steps == [(1, 4), (2, 4)]


def test_a_finished_work_status_loads_the_results_into_the_page(rf):
    """Feature set, training run and quality round pages poll jobs/_work_status.html; the
    answer that says the work is done also fetches the page again and swaps its <main> in
    (htmx hx-select), so results appear without reloading the page."""
    from django.template.loader import render_to_string

    page = "http://testserver/features/7/"
    request = rf.get("/features/7/status/", HTTP_HX_REQUEST="true", HTTP_HX_CURRENT_URL=page)
    context = {"state": "done", "final": True, "done": 3, "total": 3, "percent": 100,
               "unit": "recordings computed", "jobs": [], "status_url": "/features/7/status/"}
    html = render_to_string("jobs/_work_status.html", context, request=request)
    loader = re.search(r"<div hidden data-results-loader ([^>]*)>", html)
    assert loader, html
    assert f'hx-get="{page}"' in loader.group(1) and 'hx-trigger="load"' in loader.group(1)
    assert 'hx-select="main"' in loader.group(1) and 'hx-target="main"' in loader.group(1)
    assert "finished" in html and ">done<" not in html  # the state in words
    # the page fetched by the loader (an htmx request too) must not load itself again
    again = rf.get("/features/7/", HTTP_HX_REQUEST="true", HTTP_HX_CURRENT_URL=page)
    assert "data-results-loader" not in render_to_string("jobs/_work_status.html", context,
                                                         request=again)
    # still running: the part polls itself and loads nothing yet
    html = render_to_string("jobs/_work_status.html", dict(context, state="running",
                                                           final=False), request=request)
    assert "data-results-loader" not in html and 'hx-trigger="every 2s"' in html
