"""The signal viewer of a recording's quality page: who may see it, what it reads, how it
thins the traces for display, and what it marks on them."""

import numpy as np
import pytest
from django.urls import reverse

from portal.quality import viewer
from tests.portal import objects

pytestmark = pytest.mark.django_db


@pytest.fixture
def filled(consortium):
    from portal.accounts.models import Study

    sites = consortium["sites"]
    study_a, study_b = Study.objects.get(slug="study-a"), Study.objects.get(slug="study-b")
    return {"own": objects.fill(sites["a1"], study_a, label="viewer-a1"),
            "other-site": objects.fill(sites["a2"], study_a, label="viewer-a2"),
            "other-study": objects.fill(sites["b1"], study_b, label="viewer-b1"),
            "people": consortium["people"]}


def _url(data, query="", name="quality:signal"):
    url = reverse(name, args=[data["round_id"], data["recording_id"]])
    return f"{url}?{query}" if query else url


def test_the_image_follows_the_quality_page_access(client, filled):
    """Plumbing: a site analyst gets a PNG of their site's recording, and 404 for another
    site's or another study's, as on the recording's quality page."""
    client.force_login(filled["people"]["analyst_a1"])
    response = client.get(_url(filled["own"], "start=10&span=10&gain=200"))
    assert response.status_code == 200
    assert response["Content-Type"] == "image/png"
    assert response.content.startswith(b"\x89PNG\r\n\x1a\n")
    filtered = client.get(_url(filled["own"], "start=55&span=10&filter=bp1-40"))  # padded read
    assert filtered.status_code == 200 and filtered.content != response.content
    for scope in ("other-site", "other-study"):
        assert client.get(_url(filled[scope])).status_code == 404, scope
        assert client.get(_url(filled[scope], name="quality:recording")).status_code == 404
    page = client.get(_url(filled["own"], "start=20&span=5&gain=100",
                           name="quality:recording")).content.decode()
    assert "signal.png?start=20&amp;span=5&amp;gain=100&amp;filter=none" in page
    assert "start=15&amp;span=5" in page and "start=25&amp;span=5" in page  # previous, next


@pytest.mark.parametrize("query,words", [
    ("span=120", "span: 120 s is out of range; give 1 to 60 seconds."),
    ("span=0.5", "span: 0.5 s is out of range; give 1 to 60 seconds."),
    ("start=61", "start: 61 s is outside the recording; give 0 to 60 seconds"),
    ("start=-3", "start: -3 s is outside the recording"),
    ("start=soon", "start: 'soon' is not a number"),
    ("gain=0", "gain: 0 µV per division is out of range; give 1 to 10000."),
    ("span=nan", "span: give a finite number."),
    ("filter=notch", "filter: 'notch' is not offered; give one of none, hp1, bp1-40."),
])
def test_parameters_out_of_range_are_refused_with_words(client, filled, query, words):
    """The image answers 400 with the message; the page keeps its defaults and shows it."""
    client.force_login(filled["people"]["analyst_a1"])
    response = client.get(_url(filled["own"], query))
    assert response.status_code == 400
    assert words in response.content.decode()
    page = client.get(_url(filled["own"], query, name="quality:recording"))
    assert page.status_code == 200
    assert words.replace("'", "&#x27;") in page.content.decode()


def test_bad_channels_and_rejected_segments_reach_the_drawing(client, filled, monkeypatch):
    """Plumbing of the view: a person's decision (Cz bad) and the result's rejected segments
    are in what is handed to the drawing, and a new decision draws a new image."""
    from portal.datasets.models import Recording
    from portal.quality.models import QCRun
    from portal.quality.services import set_override

    data = filled["own"]
    run = QCRun.objects.get(pk=data["run_id"])
    run.result["segments"] = [{"onset_s": 4.0, "duration_s": 3.0, "reasons": ["jump"]},
                              {"onset_s": 30.0, "duration_s": 2.0, "reasons": ["flat"]}]
    run.save()
    drawn = []
    monkeypatch.setattr(viewer, "draw", lambda display: drawn.append(display) or b"png")
    client.force_login(filled["people"]["analyst_a1"])
    assert client.get(_url(data, "start=0&span=10")).content == b"png"
    assert drawn[-1].bad_channels == []
    assert drawn[-1].segments == [{"onset_s": 4.0, "end_s": 7.0, "reasons": ["jump"]}]
    recording = Recording.objects.get(pk=data["recording_id"])
    set_override(site=recording.version.site, recording=recording, channel="Cz", status="bad",
                 reason="looks flat", user=filled["people"]["analyst_a1"])
    client.get(_url(data, "start=0&span=10"))
    assert len(drawn) == 2 and drawn[-1].bad_channels == ["Cz"]
    assert drawn[-1].traces[0]["by"] == "person"
    client.get(_url(data, "start=0&span=10"))
    assert len(drawn) == 2  # the same page again comes from the cache


