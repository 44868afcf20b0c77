"""The release outside the portal: the README states the spec's real defaults, the packaged
science pins what requirements.txt pins, and the release archive loads as downloaded (sha256
and trusted types checked, refusals that say what to do)."""

import io
import json
import re
import tomllib
import zipfile
from pathlib import Path

import numpy as np
import pytest
from packaging.utils import canonicalize_name
from sklearn.linear_model import LogisticRegression
from sklearn.pipeline import Pipeline
from sklearn.preprocessing import StandardScaler

from cairn_science.learning.canonical import skops_bytes, trusted_types
from cairn_science.learning.spec import TrainingSpec
from cairn_science.release import (
    ARCHIVE_MEMBERS,
    SCIENCE_DEPENDENCIES,
    bundle,
    feature_specification,
    load,
    participant_normalise,
    predict,
    predict_proba,
    release_requirements,
)

REPO = Path(__file__).resolve().parents[2]


def _json_block_after(heading):
    text = (REPO / "README.md").read_text(encoding="utf-8")
    found = re.search(r"```json\n(.*?)```", text[text.index(heading):], re.S)
    return json.loads(found.group(1))


def test_the_readme_spec_states_the_code_defaults():
    """Common practice, no source: documentation that states a default states the code's.
    The README's first spec block writes every default out; each stated value must equal
    what ``TrainingSpec.from_dict`` gives when the field is left out (a spec with only the
    required feature_set and models), and stating them must change nothing."""
    stated = _json_block_after("A spec with every default written out")
    required = {"feature_set": stated["feature_set"], "models": stated["models"]}
    defaults = TrainingSpec.from_dict(required).as_dict()
    assert TrainingSpec.from_dict(stated).as_dict() == defaults
    checked = 0
    for section, value in stated.items():
        if section in required:
            continue
        if isinstance(value, dict):
            for key, item in value.items():
                assert defaults[section][key] == item, f"README states {section}.{key}={item!r}"
                checked += 1
        else:
            assert defaults[section] == value, f"README states {section}={value!r}"
            checked += 1
    assert set(defaults) - set(required) <= set(stated), "a section with defaults is missing"
    assert checked >= 20
    # the three the issue found wrong
    assert stated["normalisation"]["participant"] == "none"
    assert stated["statistics"]["permutations"] == 0
    assert stated["statistics"]["paired_test"] is False
    # the example of other choices is a valid spec
    example = TrainingSpec.from_dict(_json_block_after("A comparison spec, with choices"))
    assert example.statistics["permutations"] == 200 and example.release["per_site"]


def _pins(path):
    pins = {}
    for line in (REPO / path).read_text().splitlines():
        line = line.split("#", 1)[0].strip()
        if "==" in line:
            name, version = line.split("==")
            pins[canonicalize_name(name.split("[")[0])] = version.strip()
    return pins


def test_the_science_package_pins_what_the_portal_pins():
    """Common practice, no source: a released model's features must be computed by the same
    library versions as in the portal, so pyproject.toml's dependencies are pinned exactly as
    in requirements.txt, are the ones the release module names, and the requirements a
    release archive lists (those packages and what they pull in, as installed) are pinned in
    requirements.txt at the same versions."""
    project = tomllib.loads((REPO / "pyproject.toml").read_text())["project"]
    portal = _pins("requirements.txt")
    names = set()
    for dependency in project["dependencies"]:
        name, version = dependency.split("==")
        names.add(canonicalize_name(name))
        assert portal[canonicalize_name(name)] == version, dependency
    assert names == {canonicalize_name(n) for n in SCIENCE_DEPENDENCIES}
    for dependency in project["optional-dependencies"]["recurrent"]:
        name, version = dependency.split("==")
        assert portal[canonicalize_name(name)] == version, dependency
    listed = release_requirements()
    assert {canonicalize_name(r.split("==")[0]) for r in listed} >= names
    for requirement in listed:
        name, version = requirement.split("==")
        assert portal.get(canonicalize_name(name)) == version, \
            f"{requirement} is not pinned so in requirements.txt"


@pytest.fixture
def archive(tmp_path):
    """A small release (standardisation + logistic regression on 3 columns) as an archive."""
    rng = np.random.default_rng(0)
    x = rng.normal(size=(60, 3))
    y = np.where(x[:, 0] + 0.3 * rng.normal(size=60) > 0, "high", "low")
    estimator = Pipeline([("scale", StandardScaler()),
                          ("model", LogisticRegression())]).fit(x, y)
    payload = skops_bytes(estimator)
    import hashlib

    def spec(normalisation):
        return feature_specification(
            feature_set_params={"preprocessing": {}, "features": {}},
            columns=["a", "b", "c"], labels=["low", "high"], label={"kind": "level"},
            normalisation=normalisation, site_stats={"s1": {"mean": [0, 0, 0],
                                                            "sd": [1, 1, 1]}},
            model_sha256=hashlib.sha256(payload).hexdigest(), trusted=trusted_types(payload),
            caution="research use only")

    def make(name, normalisation=None):
        files = {"model.skops": payload, "model-card.md": b"# card\n",
                 "features.json": json.dumps(spec(normalisation or {
                     "participant": "none", "site_standardise": False})).encode()}
        path = tmp_path / name
        path.write_bytes(bundle(files, requirements=["numpy==2.4.6"]))
        return path

    return {"make": make, "x": x, "estimator": estimator, "payload": payload}


