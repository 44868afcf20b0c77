"""API-token authentication for scripts and lab servers (``Authorization: Bearer cairn_…``)."""

from portal.accounts.models import ApiToken

#: Methods that only read; a read-only token may use nothing else.
READ_METHODS = frozenset({"GET", "HEAD", "OPTIONS"})

EXPIRED = ("this API token expired on {when}; create a new one on the “API tokens” page "
           "(/account/tokens/) and put it in your script")
READ_ONLY = ("this API token is read-only: it may list and download but not {method} here; "
             "use a token created without “read only” for uploads, confirmations and training")


class ApiTokenMiddleware:
    """On /api/ paths, a valid bearer token signs the request in as the token's owner.

    An expired token is answered 401 with the date it expired (not taken for "no token"); a
    read-only token is answered 403 on every method but GET, HEAD and OPTIONS, before any view
    runs, so no write endpoint can forget the check.
    """

    def __init__(self, get_response):
        self.get_response = get_response

    def __call__(self, request):
        from portal.api_errors import api_error

        request.api_token = None
        header = request.headers.get("Authorization", "")
        if request.path.startswith("/api/") and header.startswith("Bearer "):
            raw = header[len("Bearer "):].strip()
            token, problem = ApiToken.verify(raw)
            if problem == "expired":
                return api_error(
                    EXPIRED.format(when=token.expires_at.isoformat(timespec="seconds")),
                    status=401, field="Authorization", code="token_expired",
                    headers={"WWW-Authenticate": 'Bearer realm="cairn", error="invalid_token", '
                                                 'error_description="the token expired"'})
            if token is not None:
                request.user = token.user
                request.api_token = token
                if token.read_only and request.method not in READ_METHODS:
                    return api_error(READ_ONLY.format(method=request.method), status=403,
                                     field="Authorization", code="read_only_token")
                # Token requests carry no session cookie, so CSRF does not apply to them.
                request._dont_enforce_csrf_checks = True
        return self.get_response(request)


PASSWORD_CHOSEN = "cairn_password_chosen"


class OneTimePasswordMiddleware:
    """Sends a person still on their one-time password to the password page first."""

    ALLOWED = ("/account/password/", "/account/logout/", "/static/")

    def __init__(self, get_response):
        self.get_response = get_response

    def __call__(self, request):
        from django.contrib import messages
        from django.shortcuts import redirect

        from portal.accounts.models import AccountFlags

        user = request.user
        # A session that once found its password chosen keeps that answer (a new password
        # or an operator's reset ends the session, so it cannot go stale).
        if (user.is_authenticated and request.api_token is None
                and not request.path.startswith(self.ALLOWED)
                and not request.session.get(PASSWORD_CHOSEN)):
            if not AccountFlags.needs_new_password(user):
                request.session[PASSWORD_CHOSEN] = True
                return self.get_response(request)
            messages.info(request, "You signed in with a one-time password: choose your own "
                                   "password before going on.")
            return redirect("accounts:password_change")
        return self.get_response(request)
