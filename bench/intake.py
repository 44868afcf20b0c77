"""Intake benchmark: receiving and validating a BIDS archive, against sha256sum.

Builds a valid BIDS EEG dataset of about the requested size (the demo site with 32 channels,
its participants repeated under new labels), packs it into a tar, then in a fresh process on
the embedded default (SQLite + filesystem broker, no worker: the validation job is run in the
same process as a worker would) measures:

* receive: staging the archive with its sha256 computed on the way (the upload command's path);
* validate: unpacking, checking, reading every recording's header and storing the blobs;

and, separately, the science part alone: ``validate_dataset`` on the unpacked tree (in a fresh
process with its libraries imported before the clock, as in a worker). Each throughput is
printed as a ratio to `sha256sum` of the same archive, measured interleaved in one run
(sha256sum, ours, sha256sum, ours, ...; ``--rounds`` rounds, default 3) and given as the
median of the per-round ratios, with the process's peak resident memory. The machine may be
shared: interleaving keeps both sides under the same load. Goal (issue 16): validate ≥ 0.5
of sha256sum's throughput. Run:  .venv/bin/python bench/intake.py --sizes-mb 100 2000
"""

import argparse
import json
import os
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

REPO = Path(__file__).resolve().parents[1]
SITE = "kestrel-junction"

CHILD = r"""
import json, os, resource, sys, time
import django
django.setup()
from portal.accounts.setup import add_member, add_site, add_study
from portal.datasets.services import submit_path
from portal.jobs import runner
from portal.jobs.models import Job
archive = sys.argv[1]
add_study("bench", name="Bench")
site, _ = add_site("bench-site", study_slug="bench", name="Bench site")
user, _ = add_member("bench-dm", role="data_manager", site_slug="bench-site")
t0 = time.perf_counter()
upload = submit_path(archive, site=site, study=site.studies.get(), user=user)
t1 = time.perf_counter()
rss_after_receive = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
job = Job.objects.get(target_id=str(upload.pk))
outcome = runner.run(job.pk)
t2 = time.perf_counter()
upload.refresh_from_db()
print(json.dumps({"receive_s": t1 - t0, "validate_s": t2 - t1, "outcome": outcome,
                  "state": upload.state, "errors": upload.errors[:3],
                  "rss_receive_mb": rss_after_receive / 1024,
                  "rss_peak_mb": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024}))
"""


def build_dataset(source, target, size_bytes):
    """Copy the demo site, repeating its participants until the tree reaches ``size_bytes``."""
    shutil.copytree(source, target)
    subjects = sorted(p.name for p in source.glob("sub-*"))
    per_copy = sum(f.stat().st_size for s in subjects for f in (source / s).rglob("*")
                   if f.is_file())
    rows = (source / "participants.tsv").read_text().splitlines()
    header, body = rows[0], {r.split("\t")[0]: r for r in rows[1:]}
    total = sum(f.stat().st_size for f in target.rglob("*") if f.is_file())
    copy = 1
    while total + per_copy <= size_bytes:
        for subject in subjects:
            new = f"sub-r{copy:03d}{subject[4:]}"
            for path in (source / subject).rglob("*"):
                if path.is_file():
                    dest = target / new / path.relative_to(source / subject)
                    dest = dest.with_name(dest.name.replace(subject, new))
                    dest.parent.mkdir(parents=True, exist_ok=True)
                    if path.suffix == ".vhdr" or path.suffix == ".vmrk" or path.name.endswith(
                            "_scans.tsv"):
                        dest.write_text(path.read_text().replace(subject, new))
                    else:
                        shutil.copyfile(path, dest)
            body[new] = body[subject].replace(subject, new, 1)
        total += per_copy
        copy += 1
    (target / "participants.tsv").write_text("\n".join([header, *body.values()]) + "\n")
    return total


SCIENCE = r"""
import json, sys, time
import mne_bids  # noqa: F401  (a worker has it loaded)
from cairn_science.bids.validate import validate_dataset
start = time.perf_counter()
report = validate_dataset(sys.argv[1])
print(json.dumps({"validate_s": time.perf_counter() - start, "errors": len(report.errors),
                  "recordings": len(report.recordings)}))
"""


def run_science(tree):
    out = subprocess.run([sys.executable, "-c", SCIENCE, str(tree)], cwd=REPO, check=True,
                         capture_output=True, text=True)
    return json.loads(out.stdout.strip().splitlines()[-1])


