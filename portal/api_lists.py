"""Lists for the read API: one opaque cursor, one limit, the same filters everywhere.

A list answers ``{"results": [...], "next": path or null, "limit": N}``, newest first (by id,
which only grows). ``next`` carries an opaque, signed cursor naming the list and the last id
shown, so a page never repeats or skips an object that existed when the first page was read,
whatever is added meanwhile. A cursor from another list, an edited one or a limit outside
1..MAX_LIMIT is a 400 in the API's one error shape, naming the parameter.

Objects are checked one by one with the apps' ``access.py`` rules before they are shown; the
query only narrows what is read to the (site, study) pairs the token reaches.
"""

import datetime
import re
from functools import wraps
from urllib.parse import urlencode

from django.core import signing
from django.utils import timezone
from django.utils.dateparse import parse_date, parse_datetime

from portal.api_errors import api_error

DEFAULT_LIMIT = 50
MAX_LIMIT = 200
_SALT = "cairn.api.cursor"
SLUG = re.compile(r"[-a-zA-Z0-9_]+")
#: Rows read per query while looking for visible ones.
_BATCH = 200


class BadQuery(Exception):
    """A query parameter the API cannot use; ``field`` names it."""

    def __init__(self, message, field):
        super().__init__(message)
        self.field = field


def answers_bad_query(view):
    """A view whose BadQuery becomes a 400 of the one error shape."""
    @wraps(view)
    def wrapped(request, *args, **kwargs):
        try:
            return view(request, *args, **kwargs)
        except BadQuery as exc:
            return api_error(str(exc), status=400, field=exc.field)
    return wrapped


def _limit(request):
    raw = request.GET.get("limit", "")
    if raw == "":
        return DEFAULT_LIMIT
    if not raw.isdigit() or not 1 <= int(raw) <= MAX_LIMIT:
        raise BadQuery(f"limit must be a whole number from 1 to {MAX_LIMIT}, got {raw!r}; "
                       f"leave it out for {DEFAULT_LIMIT}", field="limit")
    return int(raw)


def make_cursor(list_name, last_id):
    return signing.dumps({"l": list_name, "k": last_id}, salt=_SALT, compress=False)


def _after(request, list_name):
    raw = request.GET.get("cursor", "")
    if raw == "":
        return None
    try:
        data = signing.loads(raw, salt=_SALT)
    except signing.BadSignature:
        data = None
    if not isinstance(data, dict) or data.get("l") != list_name or not isinstance(
            data.get("k"), int):
        raise BadQuery("the cursor is not one this list gave (it is copied from another list "
                       "or changed); start again without cursor and follow the answers' "
                       "'next' links", field="cursor")
    return data["k"]


def _moment(raw, field, *, end):
    """An ISO 8601 date-time (no zone: UTC) or date (its start, or with ``end`` its end)."""
    moment = None
    try:
        moment = parse_datetime(raw)
        if moment is None:
            day = parse_date(raw)
            if day is not None:
                moment = datetime.datetime.combine(day, datetime.time.min)
                if end:
                    moment += datetime.timedelta(days=1)
    except ValueError:
        moment = None
    if moment is None:
        raise BadQuery(f"{field} must be an ISO 8601 date (2026-03-01) or date-time "
                       f"(2026-03-01T12:00:00Z), got {raw!r}", field=field)
    if timezone.is_naive(moment):
        moment = timezone.make_aware(moment, datetime.UTC)
    try:
        # in UTC: PostgreSQL refuses offsets beyond ±15:59 that ISO 8601 syntax allows
        return moment.astimezone(datetime.UTC)
    except OverflowError:
        raise BadQuery(f"{field} {raw!r} is outside the dates the portal can compare",
                       field=field) from None


def filtered(request, queryset, filters):
    """``queryset`` narrowed by the request's filters; ``filters`` maps each parameter this
    list takes to its lookup: ``study``/``site`` to a slug field, ``state`` to
    (field, allowed values), ``created`` to the creation time field, and any other name to
    an integer id field (a lookup of None: checked here, applied by the view). Any other
    parameter (but ``limit`` and ``cursor``) is refused."""
    taken = set(filters) - {"created"} | {"limit", "cursor"}
    if "created" in filters:
        taken |= {"created_after", "created_before"}
    for name in request.GET:
        if name not in taken:
            raise BadQuery(f"this list takes no parameter {name!r}; it takes: "
                           f"{', '.join(sorted(taken))}", field=name)
    for name, lookup in filters.items():
        if name == "created":
            for param, op, end in (("created_after", "gte", False),
                                   ("created_before", "lt", True)):
                raw = request.GET.get(param, "")
                if raw:
                    queryset = queryset.filter(**{f"{lookup}__{op}": _moment(raw, param,
                                                                            end=end)})
            continue
        raw = request.GET.get(name, "")
        if raw == "":
            continue
        if name == "state":
            field, allowed = lookup
            if raw not in allowed:
                raise BadQuery(f"state must be one of {', '.join(allowed)}, got {raw!r}",
                               field="state")
            if field is not None:
                queryset = queryset.filter(**{field: raw})
        elif name in ("study", "site"):
            if not SLUG.fullmatch(raw):
                raise BadQuery(f"{name} must be a slug (letters, digits, - and _), got "
                               f"{raw!r}", field=name)
            if lookup is not None:  # None: the view applies it
                queryset = queryset.filter(**{lookup: raw})
        else:
            if not raw.isdigit():
                raise BadQuery(f"{name} must be an id (a whole number), got {raw!r}",
                               field=name)
            queryset = queryset.filter(**{lookup: int(raw)})
    return queryset


def page(request, list_name, queryset, item, *, visible=None):
    """One page of ``queryset`` (newest id first) as JSON-ready dict: ``item(obj)`` for each
    object that ``visible(obj)`` (the app's access rule) allows."""
    limit = _limit(request)
    after = _after(request, list_name)
    queryset = queryset.order_by("-pk")
    if after is not None:
        queryset = queryset.filter(pk__lt=after)
    shown, more, last = [], False, None
    while not more:
        batch = list(queryset.filter(pk__lt=last)[:_BATCH] if last is not None
                     else queryset[:_BATCH])
        for obj in batch:
            if visible is not None and not visible(obj):
                continue
            if len(shown) == limit:
                more = True
                break
            shown.append(obj)
        if len(batch) < _BATCH:
            break
        last = batch[-1].pk
    next_url = None
    if more:
        query = {k: v for k, v in request.GET.items() if k != "cursor"}
        query["cursor"] = make_cursor(list_name, shown[-1].pk)
        # a path on the same server, like every link the API gives (right behind a proxy too)
        next_url = request.path + "?" + urlencode(query)
    return {"results": [item(obj) for obj in shown], "next": next_url, "limit": limit}


def when(moment):
    return moment.isoformat() if moment else None
