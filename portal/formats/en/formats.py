"""English: Cairn's formats (see portal/formats/__init__.py)."""

from portal.formats import (  # noqa: F401
    DATE_FORMAT,
    DATETIME_FORMAT,
    MONTH_DAY_FORMAT,
    SHORT_DATE_FORMAT,
    SHORT_DATETIME_FORMAT,
    TIME_FORMAT,
    YEAR_MONTH_FORMAT,
)
