"""``{% reproduction_card kind obj may_start %}``: an object's latest reproduction (and its
job) with the button to ask for one, for the pages of the apps below lineage (feature sets,
quality results), which show it without importing this app."""

from django import template

from portal.lineage.reproduce import page_context

register = template.Library()


@register.inclusion_tag("lineage/_reproduction.html", takes_context=True)
def reproduction_card(context, kind, obj, may_start):
    """``may_start``: the page's own answer to whether the reader may run work on ``obj``."""
    return {"request": context.get("request"), "csrf_token": context.get("csrf_token"),
            **page_context(kind, obj, may_start=bool(may_start))}
