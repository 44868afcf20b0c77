"""Releases saved before the science package was renamed (``workers`` → ``cairn_science``)
name their own types under the old name; they must still load, as the portal stored them."""

import io
import json
import sys
import zipfile

import numpy as np
from sklearn.linear_model import LogisticRegression

from cairn_science.learning.canonical import load_release, skops_bytes, trusted_types
from cairn_science.learning.ensembles import GroupBaggingClassifier


def _as_saved_before_the_rename(data: bytes) -> bytes:
    """The same skops file with its module names as the old package wrote them (skops keeps
    them in schema.json, one ``__module__`` per object)."""
    out = io.BytesIO()
    with zipfile.ZipFile(io.BytesIO(data)) as old, zipfile.ZipFile(out, "w") as new:
        for info in old.infolist():
            body = old.read(info.filename)
            if info.filename == "schema.json":
                body = body.replace(b'"cairn_science.', b'"workers.')
            new.writestr(info, body)
    return out.getvalue()


def test_a_release_naming_the_former_package_loads_and_predicts_the_same():
    rng = np.random.default_rng(0)
    X = rng.normal(size=(60, 4))
    y = np.repeat([0, 1], 30)
    X[y == 1] += 1.0
    groups = np.repeat(np.arange(6), 10)
    model = GroupBaggingClassifier(LogisticRegression(), n_estimators=3, random_state=0)
    model.fit(X, y, groups=groups)
    old = _as_saved_before_the_rename(skops_bytes(model))
    trusted = trusted_types(old)
    assert any(name.startswith("workers.learning.ensembles.") for name in trusted), trusted
    assert "workers" not in sys.modules or sys.modules["workers"].__name__ == "cairn_science"
    loaded = load_release(old, trusted)
    assert type(loaded) is GroupBaggingClassifier
    np.testing.assert_array_equal(loaded.predict_proba(X), model.predict_proba(X))
    json.dumps(trusted)  # the list stays plain strings, as features.json stores it
