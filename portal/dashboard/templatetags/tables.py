"""Sortable table headers: a link that sorts by the column (again to reverse it), keeping
the page's other query parameters, with ``aria-sort`` on the current column."""

from django import template
from django.utils.html import format_html

register = template.Library()


@register.simple_tag(takes_context=True)
def sortable(context, key, label, current, param="sort", numeric=False, page_param="page"):
    request = context["request"]
    query = request.GET.copy()
    active = current.lstrip("-") == key
    descending = current.startswith("-")
    query[param] = f"-{key}" if active and not descending else key
    query.pop(page_param, None)
    state = ("descending" if descending else "ascending") if active else "none"
    arrow = (" ↓" if descending else " ↑") if active else ""
    return format_html(
        '<th scope="col" class="{}" aria-sort="{}"><a href="?{}">{}{}</a></th>',
        "num" if numeric else "", state, query.urlencode(), label, arrow)


@register.simple_tag(takes_context=True)
def page_query(context, param, number):
    """The current query string with ``param`` set to ``number`` (for pager links)."""
    query = context["request"].GET.copy()
    query[param] = number
    return query.urlencode()


@register.filter
def percent(value, digits=1):
    """A share 0..1 as "12.3 %"; an em dash for no value."""
    if value is None or value == "":
        return "—"
    return f"{100 * float(value):.{int(digits)}f} %"
