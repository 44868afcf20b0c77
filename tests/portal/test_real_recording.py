"""A real recording through the whole portal: upload, quality checks, features.

Source: MNE-Python testing data, EEGLAB/test_raw.set (32 channels read as EEG, 128 Hz,
238 s), wrapped as BIDS by mne-bids with an INVENTED condition and workload rating in
scans.tsv (the recording carries none; tests/real_eeg.py). The checks' verdict and flags
must be those of the pure run on the same recording (tests/unit/test_qc_real_eeg.py, which
compares them with pyprep 0.9, ransac off): the portal's reading and preparation must not
change what the checks find.
"""

import pandas as pd
import pytest

from portal.accounts.setup import add_site, add_study
from portal.datasets import blobs
from portal.datasets.services import submit_path
from portal.features.models import RecordingFeatures
from portal.features.services import request_feature_set
from portal.quality.models import QCRun
from tests.helpers import member, run_all_pending, run_pending
from tests.real_eeg import EEGLAB_LONG_MAINS_HZ, read_long_recording, write_long_recording_bids

pytestmark = pytest.mark.django_db


def test_real_recording_goes_through_upload_checks_and_features(tmp_path):
    from cairn_science.qc import QCSettings, run_qc

    root = tmp_path / "bids"
    relpath = write_long_recording_bids(root)
    study, _ = add_study("rail", name="Rail")
    site, _ = add_site("public", study_slug="rail", name="Public test data")
    manager, _ = member("dm", role="data_manager", site_slug="public")
    upload = submit_path(root, site=site, study=study, user=manager)
    run_pending("upload.validate")
    upload.refresh_from_db()
    assert upload.state == "accepted", upload.errors
    recording = upload.version.recordings.get()
    assert recording.path == relpath
    assert recording.duration_s >= 60 and recording.n_channels >= 16
    assert recording.power_line_hz == EEGLAB_LONG_MAINS_HZ

    run_all_pending(("qc.version", "qc.recording"))
    run = QCRun.objects.get(recording_sha256=recording.sha256)
    pure = run_qc(read_long_recording(), settings=QCSettings(),
                  power_line_hz=EEGLAB_LONG_MAINS_HZ, random_state=0)
    assert run.verdict == pure.verdict == "pass", run.result["verdict_reasons"]
    assert run.result["bad_channels"] == pure.bad_channels == []
    stored = [(s["onset_s"], s["duration_s"], s["reasons"]) for s in run.result["segments"]]
    assert stored == [(round(s.onset_s, 3), round(s.duration_s, 3), s.reasons)
                      for s in pure.segments]
    assert any("sudden jump on many channels" in reason for s in stored for reason in s[2])

    # Features with the protocol's defaults (4 s windows, half overlapping).
    feature_set, created = request_feature_set(
        [upload.version])
    run_all_pending(("features.set", "features.recording", "features.combine"))
    feature_set.refresh_from_db()
    assert created and feature_set.state == "done", feature_set.error
    part = RecordingFeatures.objects.get(items__feature_set=feature_set)
    counts = part.window_counts
    assert part.n_windows == counts["kept"] > 0 and feature_set.n_rows == part.n_windows
    # The rejected breaks leave windows out; the rest are kept.
    assert counts["bad_segment"] > 0
    assert counts["kept"] + counts["bad_segment"] == counts["candidates"]
    with blobs.open_blob(feature_set.table_sha256) as fh:
        table = pd.read_parquet(fh)
    assert len(table) == part.n_windows
    assert set(table["rating"]) == {5} and set(table["level"]) == {"moderate"}
