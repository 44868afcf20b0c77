"""A run's lineage page read per site: the counts it shows are those of its own PROV
document, counted here straight from the PROV-JSON (W3C PROV-JSON: ``entity``,
``hadMember``, ``wasGeneratedBy``, ``used``), not through the page's code. Plumbing on the
invented bulk study (portal.demo.bulk)."""

import json
import re

import pytest
from django.urls import reverse

from portal.demo.bulk import make_study
from portal.training.models import TrainingRun

pytestmark = pytest.mark.django_db


def _counts_from_prov_json(text):
    """{site: (files, recordings, quality results)} from a PROV-JSON document."""
    document = json.loads(text)
    entities = document.get("entity", {})

    def value(attributes, key):
        item = attributes.get(key)
        return item.get("$") if isinstance(item, dict) else item

    site_of_version = {ident: value(a, "cairn:site") for ident, a in entities.items()
                       if value(a, "prov:type") in ("cairn:DatasetVersion",
                                                    "cairn:DatasetVersionSummary")}
    files = {}
    for member in document.get("hadMember", {}).values():
        site = site_of_version.get(member["prov:collection"])
        if site is not None:
            files.setdefault(site, set()).add(member["prov:entity"])
    site_of_file = {f: site for site, fs in files.items() for f in fs}
    results = {}
    for usage in document.get("used", {}).values():
        site = site_of_file.get(usage["prov:entity"])
        if site is not None and usage["prov:activity"].startswith("cairn:quality-check-"):
            results[site] = results.get(site, 0) + 1
    out = {}
    for site in sorted(set(site_of_version.values())):
        paths = [value(entities[f], "cairn:path") for f in files.get(site, ())]
        recordings = sum(1 for p in paths if p.lower().endswith((".edf", ".bdf", ".vhdr",
                                                                ".set")))
        out[site] = (len(files.get(site, ())), recordings, results.get(site, 0))
    return out


def _counts_on_page(body):
    out = {}
    for slug, row in re.findall(r'<tr data-site="([^"]+)">(.*?)</tr>', body, re.S):
        cells = dict(re.findall(r'data-count="(\w+)">(\d+)<', row))
        out[slug] = (int(cells["files"]), int(cells["recordings"]),
                     int(cells["quality_results"]))
    return out


def test_the_per_site_summary_counts_what_the_prov_document_holds(client):
    made = make_study(24, slug="lineage", seed=5)
    run = TrainingRun.objects.filter(study=made["study"]).order_by("id").first()
    client.force_login(made["users"]["lead"])
    page = client.get(reverse("lineage:page", args=["training", run.pk]))
    assert page.status_code == 200
    body = page.content.decode()
    expected = _counts_from_prov_json(
        client.get(reverse("lineage:prov", args=["training", run.pk])).content.decode())
    shown = _counts_on_page(body)
    assert len(shown) == 3 and shown == expected, (shown, expected)
    assert all(recordings > 0 and results > 0 for _, recordings, results in shown.values())
    assert "cairn:file-" not in body  # the files wait on the per-site pages

    site = sorted(shown)[0]
    detail = client.get(reverse("lineage:page", args=["training", run.pk]), {"site": site})
    text = detail.content.decode()
    assert detail.status_code == 200
    n_records = int(re.search(r"\((\d+) records\)", text).group(1))
    assert n_records >= shown[site][0] + 2 * shown[site][2]  # files, checks and results
    assert text.count("<tr><td>") == min(n_records, 100)  # one page of the site's records
    last = client.get(reverse("lineage:page", args=["training", run.pk]),
                      {"site": site, "page": "999"}).content.decode()
    assert f"of {-(-n_records // 100)} (" in last
    assert client.get(reverse("lineage:page", args=["training", run.pk]),
                      {"site": "nowhere"}).status_code == 404
