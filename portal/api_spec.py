"""The API's endpoints declared once, and the OpenAPI 3.1 description built from them.

portal/api_urls.py lists every endpoint as an :class:`Endpoint` (route, view, method, what it
answers); its ``urlpatterns`` and the description served at ``/api/v1/openapi.json`` are both
made from that one list, so a route cannot be served without being described (the suite also
walks the URL resolver to make sure). Schemas of what a view answers live beside the view
(``*_SCHEMA`` in each app's ``api.py``); the suite checks the live answers against them.

The description itself is public: it names routes and shapes, no data and no ids, and a
script or tool can read it before its owner has a token. Everything it describes needs one.
"""

import re
from dataclasses import dataclass, field

from django.http import JsonResponse
from django.urls import path
from django.views.decorators.http import require_GET

from portal.accounts.permissions import access

PREFIX = "/api/v1/"
INT32_MAX = 2**31 - 1

#: Shown with every dataset, feature table and model a script fetches (detail bodies, and a
#: header on downloads).
RESEARCH_USE = ("Research use only. Cairn is not a medical device; its data and models must not "
                "be used for fitness-for-duty or other decisions about a person. Using the data "
                "needs your ethics approval and must follow data-protection law.")


def with_notice(response):
    """A download answer carrying the research-use notice as a header."""
    if response.status_code == 200:
        response["Cairn-Research-Use"] = RESEARCH_USE
    return response


# --- small JSON Schema helpers ---------------------------------------------------------------

STRING = {"type": "string"}
INTEGER = {"type": "integer"}
NUMBER = {"type": "number"}
BOOLEAN = {"type": "boolean"}
DATETIME = {"type": "string", "format": "date-time"}
SHA256 = {"type": "string", "pattern": "^[0-9a-f]{64}$"}
ANY_OBJECT = {"type": "object"}
SLUG_PATTERN = "^[-a-zA-Z0-9_]+$"


def nullable(schema):
    return {"anyOf": [schema, {"type": "null"}]}


def array(items):
    return {"type": "array", "items": items}


def obj(properties, *, optional=(), extra=False):
    """An object with every property in ``properties`` required but those in ``optional``;
    other members refused unless ``extra``."""
    return {"type": "object", "properties": properties,
            "required": [k for k in properties if k not in optional],
            "additionalProperties": extra}


def page_of(item):
    return obj({"results": array(item),
                "next": nullable({"type": "string", "format": "uri-reference"}),
                "limit": {"type": "integer", "minimum": 1}})


ERROR_SCHEMA = obj({"error": STRING, "field": nullable(STRING), "status": INTEGER,
                    "code": STRING}, extra=True)

# --- query parameters ------------------------------------------------------------------------

QUERY = {
    "limit": ({"type": "integer", "minimum": 1, "maximum": 200},
              "How many objects per page (default 50, at most 200)."),
    "cursor": (STRING, "The opaque cursor from the previous page's `next` link."),
    "study": ({"type": "string", "pattern": SLUG_PATTERN}, "Only objects of this study (slug)."),
    "site": ({"type": "string", "pattern": SLUG_PATTERN}, "Only objects of this site (slug)."),
    "created_after": ({"type": "string", "format": "date-time"},
                      "Only objects created at or after this ISO 8601 date or date-time."),
    "created_before": ({"type": "string", "format": "date-time"},
                       "Only objects created before this ISO 8601 date or date-time."),
    "version": ({"type": "integer", "minimum": 0, "maximum": INT32_MAX},
                "Only objects of this dataset version (id)."),
    "feature_set": ({"type": "integer", "minimum": 0, "maximum": INT32_MAX},
                    "Only objects made from this feature set (id)."),
    "offset": ({"type": "integer", "minimum": 0}, "Byte offset of the chunk."),
}


def list_query(*names, state=None):
    """Parameters of a list: limit, cursor, the named filters and ``state`` if given (its
    allowed values)."""
    params = {name: QUERY[name] for name in ("limit", "cursor", *names)}
    if state is not None:
        params["state"] = ({"type": "string", "enum": list(state)}, "Only objects in this state.")
    return params


# --- the registry ----------------------------------------------------------------------------

@dataclass(frozen=True)
class Endpoint:
    """One API operation. ``route`` is a Django route under /api/v1/; ``ok`` is the success
    status, ``schema`` its JSON body's schema or, with ``media`` other than JSON, None (a file);
    ``errors`` the error statuses it may answer (in the one error shape)."""

    name: str
    method: str
    route: str
    view: object
    summary: str
    tag: str
    schema: dict | None = None
    ok: int = 200
    media: str | tuple = "application/json"
    query: dict = field(default_factory=dict)
    body: dict | None = None
    body_media: str = "application/json"
    errors: tuple = (401, 403, 404)
    public: bool = False
    other_ok: tuple = ()  # further success statuses, with the same schema

    @property
    def write(self):
        return self.method not in ("get", "head", "options")

    def pattern(self):
        return path(self.route, self.view, name=self.name)


