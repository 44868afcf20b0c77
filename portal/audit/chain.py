"""The tamper-evident chain over audit events: sealing, verifying, anchoring.

Each event gets a link, in one order: ``hash = sha256(prev_hash + canonical JSON)``. Events
are written in their callers' transactions; links are appended afterwards, in short
transactions of their own holding the chain's lock (the head row), so a long transaction
(an ingest) never holds the chain. The canonical JSON is computed from the row as stored
(sorted keys, UTC ISO-8601 times with microseconds, numbers as JSON reads them back), so
the sealer and the verifier see the same bytes. The actor is covered by its snapshot
(username, id, roles at that moment), not by the user link, which may outlive the user.

The head of the chain is copied at intervals to an append-only anchor file in the blob
store; cutting off the newest events is then detected against the last anchor.
"""

import datetime
import hashlib
import os
from dataclasses import dataclass, field
from pathlib import Path

from django.conf import settings
from django.db import IntegrityError, transaction

from cairn_science.canonical_json import canonical_bytes
from portal.audit.models import ChainHead, ChainLink, Event, PendingLink

GENESIS = "0" * 64
FIELDS = ("id", "at", "verb", "actor_kind", "actor_snapshot", "study_id",
          "site_id", "target_type", "target_id", "summary", "params", "inputs", "outputs",
          "code_version")
SEAL_BATCH = 1000


def _utc(moment):
    return moment.astimezone(datetime.UTC).strftime("%Y-%m-%dT%H:%M:%S.%fZ")


def canonical(values):
    """The canonical bytes of an event given as {field: value} (FIELDS)."""
    data = {name: values[name] for name in FIELDS}
    data["at"] = _utc(data["at"])
    return canonical_bytes(data)


def link_hash(prev_hash, values):
    return hashlib.sha256(prev_hash.encode("ascii") + canonical(values)).hexdigest()


def _head_for_update():
    head = ChainHead.objects.select_for_update().filter(pk=1).first()
    if head is None:  # after a test flush, or a database restored without it
        try:
            with transaction.atomic():
                ChainHead.objects.create(pk=1)
        except IntegrityError:
            pass
        head = ChainHead.objects.select_for_update().get(pk=1)
    return head


def seal_pending(batch=SEAL_BATCH, attempts=5):
    """Append links for every event without one, oldest id first; returns how many.

    On PostgreSQL the head row's lock serialises sealers; where the database cannot lock a
    row (SQLite), two sealers may pick the same number: the unique link number refuses the
    second, which tries again."""
    for attempt in range(attempts):
        try:
            return _seal(batch)
        except IntegrityError:
            if attempt == attempts - 1:
                raise
    return 0


def _seal(batch):
    total = 0
    while True:
        with transaction.atomic():
            head = _head_for_update()
            ids = list(PendingLink.objects.order_by("event_id")
                       .values_list("event_id", flat=True)[:batch])
            if not ids:
                return total
            pending = list(Event.objects.filter(id__in=ids).order_by("id").values(*FIELDS))
            seq, prev = head.seq, head.hash
            links = []
            for values in pending:
                seq += 1
                digest = link_hash(prev, values)
                links.append(ChainLink(seq=seq, event_id=values["id"], prev_hash=prev,
                                       hash=digest))
                prev = digest
            ChainLink.objects.bulk_create(links)
            ChainHead.objects.filter(pk=1).update(seq=seq, hash=prev)
            PendingLink.objects.filter(event_id__in=ids).delete()
        total += len(pending)


def seal_all():
    """Queue every event that has no link and no queue entry (e.g. written before the chain
    existed), then seal: what verification does first."""
    missing = Event.objects.filter(link__isnull=True).exclude(
        id__in=PendingLink.objects.values("event_id")).values_list("id", flat=True)
    PendingLink.objects.bulk_create([PendingLink(event_id=i) for i in missing],
                                    ignore_conflicts=True)
    return seal_pending()


_LOCAL = {"since": 0, "last": 0.0}


def _seal_if_due():
    """After a commit: seal when this process has committed ``AUDIT_SEAL_EVERY_EVENTS``
    events since its last seal or ``AUDIT_SEAL_EVERY_S`` have passed; the beat's sealer and
    every verification take what is left, so no event waits longer than that interval."""
    import time

    _LOCAL["since"] += 1
    now = time.monotonic()
    if (_LOCAL["since"] >= settings.AUDIT_SEAL_EVERY_EVENTS
            or now - _LOCAL["last"] >= settings.AUDIT_SEAL_EVERY_S):
        _LOCAL["since"], _LOCAL["last"] = 0, now
        seal_pending()


def seal_after_commit(event):
    """Queue the event for its link in its own transaction; seal after that commits."""
    PendingLink.objects.create(event=event)
    transaction.on_commit(_seal_if_due, robust=True)


