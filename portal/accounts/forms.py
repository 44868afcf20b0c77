from django import forms
from django.contrib.auth.forms import AuthenticationForm

from portal.accounts import throttle
from portal.audit.events import record


class ThrottledLoginForm(AuthenticationForm):
    """Log-in that refuses to check passwords after too many recent failures."""

    error_messages = {
        **AuthenticationForm.error_messages,
        "throttled": (
            "Too many failed log-ins for this account or from this address. Wait %(minutes)d "
            "minutes and try again, or ask an operator to reset your password."
        ),
    }

    def clean(self):
        from django.conf import settings

        username = self.cleaned_data.get("username") or ""
        address = throttle.client_address(self.request)
        if throttle.refuse_if_throttled(username, address):
            raise forms.ValidationError(
                self.error_messages["throttled"], code="throttled",
                params={"minutes": max(1, round(settings.LOGIN_FAILURE_WINDOW_S / 60))},
            )
        try:
            return super().clean()
        except forms.ValidationError:
            throttle.note_failure(username, address)
            record("login.failed", summary=f"failed log-in for {username!r}",
                   params={"username": username, "address": address})
            raise


class TokenForm(forms.Form):
    #: The longest life a token may be given, in days (about two years).
    MAX_DAYS = 730

    name = forms.CharField(max_length=100, label="What is the token for?",
                           help_text="For example: lab server nightly upload.")
    expires_in_days = forms.IntegerField(
        required=False, min_value=1, max_value=MAX_DAYS, label="Expires after (days)",
        help_text=f"1 to {MAX_DAYS}; leave empty for a token that lasts until you revoke it.")
    read_only = forms.BooleanField(
        required=False, label="Read only",
        help_text="The token may list and download, never upload, confirm or start work.")

    def expires_at(self):
        """When the token expires (from now), or None."""
        import datetime

        from django.utils import timezone

        days = self.cleaned_data.get("expires_in_days")
        return timezone.now() + datetime.timedelta(days=days) if days else None
