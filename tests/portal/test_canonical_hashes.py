"""Hashes the portal stores do not change now that every copy calls
cairn_science.canonical_json: each value below was computed by the former copies (their own
json.dumps calls) on this value before they were replaced, and is pinned here."""

import datetime

from portal.audit import chain
from portal.audit.events import canonical_sha256
from portal.features.services import canonical_digest
from portal.quality.services import settings_digest
from portal.studies.models import protocol_digest

VALUE = {"z": [1, 2.5, -0.0, None, True, False], "name": "Ångström µV",
         "a": {"y": 1e-7, "x": "Fz"}}


def test_digests_of_stored_forms_unchanged():
    utf8 = "4f36dca6358359acc94ad216be8a79372e1aa3258bdcd1dcb79661ece72c4a37"
    assert protocol_digest(VALUE) == utf8
    assert canonical_digest(VALUE) == utf8
    # Quality settings were hashed with non-ASCII escaped:
    assert settings_digest(VALUE) == (
        "3d70c136a2518033938cea26db01ee89085bd2fae86c51975f7d3a2be8d0ea83")
    # Event content hashes turn -0.0 into 0.0 first (as PostgreSQL stores it):
    assert canonical_sha256(VALUE) == (
        "a5e69fcf5998183038ca4b2b5f12abf1a6b38ab2c1c84ca16b904238f02c8869")


def test_chain_link_hash_unchanged():
    values = dict.fromkeys(chain.FIELDS, "")
    values.update(id=7, at=datetime.datetime(2026, 1, 2, 3, 4, 5, 123456, tzinfo=datetime.UTC),
                  verb="dataset.upload", actor_kind="user", params=VALUE, study_id=3,
                  site_id=None, actor_snapshot={"username": "zoë"}, inputs=[{"sha256": "ab"}],
                  outputs=[], code_version={"commit": "x"})
    assert chain.link_hash(chain.GENESIS, values) == (
        "d8f24f36d78901400194c95729e0e10e3e55184734007422a387a8de902ceb82")
