"""Quality checks through the portal: rounds, reuse, new settings, overrides, derivatives."""

import json
import shutil

import pytest
from django.core.management import CommandError, call_command
from django.urls import reverse

from portal.accounts.setup import add_site, add_study
from portal.audit.models import Event
from portal.datasets.services import submit_path
from portal.quality.models import QCRound, QCRun
from portal.quality.services import progress, start_round
from tests.helpers import member, run_pending

pytestmark = pytest.mark.django_db


@pytest.fixture
def checked(demo_small, tmp_path):
    """One small demo site ingested and checked; returns what the tests need."""
    info = demo_small.sites[1]
    study, _ = add_study("rail", name="Rail")
    site, _ = add_site(info.slug, study_slug="rail", name=info.name)
    manager, _ = member("dm", role="data_manager", site_slug=info.slug)
    upload = submit_path(info.bids_root, site=site, study=study, user=manager)
    run_pending("upload.validate")
    upload.refresh_from_db()
    version = upload.version
    assert run_pending("qc.version") == 1
    assert run_pending("qc.recording") == version.recordings.count()
    key = json.loads(demo_small.answer_key.read_text())
    return {"version": version, "manager": manager, "site": site, "key": key, "info": info}


def test_checks_start_by_themselves_and_cover_every_recording(checked):
    version = checked["version"]
    qc_round = QCRound.objects.get(version=version)
    assert progress(qc_round) == (version.recordings.count(), version.recordings.count())
    assert QCRun.objects.count() == version.recordings.count()
    assert Event.objects.filter(verb="qc.finished").count() == version.recordings.count()


def test_unchanged_inputs_reuse_results_and_new_settings_make_a_new_round(client, checked):
    version = checked["version"]
    first = QCRound.objects.get(version=version)
    again, created = start_round(version)
    assert again.pk == first.pk and not created
    runs_before = QCRun.objects.count()
    stricter = {**first.settings, "bad_channel_share_review": 0.01}
    second, created = start_round(version, qc_settings=stricter)
    assert created and second.pk != first.pk
    run_pending("qc.version")
    assert run_pending("qc.recording") == version.recordings.count()
    assert QCRun.objects.count() == 2 * runs_before
    client.force_login(checked["manager"])
    for qc_round in (first, second):
        assert client.get(reverse("quality:round", args=[qc_round.pk])).status_code == 200
    # Asking the first settings again queues nothing new.
    start_round(version, qc_settings=first.settings)
    assert run_pending("qc.version") == 0 and run_pending("qc.recording") == 0


def test_override_wins_over_the_checks_and_is_recorded(client, checked):
    version = checked["version"]
    qc_round = QCRound.objects.get(version=version)
    recording = version.recordings.order_by("path").first()
    channel = recording.channel_names[0]
    client.force_login(checked["manager"])
    url = reverse("quality:override", args=[qc_round.pk, recording.pk])
    response = client.post(url, {"channel": channel, "status": "bad",
                                 "reason": "electrode came loose at the start"})
    assert response.status_code == 302
    page = client.get(reverse("quality:recording", args=[qc_round.pk, recording.pk]))
    assert "electrode came loose" in page.content.decode()
    assert Event.objects.filter(verb="qc.channel_override").count() == 1
    auditor, _ = member("aud", role="auditor", site_slug=checked["site"].slug)
    client.force_login(auditor)
    assert client.post(url, {"channel": channel, "status": "good", "reason": "x"}).status_code \
        == 403


def test_derivative_reads_back_with_mne_bids(checked, tmp_path):
    """The derivative's channels.tsv status must be what mne-bids reads as info['bads']."""
    import mne_bids

    version = checked["version"]
    qc_round = QCRound.objects.get(version=version)
    out = tmp_path / "derivative"
    call_command("qc_export", "--dataset-version", str(version.pk), "--out", str(out))
    description = json.loads((out / "dataset_description.json").read_text())
    assert description["DatasetType"] == "derivative"
    assert description["GeneratedBy"][0]["Version"] == qc_round.code_version
    runs = {r.recording_sha256: r for r in QCRun.objects.filter(settings_digest=qc_round
                                                                 .settings_digest)}
    for recording in version.recordings.all():
        path = mne_bids.get_bids_path_from_fname(out / recording.path)
        path.root = out
        raw = mne_bids.read_raw_bids(path, verbose="ERROR")
        result = runs[recording.sha256].result
        expected = sorted(n for n, c in result["channels"].items() if c["status"] == "bad")
        assert sorted(raw.info["bads"]) == expected, recording.path
        assert (out / recording.path.replace("_eeg" + recording.path[-4:], "_qc.json")).exists()
    shutil.rmtree(out)
    with pytest.raises(CommandError, match="no dataset version"):
        call_command("qc_export", "--dataset-version", "9999", "--out", str(out))


def test_pages_and_plots_render_and_plots_are_cached(client, checked, settings):
    version = checked["version"]
    qc_round = QCRound.objects.get(version=version)
    run = QCRun.objects.filter(settings_digest=qc_round.settings_digest).first()
    client.force_login(checked["manager"])
    page = client.get(reverse("quality:round", args=[qc_round.pk]) + "?sort=verdict")
    assert page.status_code == 200 and "recordings checked" in page.content.decode()
    for kind in ("spectrum", "sensors", "timeline"):
        response = client.get(reverse("quality:plot", args=[run.pk, kind]))
        assert response.status_code == 200 and b"<svg" in response.content
    cached = sorted((settings.VAR_DIR / "plots").glob("*.svg"))
    client.get(reverse("quality:plot", args=[run.pk, "spectrum"]))
    assert sorted((settings.VAR_DIR / "plots").glob("*.svg")) == cached


def test_channels_the_site_marked_bad_are_honoured(demo_small, tmp_path, client):
    """A `status` of bad in *_channels.tsv (BIDS specification) is kept as 'marked by site'."""
    info = demo_small.sites[0]
    root = tmp_path / info.slug
    shutil.copytree(info.bids_root, root)
    channels_tsv = next(root.glob("sub-01/ses-01/eeg/*task-rest_channels.tsv"))
    lines = channels_tsv.read_text().splitlines()
    header = lines[0].split("\t")
    row = lines[1].split("\t")
    marked = row[header.index("name")]
    row[header.index("status")] = "bad"
    if "status_description" in header:
        row[header.index("status_description")] = "reference electrode came off"
    channels_tsv.write_text("\n".join([lines[0], "\t".join(row), *lines[2:]]) + "\n")
    study, _ = add_study("rail", name="Rail")
    site, _ = add_site(info.slug, study_slug="rail", name=info.name)
    manager, _ = member("dm", role="data_manager", site_slug=info.slug)
    upload = submit_path(root, site=site, study=study, user=manager)
    run_pending("upload.validate")
    run_pending("qc.version")
    run_pending("qc.recording")
    upload.refresh_from_db()
    recording = upload.version.recordings.get(path=channels_tsv.relative_to(root).as_posix()
                                              .replace("_channels.tsv", "_eeg.edf"))
    run = QCRun.objects.get(recording_sha256=recording.sha256)
    channel = run.result["channels"][marked]
    assert channel["status"] == "bad" and channel["marked_by_site"]
    qc_round = QCRound.objects.get(version=upload.version)
    client.force_login(manager)
    page = client.get(reverse("quality:recording", args=[qc_round.pk, recording.pk]))
    assert "marked by site" in page.content.decode()
