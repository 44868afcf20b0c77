"""Feature sets through the portal: jobs, the stored table, reuse, the command, pages and
downloads. The science of the single features is checked in tests/unit against reference
libraries; here the demo consortium (invented data) checks the plumbing."""

import io
import json

import pandas as pd
import pytest
from django.core.management import CommandError, call_command
from django.urls import reverse

from portal.accounts.setup import add_site, add_study
from portal.audit.models import Event
from portal.datasets import blobs
from portal.datasets.services import submit_path
from portal.features.models import FeatureSet, RecordingFeatures
from portal.features.services import (
    FeatureRequestError,
    request_feature_set,
)
from portal.quality.services import set_override
from tests.helpers import member, run_all_pending, run_pending

pytestmark = pytest.mark.django_db

FEATURE_JOBS = ("features.set", "features.recording", "features.combine")


def ingest(demo_small, indices):
    study, _ = add_study("rail", name="Rail")
    versions = []
    for index in indices:
        info = demo_small.sites[index]
        site, _ = add_site(info.slug, study_slug="rail", name=info.name)
        manager, _ = member(f"dm-{info.slug}", role="data_manager", site_slug=info.slug)
        member(f"analyst-{info.slug}", role="analyst", site_slug=info.slug)
        upload = submit_path(info.bids_root, site=site, study=study, user=manager)
        run_pending("upload.validate")
        upload.refresh_from_db()
        versions.append(upload.version)
    run_all_pending(("qc.version", "qc.recording"))
    return study, versions


def compute(versions, **kwargs):
    feature_set, created = request_feature_set(versions, **kwargs)
    run_all_pending(FEATURE_JOBS)
    feature_set.refresh_from_db()
    return feature_set, created


def table_of(feature_set):
    with blobs.open_blob(feature_set.table_sha256) as fh:
        return pd.read_parquet(fh)


def test_two_sites_end_to_end(client, demo_small):
    study, versions = ingest(demo_small, [0, 2])
    feature_set, created = compute(versions)
    assert created and feature_set.state == "done", feature_set.error
    table = table_of(feature_set)

    # Rows: one per kept window; the recordings' parts add up to the table.
    parts = RecordingFeatures.objects.filter(items__feature_set=feature_set)
    assert len(table) == feature_set.n_rows == sum(p.n_windows for p in parts) > 0
    assert set(table["site"]) == {demo_small.sites[0].slug, demo_small.sites[2].slug}
    for column in ("site", "participant", "session", "task", "run", "window_start_s",
                   "rating", "level", "condition"):
        assert column in table.columns

    # Channels: the common set of both sites, every feature column described in the sidecar.
    channels = feature_set.params["preprocessing"]["channels"]
    assert channels and all(f"alpha.relative_power.{c}" in table.columns for c in channels)
    with blobs.open_blob(feature_set.sidecar_sha256) as fh:
        sidecar = json.load(fh)
    assert set(sidecar["columns"]) == set(table.columns)
    described = sidecar["columns"][f"alpha.relative_power.{channels[0]}"]
    assert described["band"]["name"] == "alpha" and described["unit"] == "1"
    assert "Research use only" in sidecar["caution"]

    # Labels come from the recordings' blocks: rest windows carry no rating.
    rest = table[table["task"] == "rest"]
    assert rest["rating"].isna().all() and (rest["condition"] == "rest").all()
    rated = table[table["task"] != "rest"]
    assert rated["rating"].notna().all() and set(rated["level"]) <= {"low", "moderate", "high"}

    # Lineage events carry the stored hashes.
    created_event = Event.objects.get(verb="features.created", target_id=str(feature_set.pk))
    assert created_event.outputs[0]["table_sha256"] == feature_set.table_sha256
    assert {i["part_sha256"] for i in created_event.inputs} == {p.table_sha256 for p in parts}
    assert Event.objects.filter(verb="features.requested").count() == 1

    # Site effects: assessed with participants held out, against chance for two sites.
    effects = feature_set.site_effects
    assert effects["applies"] and effects["chance"] == 0.5
    assert effects["classifier"]["ran"] and effects["classifier"]["grouping"] == "participant"
    assert effects["top_features"] and 0 <= effects["top_features"][0]["eta_squared"] <= 1

    # Rebuilding the table from the stored parts gives the same bytes (same blob hash).
    from cairn_science.features.pipeline import frame_to_parquet
    from portal.features.jobs import build_table

    rebuilt, _, _ = build_table(feature_set)
    assert blobs.put_bytes(frame_to_parquet(rebuilt))[0] == feature_set.table_sha256

    # Pages, plots and downloads for the study lead; nothing for one site's data manager.
    lead, _ = member("lead", role="study_lead", site_slug=demo_small.sites[0].slug)
    client.force_login(lead)
    page = client.get(reverse("features:detail", args=[feature_set.pk]))
    assert page.status_code == 200
    body = page.content.decode()
    assert "Site effects" in body and "Before you download" in body
    svg = client.get(reverse("features:plot", args=[feature_set.pk, "by-level"]))
    assert svg.status_code == 200 and svg.content.lstrip().startswith(b"<?xml")
    csv = b"".join(client.get(reverse("features:download", args=[feature_set.pk, "csv"]))
                   .streaming_content)
    assert len(pd.read_csv(io.BytesIO(csv))) == len(table)
    assert Event.objects.filter(verb="download", target_id=str(feature_set.pk)).count() == 1
    client.force_login(member("dm-x", role="data_manager",
                              site_slug=demo_small.sites[0].slug)[0])
    assert client.get(reverse("features:detail", args=[feature_set.pk])).status_code == 404
    assert client.get(reverse("features:download", args=[feature_set.pk, "parquet"])
                      ).status_code == 404


