"""The upload report shows what this upload brought: warnings about files it left as they
were fold into one line with a count, repeated warnings are grouped. Invented plumbing data
(the small demo consortium, warnings written here)."""

import io
import shutil

import pytest
from django.urls import reverse

from portal.datasets.management.commands.upload_bids import Command as UploadBids
from portal.datasets.models import UploadMode
from portal.datasets.services import mark_untouched, warning_report
from tests.helpers import member
from tests.portal.test_versions import ingest

pytestmark = pytest.mark.django_db


def warning(path, code, message, field="name", line=None):
    return {"path": path, "line": line, "field": field, "message": message, "code": code}


def test_repeated_warnings_are_grouped_and_untouched_ones_counted():
    warnings = [warning(f"sub-0{i}/eeg/channels.tsv", "channels.name_spaces",
                        f"channel 'Fp {i}' has spaces", line=i + 1) for i in range(1, 8)]
    warnings += [warning("README", "readme.short", "README is short", field=None)]
    warnings += [warning("sub-09/eeg/channels.tsv", "channels.name_spaces", "old one")]
    marked = mark_untouched(warnings, {"sub-09/eeg/channels.tsv"})
    groups, untouched = warning_report(marked)
    assert untouched == 1
    assert [(g["code"], g["count"]) for g in groups] == [("channels.name_spaces", 7),
                                                        ("readme.short", 1)]
    spaces = groups[0]
    assert spaces["paths"] == [f"sub-0{i}/eeg/channels.tsv" for i in range(1, 6)]
    assert spaces["more_paths"] == 2 and len(spaces["items"]) == 7
    assert spaces["message"] == "channel 'Fp 1' has spaces"
    # the same code with another field is another group
    groups, _ = warning_report(warnings + [warning("a.tsv", "channels.name_spaces", "x",
                                                   field="type")])
    assert len(groups) == 3


def test_messages_without_a_code_group_by_their_text():
    groups, untouched = warning_report([warning("a", "", "same"), warning("b", "", "same"),
                                        warning("c", "", "other")])
    assert [g["count"] for g in groups] == [2, 1] and untouched == 0


@pytest.fixture
def lab(demo_small, tmp_path):
    from portal.accounts.setup import add_site, add_study

    info = demo_small.sites[0]
    root = tmp_path / info.slug
    shutil.copytree(info.bids_root, root)
    study, _ = add_study("rail", name="Rail")
    site, _ = add_site(info.slug, study_slug="rail", name=info.name)
    manager, _ = member("dm", role="data_manager", site_slug=info.slug)
    return {"root": root, "site": site, "study": study, "user": manager, "info": info}


def with_spaced_channel(root, subject):
    """Give one channel of each of ``subject``'s channels.tsv a name with a space (a
    warning, not an error, in the validator)."""
    tables = sorted((root / f"sub-{subject}").rglob("*_channels.tsv"))
    assert tables
    for table in tables:
        lines = table.read_text().splitlines()
        name = lines[1].split("\t")[0]
        lines[1] = lines[1].replace(name, f"{name} ", 1)
        table.write_text("\n".join(lines) + "\n")
    return tables


def test_addition_report_folds_warnings_about_files_it_did_not_send(client, lab, tmp_path):
    with_spaced_channel(lab["root"], "01")
    first = ingest(lab, lab["root"])
    assert first.state == "accepted", first.errors
    before = [w for w in first.warnings if w["path"].startswith("sub-01/")]
    assert before, "the spaced channel names give warnings"
    addition = tmp_path / "addition"
    addition.mkdir()
    (addition / "CHANGES").write_text("1.0.1 one more note\n")
    second = ingest(lab, addition, mode=UploadMode.ADDITION)
    assert second.state == "accepted", second.errors
    about_sub01 = [w for w in second.warnings if w["path"].startswith("sub-01/")]
    assert about_sub01 and all(w.get("untouched") for w in about_sub01)
    client.force_login(lab["user"])
    html = client.get(reverse("datasets:upload", args=[second.pk])).content.decode()
    untouched = sum(1 for w in second.warnings if w.get("untouched"))
    assert "data-untouched-warnings" in html
    assert f"{untouched} more warning{'s' if untouched != 1 else ''} about files" in html
    shown = len(second.warnings) - untouched
    assert f"Warnings about this upload ({len(warning_report(second.warnings)[0])} kind" in html
    # the command's text report folds them the same way
    out = io.StringIO()
    UploadBids(stdout=out)._report(second, as_json=False)
    text = out.getvalue()
    assert f"({untouched} more warning(s) about files this upload left" in text
    assert text.count("  warning") == len(warning_report(second.warnings)[0]) <= shown


def test_snapshot_of_the_same_files_has_only_untouched_warnings(lab):
    """Sent again unchanged: every warning about a stored file is about an untouched file."""
    with_spaced_channel(lab["root"], "01")
    first = ingest(lab, lab["root"])
    again = ingest(lab, lab["root"])
    assert again.state == "accepted" and again.version.diff["changed"] == []
    stored = set(first.version.files.values_list("path", flat=True))
    about_files = [w for w in again.warnings if w["path"] in stored]
    assert about_files and all(w.get("untouched") for w in about_files)
    groups, untouched = warning_report(again.warnings)
    assert untouched == len(about_files)
    assert not any(g["path"] in stored for g in groups)
