"""Small things a new user of the demo noticed: the log-ins file says who reaches what (a
study lead reaches every site of the study, not the one site its membership is recorded
at), every page links the portal's own icon, served from static, and a rating scale's
levels are listed from the lowest ratings up however they were typed. Plumbing: common
practice, no source."""

import xml.etree.ElementTree as ET

import pytest
from django.contrib.staticfiles import finders
from django.urls import reverse

from portal.accounts.permissions import scope_of
from portal.demo.logins import login_lines
from tests.helpers import member


def test_the_log_ins_file_names_the_study_lead_and_auditor_study_wide(consortium):
    lead, auditor = consortium["people"]["lead_a"], consortium["people"]["auditor_a"]
    lines = login_lines([("demo-operator", "operator", None, "pw0"),
                         ("demo-lead", "study_lead", "a1", "pw1"),
                         ("demo-auditor", "auditor", "a2", "pw2"),
                         ("dm-a1", "data_manager", "a1", "pw3")], "Study A")
    by_user = {line.split()[0]: line for line in lines[1:]}
    assert by_user["demo-lead"].endswith("study lead — all sites of the study Study A")
    assert by_user["demo-auditor"].endswith("all sites of the study Study A, read only")
    assert by_user["dm-a1"].endswith("site data manager — site a1 only")
    assert "operator pages" in by_user["demo-operator"]
    assert all(line.split()[1].startswith("pw") for line in lines[1:])  # user, then password
    # what the words claim is what the access rule gives: the lead and the auditor, members
    # at one site each, reach both sites of study A
    sites = {consortium["sites"][k].pk for k in ("a1", "a2")}
    for person in (lead, auditor):
        assert sites <= {site for site, _ in scope_of(person).view}


@pytest.mark.django_db
def test_pages_link_the_portal_icon_served_from_static(client):
    user, _ = member("icon-viewer", role="operator")
    client.force_login(user)
    page = client.get(reverse("dashboard:home")).content.decode()
    assert '<link rel="icon" href="/static/favicon.svg" type="image/svg+xml">' in page
    path = finders.find("favicon.svg")
    root = ET.parse(path).getroot()
    assert root.tag == "{http://www.w3.org/2000/svg}svg" and root.get("viewBox") == "0 0 32 32"


def test_a_scale_typed_out_of_order_is_kept_and_listed_from_the_lowest_ratings_up(
        client, consortium):
    from portal.accounts.models import Study
    from portal.studies.forms import ProtocolForm
    from portal.studies.models import current_protocol

    study = Study.objects.get(slug="study-a")
    data = {**ProtocolForm.initial_from(current_protocol(study).data),
            "levels": "swamped 7-9\ncalm 1-3\nbusy 4-6", "note": "new names"}
    client.force_login(consortium["people"]["lead_a"])
    assert client.post(reverse("studies:protocol_edit", args=["study-a"]),
                       data).status_code == 302
    stored = current_protocol(study).data["rating_scale"]["levels"]
    assert [level["name"] for level in stored] == ["calm", "busy", "swamped"]
    page = client.get(reverse("studies:protocol", args=["study-a"])).content.decode()
    assert page.index(">calm<") < page.index(">busy<") < page.index(">swamped<")