def test_reuse_changes_and_the_command(tmp_path, demo_small):
    study, (version,) = ingest(demo_small, [1])
    out = tmp_path / "table.parquet"
    args = ["features", "--dataset-version", str(version.pk), "--out", str(out), "--json"]

    buffer = io.StringIO()
    call_command(*args, stdout=buffer)
    first = json.loads(buffer.getvalue())
    assert first["reused"] is False and first["state"] == "running" and not out.exists()
    run_all_pending(FEATURE_JOBS)
    buffer = io.StringIO()
    call_command(*args, stdout=buffer)
    again = json.loads(buffer.getvalue())
    assert again["feature_set"] == first["feature_set"] and again["reused"] is True
    table = pd.read_parquet(out)
    assert (again["rows"], again["columns"]) == table.shape
    original = FeatureSet.objects.get(pk=first["feature_set"])
    n_parts = RecordingFeatures.objects.count()

    # Any parameter change gives a new set; the study's defaults fill the rest.
    params = tmp_path / "params.json"
    params.write_text(json.dumps({"preprocessing": {"window_s": 2.0}}))
    buffer = io.StringIO()
    call_command(*args, "--params", str(params), stdout=buffer)
    changed = json.loads(buffer.getvalue())
    assert changed["feature_set"] != original.pk and changed["reused"] is False
    assert FeatureSet.objects.get(pk=changed["feature_set"]).params["preprocessing"][
        "overlap"] == original.params["preprocessing"]["overlap"]
    run_all_pending(FEATURE_JOBS)

    # A person's channel decision changes one recording's inputs: a new set in which only
    # that recording is computed again.
    recording = version.recordings.order_by("path").first()
    channel = recording.channel_names[0]
    set_override(site=version.site, recording=recording, channel=channel, status="bad",
                 reason="electrode came loose", user=None)
    before = RecordingFeatures.objects.count()
    overridden, created = compute([version])
    assert created and overridden.pk != original.pk
    assert RecordingFeatures.objects.count() == before + 1
    part = overridden.items.get(recording=recording).part
    assert part.channel_status[channel] == "interpolated"
    assert n_parts == version.recordings.count()

    # Bad parameters name the field.
    params.write_text(json.dumps({"preprocesing": {}}))
    with pytest.raises(CommandError, match="unknown setting.*preprocesing"):
        call_command(*args, "--params", str(params))
    with pytest.raises(FeatureRequestError, match="bad_channels"):
        request_feature_set([version], overrides={"preprocessing": {"bad_channels": "guess"}})
    with pytest.raises(FeatureRequestError, match="lacks channel"):
        request_feature_set([version], overrides={"channels": ["Cz", "NoSuchChannel"]})
