"""Differences between two JSON documents (two training specs, two sets of parameters),
as a list of paths with the value on each side."""

MISSING = object()


def _path(parent, key):
    if isinstance(key, int):
        return f"{parent}[{key}]"
    return f"{parent}.{key}" if parent else str(key)


def json_diff(left, right, path=""):
    """[{"path", "change" (added | removed | changed), "left", "right"}] sorted by path;
    dicts are compared key by key, lists item by item, anything else by equality (so
    1 and 1.0 are equal, True and 1 are not)."""
    out = []
    if isinstance(left, dict) and isinstance(right, dict):
        for key in sorted(set(left) | set(right), key=str):
            out.extend(json_diff(left.get(key, MISSING), right.get(key, MISSING),
                                 _path(path, key)))
        return out
    if isinstance(left, list) and isinstance(right, list):
        for index in range(max(len(left), len(right))):
            out.extend(json_diff(left[index] if index < len(left) else MISSING,
                                 right[index] if index < len(right) else MISSING,
                                 _path(path, index)))
        return out
    if left is MISSING and right is MISSING:
        return out
    if left is MISSING:
        return [{"path": path, "change": "added", "left": None, "right": right}]
    if right is MISSING:
        return [{"path": path, "change": "removed", "left": left, "right": None}]
    if type(left) is bool or type(right) is bool:
        same = type(left) is type(right) and left == right
    else:
        same = left == right
    if not same:
        out.append({"path": path, "change": "changed", "left": left, "right": right})
    return out