def test_build_display_marks_bad_channels_and_clips_segments():
    """Plumbing on invented samples: what is drawn names the bad channels with who set them
    and keeps the rejected time within the page, cut at its edges."""
    data = np.zeros((3, 100 * 30))
    params = viewer.ViewParams(start_s=10.0, span_s=10.0, gain_uv=50.0, filter="none")
    display = viewer.build_display(
        data, ["Fz", "Cz", "Pz"], 100.0, params,
        channels={"Fz": {"status": "good", "by": "checks"}, "Cz": {"status": "bad",
                                                                  "by": "site"}},
        segments=[{"onset_s": 2.0, "duration_s": 3.0, "reasons": ["a"]},
                  {"onset_s": 8.0, "duration_s": 4.0, "reasons": ["b"]},
                  {"onset_s": 19.5, "duration_s": 5.0, "reasons": ["c"]}])
    assert display.bad_channels == ["Cz"]
    assert [t["by"] for t in display.traces] == ["checks", "site", ""]
    assert display.segments == [{"onset_s": 10.0, "end_s": 12.0, "reasons": ["b"]},
                                {"onset_s": 19.5, "end_s": 20.0, "reasons": ["c"]}]
    assert display.times_s[0] == 10.0 and len(display.times_s) == 1000


def test_the_thinned_trace_is_scipys_decimate_of_what_mne_reads(pyedflib_bids):
    """Source: scipy (reference library) — ``scipy.signal.decimate`` (order-8 Chebyshev I
    anti-alias filter, zero phase) of the samples mne reads straight from the file
    (``mne.io.read_raw_edf``). The file: pyedflib's shipped test_generator.edf (11 signals,
    200 Hz, 600 s), written to BIDS by mne-bids and read back as the quality job reads it."""
    import mne
    from scipy.signal import decimate

    from cairn_science.bids.recording import read_recording

    root, relpath = pyedflib_bids
    raw = read_recording(root, relpath)
    reference = mne.io.read_raw_edf(root / relpath, preload=True, verbose="ERROR")
    params = viewer.parse_params({"start": "100", "span": "60", "gain": "100"}, 600.0)
    display = viewer.build_display(raw.get_data(), raw.ch_names, raw.info["sfreq"], params)
    assert display.step == 6 and display.display_sfreq_hz == pytest.approx(200.0 / 6)
    expected = decimate(reference.get_data()[:, 20000:32000] * 1e6, 6, axis=1)
    got = np.array([t["values_uv"] for t in display.traces])
    assert got.shape == expected.shape == (11, 2000)
    np.testing.assert_allclose(got, expected, rtol=1e-9, atol=1e-9)
    assert display.times_s[1] - display.times_s[0] == pytest.approx(0.03)
    # reading only the page's samples (as the view does) draws the same traces
    _, _, lo, hi = viewer.page_samples(params, 200.0, raw.n_times)
    part = viewer.build_display(raw.get_data(start=lo, stop=hi), raw.ch_names, 200.0, params,
                                offset=lo, n_times=raw.n_times)
    np.testing.assert_array_equal(np.array([t["values_uv"] for t in part.traces]), got)
    with pytest.raises(ValueError, match="samples 20000-32000 are needed"):
        viewer.build_display(raw.get_data(start=lo + 1, stop=hi), raw.ch_names, 200.0, params,
                             offset=lo + 1, n_times=raw.n_times)
    # a 10 s page at 200 Hz is 2000 samples: shown as recorded, nothing thinned
    short = viewer.build_display(raw.get_data(), raw.ch_names, 200.0,
                                 viewer.parse_params({"start": "5"}, 600.0))
    assert short.step == 1
    np.testing.assert_allclose(short.traces[5]["values_uv"],
                               reference.get_data()[5, 1000:3000] * 1e6, rtol=1e-12)


def test_the_display_high_pass_takes_away_a_constant_offset_and_says_so():
    """A 1 Hz display high-pass removes a constant offset added to a 15 Hz sine (common
    practice, no source) and keeps the sine's amplitude; the drawing's words name it."""
    data = np.vstack([np.sin(2 * np.pi * 15 * np.arange(0, 60, 1 / 200)) * 50e-6 + 300e-6])
    params = viewer.parse_params({"start": "20", "span": "10", "filter": "hp1"}, 60.0)
    display = viewer.build_display(data, ["X"], 200.0, params)
    values = display.traces[0]["values_uv"]
    assert abs(values.mean()) < 1.0 and np.ptp(values) == pytest.approx(100.0, rel=0.02)
    assert display.filter_words == "display high-pass 1 Hz"
    png = viewer.draw(display)
    assert png.startswith(b"\x89PNG")