def time_sha256sum(path):
    start = time.perf_counter()
    subprocess.run(["sha256sum", str(path)], check=True, capture_output=True)
    return time.perf_counter() - start


def run_child(archive, var_dir):
    env = {k: v for k, v in os.environ.items()
           if k not in ("DATABASE_URL", "CELERY_BROKER_URL")}
    env.update({"CAIRN_VAR_DIR": str(var_dir), "DJANGO_SETTINGS_MODULE": "portal.settings"})
    subprocess.run([sys.executable, "manage.py", "migrate", "-v0"], cwd=REPO, env=env,
                   check=True)
    out = subprocess.run([sys.executable, "-c", CHILD, str(archive)], cwd=REPO, env=env,
                         check=True, capture_output=True, text=True)
    return json.loads(out.stdout.strip().splitlines()[-1])


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes-mb", type=int, nargs="+", default=[100, 2000])
    parser.add_argument("--rounds", type=int, default=3,
                        help="interleaved rounds (sha256sum, ours, ...); the median is shown")
    parser.add_argument("--work-dir", default=None, help="scratch folder (default: a temp dir)")
    args = parser.parse_args()
    sys.path.insert(0, str(REPO))
    from cairn_science.archive import pack_folder
    from fixtures.demo import generate

    work = Path(args.work_dir or tempfile.mkdtemp(prefix="cairn-bench-"))
    demo = work / "demo"
    if not (demo / "answer_key.json").exists():
        generate(demo, scale="full", seed=7, overwrite=True)
    print(f"{'size':>8} {'receive MB/s':>13} {'ratio':>6} {'validate MB/s':>14} "
          f"{'ratio':>6} {'science MB/s':>13} {'ratio':>6} {'sha256sum MB/s':>15} "
          f"{'peak RSS MB':>12}  state")
    for size_mb in args.sizes_mb:
        tree = work / f"tree-{size_mb}"
        archive = work / f"archive-{size_mb}.tar"
        if tree.exists():
            shutil.rmtree(tree)
        build_dataset(demo / SITE, tree, size_mb * 1024**2)
        with open(archive, "wb") as sink:
            pack_folder(tree, sink)
        megabytes = archive.stat().st_size / 1024**2
        rounds = {"sha": [], "receive": [], "validate": [], "science": []}
        result = None
        for _ in range(max(1, args.rounds)):
            var_dir = work / f"var-{size_mb}"
            shutil.rmtree(var_dir, ignore_errors=True)
            rounds["sha"].append(time_sha256sum(archive))
            result = run_child(archive, var_dir)
            rounds["receive"].append(result["receive_s"])
            rounds["validate"].append(result["validate_s"])
            rounds["sha"].append(time_sha256sum(archive))
            rounds["science"].append(run_science(tree)["validate_s"])
            shutil.rmtree(var_dir, ignore_errors=True)
        # per round: the reference timed right before (portal) and right after (science)
        ref = [rounds["sha"][2 * i] for i in range(len(rounds["receive"]))]
        ref_after = [rounds["sha"][2 * i + 1] for i in range(len(rounds["science"]))]

        def ratio(times, refs):
            return statistics.median(r / t for r, t in zip(refs, times, strict=True))

        sha_mb_s = megabytes / statistics.median(rounds["sha"])
        print(f"{megabytes:7.0f}M {megabytes / statistics.median(rounds['receive']):13.1f} "
              f"{ratio(rounds['receive'], ref):6.2f} "
              f"{megabytes / statistics.median(rounds['validate']):14.1f} "
              f"{ratio(rounds['validate'], ref):6.2f} "
              f"{megabytes / statistics.median(rounds['science']):13.1f} "
              f"{ratio(rounds['science'], ref_after):6.2f} {sha_mb_s:15.1f} "
              f"{result['rss_peak_mb']:12.0f}  "
              f"{result['state']} {result['errors'] if result['errors'] else ''}")
        shutil.rmtree(tree)
        archive.unlink()
    print(f"ratios: throughput / sha256sum's on the same archive, median of {args.rounds} "
          "interleaved rounds; validate = the portal's whole validation job (unpack, checks, "
          "index, blob store), science = cairn_science.bids.validate_dataset on the unpacked "
          "tree")


if __name__ == "__main__":
    main()