@dataclass
class Verification:
    ok: bool
    links: int = 0
    head_seq: int = 0
    head_hash: str = GENESIS
    unsealed: int = 0
    problem: dict | None = None
    anchors_checked: int = 0
    notes: list = field(default_factory=list)

    def as_dict(self):
        return {"ok": self.ok, "links": self.links, "head_seq": self.head_seq,
                "head_hash": self.head_hash, "unsealed": self.unsealed,
                "problem": self.problem, "anchors_checked": self.anchors_checked,
                "notes": self.notes}


def _broken(result, kind, link_values, expected, found, words):
    result.ok = False
    result.problem = {"kind": kind, "seq": link_values.get("seq"),
                      "event": link_values.get("event_id"),
                      "at": _utc(link_values["at"]) if link_values.get("at") else None,
                      "expected": expected, "found": found, "words": words}
    return result


def verify(*, seal_first=True, chunk=5000):
    """Walk the chain in order; the first broken link (or the missing tail) is reported."""
    if seal_first:
        seal_all()
    result = Verification(ok=True)
    prev, expected_seq = GENESIS, 1
    names = [f"event__{name}" for name in FIELDS]
    rows = (ChainLink.objects.order_by("seq")
            .values_list("seq", "event_id", "prev_hash", "hash", *names)
            .iterator(chunk_size=chunk))
    for row in rows:
        seq, event_id, prev_hash, stored = row[:4]
        values = dict(zip(FIELDS, row[4:], strict=True))
        here = {"seq": seq, "event_id": event_id, "at": values["at"]}
        if seq != expected_seq:
            return _broken(result, "missing", here, f"link {expected_seq}", f"link {seq}",
                           f"links {expected_seq}–{seq - 1} are missing before event "
                           f"{event_id}")
        if values["id"] is None:
            return _broken(result, "missing_event", here, "an event", "none",
                           f"link {seq} points to event {event_id}, which is gone")
        if prev_hash != prev:
            return _broken(result, "relinked", here, prev, prev_hash,
                           f"link {seq} does not follow link {seq - 1}")
        digest = link_hash(prev, values)
        if digest != stored:
            return _broken(result, "changed", here, stored, digest,
                           f"event {event_id} (link {seq}) was changed after it was sealed")
        prev, expected_seq = stored, expected_seq + 1
        result.links += 1
    result.head_seq, result.head_hash = expected_seq - 1, prev
    result.unsealed = Event.objects.filter(link__isnull=True).count()
    anchors = read_anchors()
    by_seq = dict(ChainLink.objects.filter(seq__in={a["seq"] for a in anchors})
                  .values_list("seq", "hash")) if anchors else {}
    for anchor in anchors:
        result.anchors_checked += 1
        if anchor["seq"] > result.head_seq:
            return _broken(result, "cut", {"seq": anchor["seq"]}, f"link {anchor['seq']}",
                           f"chain ends at link {result.head_seq}",
                           f"the anchor of {anchor['at']} recorded link {anchor['seq']}; the "
                           f"chain ends at {result.head_seq}: newest events were removed")
        if by_seq.get(anchor["seq"]) != anchor["hash"]:
            return _broken(result, "anchor", {"seq": anchor["seq"]}, anchor["hash"],
                           by_seq.get(anchor["seq"]),
                           f"link {anchor['seq']} differs from the anchor of {anchor['at']}")
    return result


def anchor_path():
    return Path(settings.BLOB_ROOT) / "anchors" / "audit-chain.txt"


def read_anchors():
    path = anchor_path()
    if not path.exists():
        return []
    out = []
    for line in path.read_text(encoding="ascii").splitlines():
        if line.strip() and not line.startswith("#"):
            seq, digest, at = line.split()
            out.append({"seq": int(seq), "hash": digest, "at": at})
    return out


def write_anchor():
    """Append the newest link (seq, hash, time) to the anchor file; returns it or None."""
    seal_all()
    last = ChainLink.objects.order_by("-seq").values("seq", "hash").first()
    if last is None:
        return None
    path = anchor_path()
    path.parent.mkdir(parents=True, exist_ok=True)
    anchors = read_anchors()
    if anchors and anchors[-1]["seq"] == last["seq"]:
        return anchors[-1]
    at = _utc(datetime.datetime.now(datetime.UTC))
    with open(path, "a", encoding="ascii") as fh:
        if not anchors:
            fh.write("# Cairn audit chain anchors: link number, link hash, UTC time. "
                     "Append only.\n")
        fh.write(f"{last['seq']} {last['hash']} {at}\n")
        fh.flush()
        os.fsync(fh.fileno())
    return {"seq": last["seq"], "hash": last["hash"], "at": at}
