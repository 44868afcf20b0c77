"""API-token authentication for scripts and lab servers (``Authorization: Bearer cairn_…``)."""

from portal.accounts.models import ApiToken


class ApiTokenMiddleware:
    """On /api/ paths, a valid bearer token signs the request in as the token's owner."""

    def __init__(self, get_response):
        self.get_response = get_response

    def __call__(self, request):
        request.api_token = None
        header = request.headers.get("Authorization", "")
        if request.path.startswith("/api/") and header.startswith("Bearer "):
            token = ApiToken.authenticate(header[len("Bearer "):].strip())
            if token is not None:
                request.user = token.user
                request.api_token = token
                # Token requests carry no session cookie, so CSRF does not apply to them.
                request._dont_enforce_csrf_checks = True
        return self.get_response(request)
