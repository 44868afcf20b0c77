"""Study protocols: the defaults, validation with named fields, and versioned edits."""

import pytest
from django.urls import reverse

from portal.accounts.models import Study
from portal.audit.models import Event
from portal.studies.forms import ProtocolForm
from portal.studies.models import ProtocolVersion, current_protocol
from portal.studies.protocol import (
    ProtocolError,
    default_protocol,
    level_for_rating,
    validate_protocol,
)


def test_default_rating_bins_and_bands():
    """9-point workload rating binned 1–3/4–6/7–9 and delta–gamma bands inside 0.5–40 Hz:
    common practice, no source."""
    p = validate_protocol(default_protocol())
    assert [level_for_rating(p, r) for r in range(1, 10)] == (
        ["low"] * 3 + ["moderate"] * 3 + ["high"] * 3
    )
    assert level_for_rating(p, 0) is None and level_for_rating(p, 10) is None
    edges = [(b["name"], b["l_freq_hz"], b["h_freq_hz"]) for b in p["bands"]]
    assert edges == [("delta", 0.5, 4.0), ("theta", 4.0, 8.0), ("alpha", 8.0, 13.0),
                     ("beta", 13.0, 30.0), ("gamma", 30.0, 40.0)]
    assert p["passband"] == {"l_freq_hz": 0.5, "h_freq_hz": 40.0}


@pytest.mark.parametrize("change, field", [
    (lambda p: p["bands"].append({"name": "high", "l_freq_hz": 35, "h_freq_hz": 60}), "bands"),
    (lambda p: p["rating_scale"]["levels"].pop(1), "rating_scale"),
    (lambda p: p["qc"].update(bad_channel_share_review=0.5, bad_channel_share_fail=0.2),
     "qc.bad_channel_share_review"),
    (lambda p: p.update(tasks=[]), "tasks"),
    (lambda p: p["passband"].update(l_freq_hz=50), "passband.l_freq_hz"),
    (lambda p: p["passband"].update(l_freq_hz=0), "passband.l_freq_hz"),
    (lambda p: p["features"].update(overlap=0.95), "features.overlap"),
    (lambda p: p["features"].update(window_s=0.1), "features.window_s"),
    (lambda p: p["qc"].update(min_duration_s=-1), "qc.min_duration_s"),
])
def test_invalid_protocols_name_the_field(change, field):
    p = default_protocol()
    change(p)
    with pytest.raises(ProtocolError) as info:
        validate_protocol(p)
    assert field in info.value.errors


def test_form_reports_line_of_bad_band():
    p = default_protocol()
    data = {**ProtocolForm.initial_from(p), "bands": "delta 0.5 4\nalpha eight 13"}
    form = ProtocolForm(data, protocol=p)
    assert not form.is_valid()
    assert "line 2" in form.errors["bands"][0]


@pytest.mark.django_db
def test_study_lead_edit_makes_a_new_version_and_event(client, consortium):
    study = Study.objects.get(slug="study-a")
    v1 = current_protocol(study)
    data = {**ProtocolForm.initial_from(v1.data), "levels": "low 1-4\nmoderate 5-6\nhigh 7-9",
            "note": "site feedback"}
    client.force_login(consortium["people"]["lead_a"])
    response = client.post(reverse("studies:protocol_edit", args=["study-a"]), data)
    assert response.status_code == 302, response.content.decode()[:2000]
    v2 = current_protocol(study)
    assert v2.number == v1.number + 1
    assert level_for_rating(v2.data, 4) == "low"
    assert ProtocolVersion.objects.get(pk=v1.pk).data == v1.data  # old version kept unchanged
    event = Event.objects.filter(verb="protocol.changed", study=study).order_by("-id").first()
    assert event.params["changed"] == ["rating_scale"] and event.actor.username == "lead_a"
    # Saving the same again makes no new version.
    client.post(reverse("studies:protocol_edit", args=["study-a"]), data)
    assert current_protocol(study).number == v2.number


@pytest.mark.django_db
def test_only_study_leads_edit(client, consortium):
    for who in ("dm_a1", "analyst_a1", "auditor_a", "lead_b"):
        client.force_login(consortium["people"][who])
        status = client.get(reverse("studies:protocol_edit", args=["study-a"])).status_code
        assert status in (403, 404), who
