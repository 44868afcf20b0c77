"""The OpenAPI description (/api/v1/openapi.json) against the code and the live endpoints.

* The document validates against the OpenAPI 3.1 meta-schema (the JSON Schema published by
  the OpenAPI Initiative, as shipped inside schemathesis: schemathesis.specs.openapi.
  definitions.OPENAPI_31).
* Every URL pattern under /api/ (walked from the URL resolver) is described with the method it
  takes, and every described path resolves to the view declared for it.
* schemathesis (property-based: requests generated from the description by hypothesis) calls
  every operation in-process through Django's WSGI application, with a token of a person who
  sees one small study, and checks each answer: no server error, status declared, content type
  declared, JSON body matching the declared schema. Writes are sent with a read-only token
  (every one must be refused with a declared 403). Each read operation is also called on the
  study's real objects, so the 200 bodies are checked, not only the refusals.
* A description changed to promise a member the code does not send makes the same check fail.
"""

import copy

import pytest
import schemathesis
from django.core.wsgi import get_wsgi_application
from django.urls import URLPattern, URLResolver, get_resolver
from hypothesis import HealthCheck, Phase, given
from hypothesis import settings as hypothesis_settings
from schemathesis import GenerationMode
from schemathesis.checks import not_a_server_error
from schemathesis.specs.openapi.checks import (
    content_type_conformance,
    response_schema_conformance,
    status_code_conformance,
)

from portal import api_urls
from portal.accounts.models import ApiToken
from portal.api_spec import openapi_path
from portal.datasets import blobs
from portal.training.models import ModelRelease
from tests.portal import objects

pytestmark = pytest.mark.django_db

CHECKS = [not_a_server_error, status_code_conformance, content_type_conformance,
          response_schema_conformance]
#: Generated requests per operation (27 operations): enough to reach the refusals and the
#: parameter checks, small enough for seconds.
EXAMPLES = 8


@pytest.fixture
def quick_passwords(settings):
    """Nobody here logs in with a password: the fast hasher saves ~0.5 s per person made."""
    settings.PASSWORD_HASHERS = ["django.contrib.auth.hashers.MD5PasswordHasher"]


@pytest.fixture
def study(quick_passwords, consortium, settings):
    """Study A's site a1 with one of every object, and site b1 of study B (not seen)."""
    settings.ALLOWED_HOSTS = [*settings.ALLOWED_HOSTS, "localhost", "testserver"]
    a1, b1 = consortium["sites"]["a1"], consortium["sites"]["b1"]
    data = objects.fill(a1, a1.studies.get(), label="data-a1")
    # the release's feature spec is a JSON file, as the workers write it (objects.fill stores
    # one invented text for every release file)
    spec_sha, _ = blobs.put_bytes(b'{"invented": "feature spec"}')
    ModelRelease.objects.filter(pk=data["release_id"]).update(spec_sha256=spec_sha)
    objects.fill(b1, b1.studies.get(), label="data-b1")
    user = consortium["people"]["dm_a1"]
    _, raw = ApiToken.issue(user, "schema check")
    _, read_only = ApiToken.issue(user, "schema check, read only", read_only=True)
    return {"data": data, "auth": {"Authorization": f"Bearer {raw}"},
            "read_only": {"Authorization": f"Bearer {read_only}"}}


@pytest.fixture
def wsgi_app():
    """Django's WSGI application, in this test's database transaction: as Django's test
    client does, requests do not close the connection when they end (on PostgreSQL that
    would end the transaction the test's objects live in)."""
    from django.core import signals
    from django.db import close_old_connections

    signals.request_started.disconnect(close_old_connections)
    signals.request_finished.disconnect(close_old_connections)
    try:
        yield get_wsgi_application()
    finally:
        signals.request_started.connect(close_old_connections)
        signals.request_finished.connect(close_old_connections)


@pytest.fixture
def live_schema(study, wsgi_app):
    return schemathesis.openapi.from_wsgi("/api/v1/openapi.json", wsgi_app)


def operations(schema):
    return [result.ok() for result in schema.get_all_operations()]


def _walk(resolver, prefix=""):
    for entry in resolver.url_patterns:
        if isinstance(entry, URLResolver):
            yield from _walk(entry, prefix + str(entry.pattern))
        elif isinstance(entry, URLPattern):
            yield prefix + str(entry.pattern), entry


def test_the_description_is_valid_openapi_3_1(client):
    from schemathesis.specs.openapi.definitions import OPENAPI_31_VALIDATOR

    response = client.get("/api/v1/openapi.json")  # no token: the description is public
    assert response.status_code == 200 and response["Content-Type"] == "application/json"
    document = response.json()
    assert document["openapi"].startswith("3.1")
    errors = [str(e) for e in OPENAPI_31_VALIDATOR.iter_errors(document)]
    assert not errors, errors[:5]
    broken = copy.deepcopy(document)
    broken["paths"]["/api/v1/versions/"]["get"]["responses"] = "none"
    assert list(OPENAPI_31_VALIDATOR.iter_errors(broken)), "the validator must be able to fail"


