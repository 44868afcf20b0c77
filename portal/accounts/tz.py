"""Dates in each person's own time zone: chosen on their account page, kept in the session
at log-in (so no page pays a query for it), applied to every request."""

import zoneinfo

from django import forms
from django.utils import timezone

SESSION_KEY = "cairn_time_zone"


def remember_time_zone(request, name):
    if name:
        request.session[SESSION_KEY] = name
    else:
        request.session.pop(SESSION_KEY, None)


class TimeZoneMiddleware:
    def __init__(self, get_response):
        self.get_response = get_response

    def __call__(self, request):
        name = request.session.get(SESSION_KEY) if hasattr(request, "session") else None
        if name:
            try:
                timezone.activate(zoneinfo.ZoneInfo(name))
            except (zoneinfo.ZoneInfoNotFoundError, ValueError):
                timezone.deactivate()
        else:
            timezone.deactivate()
        return self.get_response(request)


class TimeZoneForm(forms.Form):
    time_zone = forms.CharField(
        required=False, max_length=64, label="Time zone",
        help_text="An IANA name such as Europe/Berlin or America/Chicago; leave empty for the "
                  "portal's default.")

    def clean_time_zone(self):
        name = self.cleaned_data["time_zone"].strip()
        if name and name not in zoneinfo.available_timezones():
            raise forms.ValidationError(
                f"{name!r} is not a time zone name; use one like Europe/Berlin")
        return name
