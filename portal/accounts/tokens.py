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