def test_every_api_url_pattern_is_described_and_every_description_served(client):
    """Walks the URL resolver: a new URL under /api/ without an Endpoint (and so without a
    description) fails here."""
    from django.urls import resolve

    from portal.api_spec import PREFIX

    document = client.get("/api/v1/openapi.json").json()
    described = {(path, method) for path, ops in document["paths"].items() for method in ops}
    served = set()
    for route, pattern in _walk(get_resolver()):
        if not route.startswith("api/"):
            continue
        assert route.startswith(PREFIX[1:]), route
        declared = [e for e in api_urls.ENDPOINTS
                    if e.route == route[len(PREFIX) - 1:] and e.view is pattern.callback]
        assert declared, f"/{route} is served but not declared in portal/api_urls.ENDPOINTS"
        served |= {(openapi_path(e.route), e.method) for e in declared}
    assert described == served and len(served) == len(api_urls.ENDPOINTS)
    for path in document["paths"]:
        filled = path.replace("{part}", "model")
        for name in REAL:
            filled = filled.replace("{" + name + "}", "1")
        assert resolve(filled).namespace == "api", path


def _call_and_check(case, headers):
    response = case.call(headers=headers)
    case.validate_response(response, checks=CHECKS)
    return response


def _fuzz(operation, headers, mode=GenerationMode.POSITIVE):
    """The statuses of EXAMPLES requests generated for ``operation``, each checked."""
    statuses = []

    @hypothesis_settings(max_examples=EXAMPLES, deadline=None, database=None,
                         derandomize=True, phases=[Phase.explicit, Phase.generate],
                         suppress_health_check=list(HealthCheck))
    @given(case=operation.as_strategy(generation_mode=mode))
    def run(case):
        statuses.append(_call_and_check(case, headers).status_code)

    run()
    return statuses


def test_generated_requests_get_answers_the_description_declares(study, live_schema):
    checked = {}
    for operation in operations(live_schema):
        write = operation.method.lower() != "get"
        statuses = _fuzz(operation, study["read_only"] if write else study["auth"])
        if write:
            assert set(statuses) == {403}, (operation.label, statuses)
        checked[operation.label] = len(statuses)
        if not write and operation.query:
            # parameters outside what the description allows: each answer checked as above
            # (never a crash, status and body as declared). Not every one is refused: an
            # empty value counts as no filter, and the token sent replaces a spoiled header.
            wrong = _fuzz(operation, study["auth"], GenerationMode.NEGATIVE)
            if not operation.path_parameters:  # else most ids name nothing: 404 first
                assert 400 in wrong, (operation.label, wrong)
            checked[operation.label] += len(wrong)
    # schemathesis leaves out the description's own address (it read the schema from it)
    assert set(checked) == {f"{e.method.upper()} {openapi_path(e.route)}"
                            for e in api_urls.ENDPOINTS if e.name != "openapi"}
    print(f"\nschemathesis: {sum(checked.values())} generated requests over {len(checked)} "
          f"operations")


#: Path parameters naming study A's objects (objects.fill's keys).
REAL = {"version_id": "version_id", "round_id": "round_id", "run_id": "run_id",
        "set_id": "set_id", "training_id": "training_id", "release_id": "release_id",
        "job_id": "job_id", "upload_id": "upload_id"}


def _real_case(operation, data):
    params = {}
    for parameter in operation.path_parameters:
        name = parameter.name
        params[name] = "model" if name == "part" else data[REAL[name]]
    return operation.Case(path_parameters=params) if params else operation.Case()


def test_real_objects_answer_200_with_bodies_that_match(study, live_schema):
    seen = 0
    for operation in operations(live_schema):
        if operation.method.lower() != "get":
            continue
        response = _call_and_check(_real_case(operation, study["data"]), study["auth"])
        assert response.status_code == 200, (operation.label, response.text[:300])
        seen += 1
    assert seen == sum(1 for e in api_urls.ENDPOINTS if e.method == "get") - 1  # as above


def test_a_description_that_promises_more_than_the_code_fails(client, study, wsgi_app):
    """The check can fail: the description of a version's detail claims a member
    (``checksum_of_everything``) the code does not send."""
    from schemathesis.core.failures import FailureGroup

    document = client.get("/api/v1/openapi.json").json()
    detail = document["paths"]["/api/v1/versions/{version_id}/"]["get"]
    body = detail["responses"]["200"]["content"]["application/json"]["schema"]
    body["properties"]["checksum_of_everything"] = {"type": "string"}
    body["required"].append("checksum_of_everything")
    schema = schemathesis.openapi.from_dict(document)
    schema.app = wsgi_app
    operation = schema["/api/v1/versions/{version_id}/"]["GET"]
    with pytest.raises(FailureGroup):
        _call_and_check(_real_case(operation, study["data"]), study["auth"])
