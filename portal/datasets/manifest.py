"""What a dataset version stores about its files: the manifest hash and the difference from
its parent. Shared by the validation job (which writes them) and by everything that writes
versions otherwise (restoring one, the bulk study of ``portal.demo``), so they agree.

``files`` maps each path to (sha256, bytes).
"""

import hashlib
import json


def manifest_sha256(files):
    """sha256 of the sorted (path, sha256, bytes) list as compact JSON."""
    rows = sorted((path, sha, size) for path, (sha, size) in files.items())
    return hashlib.sha256(json.dumps(rows, separators=(",", ":")).encode()).hexdigest()


def file_diff(parent_files, files):
    """Paths added, removed and changed since the parent, and how many are unchanged."""
    added = sorted(set(files) - set(parent_files))
    removed = sorted(set(parent_files) - set(files))
    changed = sorted(p for p in set(files) & set(parent_files) if files[p] != parent_files[p])
    return {"added": added, "removed": removed, "changed": changed,
            "unchanged": len(set(files) & set(parent_files)) - len(changed)}