_CONVERTER = re.compile(r"<(?:(\w+):)?(\w+)>")


def openapi_path(route):
    return PREFIX + _CONVERTER.sub(lambda m: "{" + m.group(2) + "}", route)


def _path_parameters(endpoint):
    params = []
    for converter, name in _CONVERTER.findall(endpoint.route):
        if converter == "int":
            schema = {"type": "integer", "minimum": 0, "maximum": INT32_MAX}
        elif name == "part" and endpoint.name == "release_download":
            schema = {"type": "string", "enum": ["bundle", "model", "card", "spec"]}
        else:
            schema = {"type": "string", "pattern": SLUG_PATTERN}
        params.append({"name": name, "in": "path", "required": True, "schema": schema})
    return params


def _error_response(status):
    return {"description": _ERROR_WORDS.get(status, "refused"),
            "content": {"application/json": {"schema": {"$ref": "#/components/schemas/Error"}}}}


_ERROR_WORDS = {
    400: "a parameter or the body cannot be used (`field` names it)",
    401: "no token, an unknown or revoked one, or an expired one (`code`: token_expired)",
    403: "the token's roles do not allow this, or the token is read-only "
         "(`code`: read_only_token)",
    404: "no such object, or one the token may not see (the same answer)",
    405: "this address does not take that method",
    409: "the object is not in a state that allows this",
    410: "the release was withdrawn: the error says when and why",
    413: "the request is too large",
    422: "the upload was checked and rejected (the body holds the report)",
}


def _operation(endpoint):
    if endpoint.media == "application/json":
        content = {"application/json": {"schema": endpoint.schema or ANY_OBJECT}}
    else:  # a file: bytes, or any JSON document for a JSON file
        medias = endpoint.media if isinstance(endpoint.media, tuple) else (endpoint.media,)
        content = {media: {"schema": {} if media == "application/json" else
                           {"type": "string", "format": "binary"}} for media in medias}
    responses = {str(endpoint.ok): {"description": "success", "content": content}}
    for status in endpoint.other_ok:
        responses[str(status)] = {"description": "success", "content": content}
    # 401 everywhere: an expired token is refused even where no token is needed
    errors = set(endpoint.errors) | {401} | ({400} if endpoint.query or endpoint.body
                                             else set())
    for status in sorted(errors):
        responses[str(status)] = _error_response(status)
    operation = {
        "operationId": endpoint.name, "summary": endpoint.summary, "tags": [endpoint.tag],
        "parameters": _path_parameters(endpoint) + [
            {"name": name, "in": "query", "required": False, "schema": schema,
             "description": words}
            for name, (schema, words) in endpoint.query.items()],
        "responses": responses,
    }
    if endpoint.public:
        operation["security"] = []
    if endpoint.body is not None:
        operation["requestBody"] = {"required": True, "content": {
            endpoint.body_media: {"schema": endpoint.body}}}
    return operation


def build_openapi(endpoints):
    """The OpenAPI 3.1 document describing ``endpoints``."""
    paths = {}
    for endpoint in endpoints:
        paths.setdefault(openapi_path(endpoint.route), {})[endpoint.method] = \
            _operation(endpoint)
    return {
        "openapi": "3.1.0",
        "info": {"title": "Cairn API", "version": "1",
                 "description": "Scripts and lab servers: list and download what the token's "
                                "roles see, upload datasets, start training. Research use "
                                "only: Cairn is not a medical device and its models are not "
                                "for fitness-for-duty decisions; data use needs your ethics "
                                "approval and data-protection law. Errors share one JSON "
                                "shape: `error` (what went wrong and what to do), `field`, "
                                "`status`, `code`. Lists are newest first; follow `next` "
                                "(an opaque cursor) until it is null. Links in answers are "
                                "paths on this server."},
        "paths": paths,
        "components": {
            "schemas": {"Error": ERROR_SCHEMA},
            "securitySchemes": {"token": {"type": "http", "scheme": "bearer",
                                          "description": "Authorization: Bearer cairn_…"}},
        },
        "security": [{"token": []}],
    }


@access("public")
@require_GET
def openapi_json(request):
    """The description of every endpoint of portal/api_urls.py (no token needed)."""
    from portal.api_urls import ENDPOINTS

    return JsonResponse(build_openapi(ENDPOINTS), json_dumps_params={"ensure_ascii": False})
