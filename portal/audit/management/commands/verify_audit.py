import json

from django.core.management.base import BaseCommand

from portal.audit.chain import verify, write_anchor
from portal.audit.events import record


class Command(BaseCommand):
    help = ("Walk the audit chain and check every link and the anchors; exit status 1 names "
            "the first broken link (id, time, expected and found hash).")

    def add_arguments(self, parser):
        parser.add_argument("--json", action="store_true", help="print one JSON object")
        parser.add_argument("--anchor", action="store_true",
                            help="when the chain is whole, append its head to the anchor file")
        parser.add_argument("--record", action="store_true",
                            help="record the outcome as an audit event")

    def handle(self, *args, **options):
        result = verify()
        anchored = write_anchor() if result.ok and options["anchor"] else None
        out = {**result.as_dict(), "anchored": anchored}
        if options["record"]:
            record("audit.verified", worker=True,
                   summary=("chain whole: " if result.ok else "chain BROKEN: ")
                   + (f"{result.links} links" if result.ok else result.problem["words"]),
                   params={"ok": result.ok, "links": result.links,
                           "head_seq": result.head_seq, "problem": result.problem})
        if options["json"]:
            self.stdout.write(json.dumps(out))
        elif result.ok:
            self.stdout.write(f"audit chain whole: {result.links} links, head "
                              f"{result.head_seq} {result.head_hash}; "
                              f"{result.anchors_checked} anchor(s) checked")
        else:
            p = result.problem
            self.stderr.write(f"audit chain BROKEN at link {p['seq']} (event {p['event']}, "
                              f"{p['at']}): {p['words']}\n  expected {p['expected']}\n"
                              f"  found    {p['found']}")
        if not result.ok:
            raise SystemExit(1)
