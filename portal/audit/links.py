"""Links from audit events to their objects' pages, for the objects the reader may see.

The audit app knows no other app (it is the floor every app records through), so each app
that owns pages registers, per target type, a resolver ``(user, ids) -> {id: url}`` that
answers for a whole page of events at once with its own access rule, in a fixed number of
queries (see portal/lineage/links.py, registered when the apps are ready). An object whose
resolver is missing, or that the reader may not see, gets no link.
"""

from collections import defaultdict

_RESOLVERS = {}


def register(target_type, resolver):
    _RESOLVERS[target_type] = resolver


def registered():
    return dict(_RESOLVERS)


def object_links(user, events):
    """{(target_type, target_id): url} for the events' objects the user may open."""
    wanted = defaultdict(set)
    for event in events:
        if event.target_type in _RESOLVERS and str(event.target_id).isdigit():
            wanted[event.target_type].add(int(event.target_id))
    links = {}
    for target_type, ids in sorted(wanted.items()):
        for pk, url in _RESOLVERS[target_type](user, sorted(ids)).items():
            links[(target_type, str(pk))] = url
    return links
