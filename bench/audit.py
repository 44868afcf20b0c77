"""Audit-chain benchmark on PostgreSQL, in one run:

* event writes through ``record()`` with the chain (each event sealed after its commit) as
  a ratio to the same writes with sealing switched off (plain inserts), goal ≥ 0.5;
* ``verify`` over 1,000,000 events (written in bulk, then sealed), goal under 60 s.

Uses its own database (created and migrated if missing; dropped at the end unless --keep).
Run:  .venv/bin/python bench/audit.py [--events 1000000] [--writes 3000] [--json]
"""

import argparse
import json
import os
import subprocess
import sys
import time
from pathlib import Path

REPO = Path(__file__).resolve().parents[1]
DB = "cairn_bench_audit"


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--events", type=int, default=1_000_000)
    parser.add_argument("--writes", type=int, default=3000)
    parser.add_argument("--keep", action="store_true")
    parser.add_argument("--json", action="store_true")
    args = parser.parse_args()
    subprocess.run(["dropdb", "-h", "127.0.0.1", "-U", "postgres", "--if-exists", DB],
                   check=True)
    subprocess.run(["createdb", "-h", "127.0.0.1", "-U", "postgres", DB], check=True)
    os.environ["DATABASE_URL"] = f"postgres://postgres@127.0.0.1:5432/{DB}"
    os.environ.setdefault("DJANGO_SETTINGS_MODULE", "portal.settings")
    os.environ.setdefault("SECRET_KEY", "bench-only")
    sys.path.insert(0, str(REPO))
    import django

    django.setup()
    from django.core.management import call_command

    call_command("migrate", verbosity=0)
    try:
        report = run(args)
    finally:
        from django.db import connections

        connections.close_all()
        if not args.keep:
            subprocess.run(["dropdb", "-h", "127.0.0.1", "-U", "postgres", DB], check=True)
    if args.json:
        print(json.dumps(report, indent=2))
        return
    print(f"event writes, {args.writes} each: plain {report['plain_per_s']:.0f}/s, with the "
          f"chain {report['chain_per_s']:.0f}/s: ratio {report['ratio']:.2f} (goal ≥ 0.5)")
    print(f"{report['events']} events: bulk insert {report['insert_s']:.1f} s, sealing "
          f"{report['seal_s']:.1f} s, verify {report['verify_s']:.1f} s (goal < 60 s)")


def run(args):
    import datetime

    from portal.audit import chain, events
    from portal.audit.models import ActorKind, Event

    def writes(n, label):
        start = time.perf_counter()
        for i in range(n):
            events.record("bench.write", summary=f"{label} {i}", params={"i": i, "x": 0.5})
        return n / (time.perf_counter() - start)

    original = chain.seal_after_commit  # record() looks it up at each call
    chain.seal_after_commit = lambda event: None
    writes(200, "warm-up")
    plain = writes(args.writes, "plain")
    chain.seal_after_commit = original
    chain.seal_all()
    with_chain = writes(args.writes, "chained")
    chain.seal_pending()

    start = time.perf_counter()
    now = datetime.datetime.now(datetime.UTC)
    remaining = args.events - Event.objects.count()
    batch = 20_000
    while remaining > 0:
        size = min(batch, remaining)
        Event.objects.bulk_create([
            Event(at=now, verb="bench.bulk", actor_kind=ActorKind.SYSTEM,
                  summary=f"bulk {i}", params={"i": i, "share": i / 7.0},
                  inputs=[{"sha256": f"{i:064x}"}], code_version={"commit": "bench"})
            for i in range(size)], batch_size=size)
        remaining -= size
    insert_s = time.perf_counter() - start
    start = time.perf_counter()
    chain.seal_all()
    seal_s = time.perf_counter() - start
    start = time.perf_counter()
    result = chain.verify(seal_first=False, chunk=20_000)
    verify_s = time.perf_counter() - start
    assert result.ok, result.problem
    return {"writes": args.writes, "plain_per_s": plain, "chain_per_s": with_chain,
            "ratio": with_chain / plain, "events": result.links, "insert_s": insert_s,
            "seal_s": seal_s, "verify_s": verify_s}


if __name__ == "__main__":
    main()