def test_the_archive_loads_as_downloaded_and_refuses_a_changed_model(archive, tmp_path):
    """skops 0.16 (`get_untrusted_types`, `loads` with an explicit trusted list) and the
    zip format of Python's zipfile: the archive holds the three files and requirements.txt,
    is byte-identical when built twice, loads as downloaded or unpacked (also with the names
    of files downloaded one by one), and a model whose bytes differ from the sha256 in
    features.json is refused by name."""
    path = archive["make"]("release-7.zip")
    assert path.read_bytes() == archive["make"]("again.zip").read_bytes()
    with zipfile.ZipFile(path) as z:
        assert tuple(sorted(z.namelist())) == ARCHIVE_MEMBERS
        assert "numpy==2.4.6" in z.read("requirements.txt").decode()
    estimator, spec = load(path)
    assert spec["columns"] == ["a", "b", "c"]
    assert estimator.predict(archive["x"]).tolist() == archive["estimator"].predict(
        archive["x"]).tolist()

    unpacked = tmp_path / "unpacked"
    zipfile.ZipFile(path).extractall(unpacked)
    assert load(unpacked)[1] == spec
    one_by_one = tmp_path / "downloads"
    one_by_one.mkdir()
    for name in ("model.skops", "features.json"):
        (one_by_one / f"release-7-{name}").write_bytes((unpacked / name).read_bytes())
    assert load(one_by_one)[1] == spec

    changed = io.BytesIO()
    with zipfile.ZipFile(path) as source, zipfile.ZipFile(changed, "w") as target:
        for name in source.namelist():
            data = source.read(name)
            target.writestr(name, data[:-1] + bytes([data[-1] ^ 1]) if name == "model.skops"
                            else data)
    bad = tmp_path / "changed.zip"
    bad.write_bytes(changed.getvalue())
    with pytest.raises(ValueError, match="model.skops's sha256 does not match features.json"):
        load(bad)
    with pytest.raises(ValueError, match="not a release archive"):
        load(tmp_path / "release-7-model-card.md")


def test_predicting_asks_for_what_the_normalisation_needs(archive):
    """Common practice, no source: a model trained on participant-normalised features gives
    meaningless answers on raw ones, so predict refuses before computing anything and names
    the argument to pass; a release without normalisation refuses a baseline it would
    ignore."""
    mean = archive["make"]("mean.zip", {"participant": "mean", "site_standardise": False})
    with pytest.raises(ValueError, match="own mean over their windows.*baseline_windows="):
        predict(mean, "nowhere.edf")
    baseline = archive["make"]("baseline.zip", {"participant": "baseline",
                                                "site_standardise": False})
    with pytest.raises(ValueError, match="resting baseline.*baseline_file="):
        predict_proba(baseline, "nowhere.edf")
    with pytest.raises(ValueError, match="windows × 3 columns"):
        predict(baseline, "nowhere.edf", baseline_windows=np.zeros((4, 2)))
    plain = archive["make"]("plain.zip")
    with pytest.raises(ValueError, match="does not normalise by participant"):
        predict(plain, "nowhere.edf", baseline_windows=np.zeros((4, 3)))
    site = archive["make"]("site.zip", {"participant": "none", "site_standardise": True})
    with pytest.raises(ValueError, match="pass site= one of s1"):
        predict(site, "nowhere.edf")


def test_participant_normalisation_is_a_z_score_on_the_reference():
    """Common practice, no source (a z-score): minus the reference windows' mean, divided by
    their population SD; a column without spread is only centred."""
    reference = np.array([[1.0, 5.0], [3.0, 5.0]])
    values = np.array([[2.0, 6.0], [5.0, 4.0]])
    expected = np.array([[0.0, 1.0], [3.0, -1.0]])
    assert np.allclose(participant_normalise(values, reference), expected)


def test_a_release_pinning_a_cpu_build_of_pytorch_names_its_index():
    """A release with a recurrent member pins PyTorch's CPU build (e.g. 2.13.0+cpu), which
    PyPI does not carry: its requirements.txt names PyTorch's CPU index as an extra index (a
    line pip's requirements-file format takes), and one without it names no index."""
    files = {"model.skops": b"m", "model-card.md": b"c", "features.json": b"{}"}
    with_torch = zipfile.ZipFile(io.BytesIO(bundle(
        files, requirements=["numpy==2.4.6", "torch==2.13.0+cpu"]))).read("requirements.txt")
    lines = with_torch.decode().splitlines()
    assert "--extra-index-url https://download.pytorch.org/whl/cpu" in lines
    assert lines.index("--extra-index-url https://download.pytorch.org/whl/cpu") < \
        lines.index("torch==2.13.0+cpu")
    plain = zipfile.ZipFile(io.BytesIO(bundle(files, requirements=["numpy==2.4.6"]))).read(
        "requirements.txt").decode()
    assert "--extra-index-url" not in plain
