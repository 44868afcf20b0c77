"""Log-in, log-out, password change and API tokens: a person's own account."""

from django.contrib import messages
from django.contrib.auth import views as auth_views
from django.shortcuts import get_object_or_404, redirect, render
from django.urls import reverse_lazy
from django.utils import timezone
from django.views.decorators.http import require_POST

from portal.accounts import throttle
from portal.accounts.forms import ThrottledLoginForm, TokenForm
from portal.accounts.models import AccountFlags, ApiToken
from portal.accounts.permissions import access
from portal.accounts.tz import TimeZoneForm, remember_time_zone
from portal.audit.events import record


class LoginView(auth_views.LoginView):
    form_class = ThrottledLoginForm
    template_name = "accounts/login.html"
    redirect_authenticated_user = True

    def form_valid(self, form):
        response = super().form_valid(form)
        throttle.clear_failures(form.get_user().get_username())
        remember_time_zone(self.request, AccountFlags.objects.filter(
            user=form.get_user()).values_list("time_zone", flat=True).first() or "")
        record("login", actor=form.get_user(), summary="signed in",
               params={"address": throttle.client_address(self.request)})
        return response


login = access("public")(LoginView.as_view())


@access("account")
@require_POST
def logout(request):
    record("logout", actor=request.user, summary="signed out")
    return auth_views.LogoutView.as_view()(request)


class PasswordChangeView(auth_views.PasswordChangeView):
    template_name = "accounts/password_change.html"
    success_url = reverse_lazy("accounts:password_changed")

    def form_valid(self, form):
        response = super().form_valid(form)
        AccountFlags.require_new_password(self.request.user, required=False)
        record("password.changed", actor=self.request.user, summary="password changed")
        return response


password_change = access("account")(PasswordChangeView.as_view())
password_changed = access("account")(
    auth_views.PasswordChangeDoneView.as_view(template_name="accounts/password_changed.html")
)


@access("account")
def tokens(request):
    new_raw = None
    form = TokenForm(request.POST or None)
    if request.method == "POST" and form.is_valid():
        token, new_raw = ApiToken.issue(request.user, form.cleaned_data["name"],
                                        read_only=form.cleaned_data["read_only"],
                                        expires_at=form.expires_at())
        expiry = token.expires_at.isoformat(timespec="seconds") if token.expires_at else None
        record("token.created", actor=request.user, target=token,
               summary=f"API token {token}, {token.get_scope_display()}, "
                       f"expires {expiry or 'never'}",
               params={"scope": token.scope, "expires_at": expiry})
        form = TokenForm()
    listed = ApiToken.objects.filter(user=request.user)
    return render(request, "accounts/tokens.html",
                  {"form": form, "tokens": listed, "new_raw": new_raw})


@access("account")
@require_POST
def revoke_token(request, token_id):
    token = get_object_or_404(ApiToken, pk=token_id, user=request.user, revoked_at__isnull=True)
    token.revoked_at = timezone.now()
    token.save(update_fields=["revoked_at"])
    record("token.revoked", actor=request.user, target=token, summary=f"API token {token}")
    messages.success(request, f"Token “{token.name}” revoked; scripts using it will be refused.")
    return redirect("accounts:tokens")


@access("account")
def time_zone(request):
    """The time zone dates are shown in, for this person (kept with their account)."""
    flags = AccountFlags.objects.filter(user=request.user).first()
    form = TimeZoneForm(request.POST or None,
                        initial={"time_zone": flags.time_zone if flags else ""})
    if request.method == "POST" and form.is_valid():
        chosen = form.cleaned_data["time_zone"]
        AccountFlags.objects.update_or_create(user=request.user,
                                              defaults={"time_zone": chosen})
        remember_time_zone(request, chosen)
        messages.info(request, f"Dates are now shown in {chosen or 'the portal default'}.")
        return redirect("accounts:time_zone")
    return render(request, "accounts/time_zone.html", {"form": form})
