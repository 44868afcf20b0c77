"""What a person reads on the main pages: dates written one way, and no raw codes.

The pages of an invented study (portal.demo.bulk, the fixture of the page-query test) are
rendered as its study lead, a data manager and an analyst see them; the visible text (tags,
scripts, styles and verbatim blocks such as <code> and <pre> left out) must write every date
as "4 Dec 2026" or "4 Dec 2026, 13:05" (portal/formats), and show no code of the known
vocabularies (portal/words.py) where words belong. Plumbing on invented rows: common
practice, no source.
"""

import html
import re

import pytest
from django.urls import reverse

from portal.datasets.models import DatasetVersion, Upload
from portal.demo.bulk import make_study
from portal.jobs.models import Job
from portal.training.models import TrainingRun
from tests.portal import objects
from tests.portal.test_page_queries import pages as main_pages

pytestmark = pytest.mark.django_db

MONTHS = "Jan|Feb|Mar|Apr|May|Jun|Jul|Aug|Sep|Oct|Nov|Dec"
#: The one date format (DATE_FORMAT, DATETIME_FORMAT; charts' axes drop the year).
OURS = re.compile(rf"\b\d{{1,2}} (?:{MONTHS})(?: \d{{4}})?(?:, \d{{2}}:\d{{2}})?\b")
#: Anything else that looks like a date or a time of day.
OTHER_DATES = [
    re.compile(r"\b\d{4}-\d{2}-\d{2}"),                      # ISO 8601
    re.compile(r"\b\d{1,2}[./]\d{1,2}[./]\d{2,4}\b"),         # 04.12.2026, 4/12/26
    re.compile(rf"\b(?:{MONTHS})[a-z]*\.? \d{{1,2}}, \d{{4}}"),  # Dec. 4, 2026
    re.compile(r"\b(?:January|February|March|April|June|July|August|September|October|"
               r"November|December)\b"),                       # months written out
    re.compile(r"\b\d{1,2}(?::\d{2})? ?[ap]\.?m\.?(?!\w)"),    # 1:31 p.m.
    re.compile(r"\b(?:midnight|noon)\b"),
    re.compile(r"\b\d{1,2}:\d{2}:\d{2}\b"),                    # times with seconds
]
#: Codes that must not be shown as they are besides those of portal/words.py: evaluation
#: labels written as "Label: code" and verbs of audit events.
RAW_CODES = re.compile(r"\b(?:Label: (?:level|condition)|"
                       r"(?:upload|qc|features|training|release)"
                       r"\.(?!(?:json|csv|tsv|zip|parquet)\b)[a-z_]+)\b")
BADGE = re.compile(r'<span class="(?:state|verdict)[^"]*"[^>]*>([^<]*)</span>')


def known_codes():
    """Codes of every vocabulary whose words differ from the code: those with an underscore
    may not show anywhere, the others (plain English words such as "done") not as a badge."""
    from portal.words import vocabularies

    codes = {code for vocabulary in vocabularies().values()
             for code, words in vocabulary.items() if code != words}
    return ({c for c in codes if "_" in c}, codes)


def visible_text(page):
    body = re.sub(r"(?s)<(script|style|code|pre|svg|title)\b.*?</\1>", " ", page)
    body = re.sub(r"(?s)<details\b[^>]*data-verbatim.*?</details>", " ", body)
    return html.unescape(re.sub(r"<[^>]+>", " ", body))


def pages(study):
    """The page-query test's main pages (but the audit trail and lineage, whose verbs and
    kinds are shown as recorded) and the other pages people read."""
    site = study.sites.order_by("slug").first()
    version = DatasetVersion.objects.filter(site=site, study=study).order_by("-number").first()
    run = TrainingRun.objects.filter(study=study).order_by("id").first()
    job = Job.objects.filter(study=study).order_by("id").first()
    job_id = job.pk if job else objects.job_about("training.run", run, site=site, study=study)
    urls = {name: url for name, url in main_pages(study).items()
            if name not in ("audit trail", "lineage")}
    urls.update({
        "dataset version": reverse("datasets:version", args=[version.pk]),
        "feature sets": reverse("features:study", args=[study.slug]),
        "training runs": reverse("training:study", args=[study.slug]),
        "compare runs": reverse("training:compare", args=[study.slug]),
        "protocol": reverse("studies:protocol", args=[study.slug]),
        "job": reverse("jobs:detail", args=[job_id]),
    })
    for upload in Upload.objects.filter(study=study).order_by("pk")[:3]:
        urls[f"upload {upload.pk}"] = reverse("datasets:upload", args=[upload.pk])
    return urls


@pytest.fixture
def bulk():
    return make_study(60, slug="words", seed=3)


def _texts(client, made):
    out, badges = {}, {}
    for who in ("lead",):
        client.force_login(made["users"][who])
        for name, url in pages(made["study"]).items():
            response = client.get(url)
            assert response.status_code == 200, (who, name, url)
            page = response.content.decode()
            out[f"{name} ({who})"] = visible_text(page)
            badges[f"{name} ({who})"] = BADGE.findall(page)
    return out, badges


def test_pages_write_dates_one_way_and_show_no_raw_codes(client, bulk):
    texts, badges = _texts(client, bulk)
    with_underscore, codes = known_codes()
    underscored = re.compile(r"\b(?:" + "|".join(sorted(with_underscore)) + r")\b")
    dated = 0
    for name, text in texts.items():
        dated += len(OURS.findall(text))
        rest = OURS.sub(" ", text)
        for pattern in OTHER_DATES:
            found = pattern.search(rest)
            assert found is None, (f"{name}: a date or time written otherwise: "
                                   f"{rest[max(0, found.start() - 60):found.end() + 60]!r}")
        found = RAW_CODES.search(text) or underscored.search(text)
        assert found is None, (f"{name}: raw code {found.group(0)!r} in "
                               f"{text[max(0, found.start() - 80):found.end() + 80]!r}")
        for badge in badges[name]:
            assert badge.strip() not in codes, f"{name}: a badge shows the code {badge!r}"
    assert dated >= len(texts) // 2, "the pages should show dates; the check saw too few"
    # the study overview's verdict figures name the verdicts in words too
    overview = client.get(reverse("dashboard:study", args=[bulk["study"].slug])).content.decode()
    assert re.search(r"verdicts: usable [\d.]+ %, needs a look [\d.]+ %, not usable", overview)
    assert not re.search(r"\b(?:pass|review|fail): \d", overview)
    # the quality page names each measurement with its unit and the side that is bad
    # (cairn_science.qc.checks.MEASURES; the round's thresholds)
    quality = texts["recording quality (lead)"]
    assert "What each measurement is and when it counts as bad" in quality
    assert re.search(r"share of time without signal \(0–1\)\s+above 0\.01 is bad", quality)
    assert re.search(r"difference from the closest neighbour [^\n]*\s+below 0\.01 is bad",
                     quality)


def test_the_date_check_would_see_the_other_formats():
    """The patterns above catch what Django's English formats and ISO 8601 write."""
    for text in ("4 Dec. 2026, 1:31 p.m.", "Dec. 4, 2026", "2026-12-04 13:31",
                 "04.12.2026", "4 December 2026", "13:31:05"):
        rest = OURS.sub(" ", text)
        assert any(p.search(rest) for p in OTHER_DATES), text
    for text in ("4 Dec 2026", "4 Dec 2026, 13:31", "week of 30 Nov 2026", "30 Nov"):
        rest = OURS.sub(" ", text)
        assert not any(p.search(rest) for p in OTHER_DATES), text
