"""Cairn's one way of writing dates and times on pages (settings.FORMAT_MODULE_PATH).

Django takes the active language's format module before the DATE_FORMAT settings, so the
same formats are given here for English (the portal's language) and in the settings for any
other: "4 Dec 2026" and "4 Dec 2026, 13:05", 24-hour clock, in the time zone the footer
names. Files and API answers (JSON, CSV) keep ISO 8601 in UTC instead.
"""

DATE_FORMAT = "j M Y"
TIME_FORMAT = "H:i"
DATETIME_FORMAT = "j M Y, H:i"
SHORT_DATE_FORMAT = DATE_FORMAT
SHORT_DATETIME_FORMAT = DATETIME_FORMAT
MONTH_DAY_FORMAT = "j M"
YEAR_MONTH_FORMAT = "M Y"
