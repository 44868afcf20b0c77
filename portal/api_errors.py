"""One JSON shape for every error the API answers, and no traceback for an ordinary refusal.

Under ``/api/`` every answer with a status of 400 or more is JSON::

    {"error": "what went wrong and what to do", "field": null, "status": 404,
     "code": "not_found"}

``error`` is for people, ``code`` for programs, ``field`` names the request field at fault (or
is null) and ``status`` repeats the HTTP status. A view's own JSON error keeps what it says
(e.g. a spec's ``errors`` by field, a rejected upload's report) and gains the members it lacks.
A request without a valid token (nor a session) is answered 401 with ``WWW-Authenticate:
Bearer`` (RFC 6750, section 3).

On every path, a refused request (PermissionDenied) is answered without logging its
traceback: Django's handler writes one short "Forbidden" line for it.
"""

import json

from django.core.exceptions import PermissionDenied
from django.http import Http404, JsonResponse
from django.urls import get_resolver

#: ``code`` for each status; other statuses use their reason phrase in snake case.
CODES = {
    400: "bad_request", 401: "unauthorized", 403: "forbidden", 404: "not_found",
    405: "method_not_allowed", 409: "conflict", 413: "too_large", 415: "unsupported_type",
    422: "unprocessable", 429: "too_many_requests", 500: "internal_error",
    502: "bad_gateway", 503: "unavailable",
}

#: What a person reads when the answer itself said nothing usable.
MESSAGES = {
    400: "the request could not be read; check its body and parameters against the README's "
         "API section",
    401: "sign in or send an API token: Authorization: Bearer cairn_…",
    403: "you may not do this here",
    404: "nothing here: no such object, or you may not see it; check the address and the id",
    405: "this address does not take that method",
    413: "the request is too large",
    500: "internal error: the server could not answer; the operators find the details in its "
         "log. Try again later, or tell an operator when and what you sent",
}

BAD_TOKEN = ("the API token is not valid (unknown, revoked, or its account is inactive); "
             "create a new one on the “API tokens” page")


def is_api(request):
    return request.path.startswith("/api/")


def code_for(status, reason=""):
    return CODES.get(status) or "_".join(reason.lower().split()) or f"status_{status}"


def api_error(message, *, status, field=None, code=None, headers=None):
    """A JSON error answer of the API's one shape."""
    response = JsonResponse(
        {"error": message, "field": field, "status": status, "code": code or code_for(status)},
        status=status, json_dumps_params={"ensure_ascii": False},
    )
    for name, value in (headers or {}).items():
        response[name] = value
    return response


def _anonymous(request):
    user = getattr(request, "user", None)
    return user is None or not user.is_authenticated


def unauthorized(request):
    """401 for a request that carries no valid token and no session (RFC 6750, section 3)."""
    challenge = 'Bearer realm="cairn"'
    message = MESSAGES[401]
    if request.headers.get("Authorization", "").strip():
        challenge += ', error="invalid_token"'
        message = BAD_TOKEN
    return api_error(message, status=401, headers={"WWW-Authenticate": challenge})


def _summary(body):
    """A one-line message from a view's own error body that lacks ``error``."""
    errors = body.get("errors")
    if isinstance(errors, dict) and errors:
        parts = []
        for field, messages in errors.items():
            messages = messages if isinstance(messages, list) else [messages]
            parts.append(f"{field}: {' '.join(map(str, messages))}")
        return "; ".join(parts), (next(iter(errors)) if len(errors) == 1 else None)
    if isinstance(errors, list) and errors and isinstance(errors[0], dict):
        return str(errors[0].get("message", "")), errors[0].get("field")
    return "", None


def _completed(response):
    """The view's JSON error body with the shape's members it lacks, or None if it is no
    JSON object."""
    try:
        body = json.loads(response.content)
    except (ValueError, UnicodeDecodeError):
        return None
    if not isinstance(body, dict):
        return None
    status = response.status_code
    if "error" not in body:
        message, field = _summary(body)
        body["error"] = message or MESSAGES.get(status, response.reason_phrase.lower())
        body.setdefault("field", field)
    body.setdefault("field", None)
    body.setdefault("status", status)
    body.setdefault("code", code_for(status, response.reason_phrase))
    return body


def _replace(response, body):
    """A JSON answer with ``body``, keeping the original's status, headers, cookies and the
    mark that Django already logged it."""
    new = JsonResponse(body, status=response.status_code, json_dumps_params={
        "ensure_ascii": False})
    for name, value in response.items():
        if name.lower() not in ("content-type", "content-length"):
            new[name] = value
    new.cookies = response.cookies
    if getattr(response, "_has_been_logged", False):
        new._has_been_logged = True
    return new


class ApiErrorMiddleware:
    """Turns every error answer under /api/ into the one JSON shape (listed first in
    MIDDLEWARE, so it also sees what other middleware answered), and answers refusals
    without a logged traceback."""

    def __init__(self, get_response):
        self.get_response = get_response

    def __call__(self, request):
        response = self.get_response(request)
        if not is_api(request) or response.status_code < 400 or response.streaming:
            return response
        if response.status_code == 403 and _anonymous(request):
            return unauthorized(request)  # e.g. the CSRF check of a request with no token
        if response.get("Content-Type", "").startswith("application/json"):
            body = _completed(response)
            if body is not None:
                return _replace(response, body)
        status = response.status_code
        return _replace(response, {
            "error": MESSAGES.get(status, response.reason_phrase.lower()), "field": None,
            "status": status, "code": code_for(status, response.reason_phrase)})

    def process_exception(self, request, exception):
        if isinstance(exception, PermissionDenied):
            if not is_api(request):
                # Django's own handling would log the traceback of an ordinary refusal.
                handler = get_resolver().resolve_error_handler(403)
                return handler(request, exception=exception)
            if _anonymous(request):
                return unauthorized(request)
            return api_error(str(exception) or MESSAGES[403], status=403)
        if isinstance(exception, Http404) and is_api(request):
            return api_error(str(exception) or MESSAGES[404], status=404)
        return None
