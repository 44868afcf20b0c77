"""Intake benchmark: receiving and validating a BIDS archive, against sha256sum.

Builds a valid BIDS EEG dataset of about the requested size (the demo site with 32 channels,
its participants repeated under new labels), packs it into a tar, then in a fresh process on
the embedded default (SQLite + filesystem broker, no worker: the validation job is run in the
same process as a worker would) measures:

* receive: staging the archive with its sha256 computed on the way (the upload command's path);
* validate: unpacking, checking, reading every recording's header and storing the blobs;

and prints each throughput as a ratio to `sha256sum` of the same archive timed in this run,
plus the process's peak resident memory. Run:  .venv/bin/python bench/intake.py --sizes-mb 100 2000
"""

import argparse
import json
import os
import shutil
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
          f"{'ratio':>6} {'sha256sum MB/s':>15} {'peak RSS MB':>12}  state")
    for size_mb in args.sizes_mb:
        tree = work / f"tree-{size_mb}"
        archive = work / f"archive-{size_mb}.tar"
        if tree.exists():
            shutil.rmtree(tree)
        build_dataset(demo / SITE, tree, size_mb * 1024**2)
        with open(archive, "wb") as sink:
            pack_folder(tree, sink)
        shutil.rmtree(tree)
        megabytes = archive.stat().st_size / 1024**2
        reference_s = time_sha256sum(archive)
        var_dir = work / f"var-{size_mb}"
        shutil.rmtree(var_dir, ignore_errors=True)
        result = run_child(archive, var_dir)
        ref = megabytes / reference_s
        receive, validate = megabytes / result["receive_s"], megabytes / result["validate_s"]
        print(f"{megabytes:7.0f}M {receive:13.1f} {receive / ref:6.2f} {validate:14.1f} "
              f"{validate / ref:6.2f} {ref:15.1f} {result['rss_peak_mb']:12.0f}  "
              f"{result['state']} {result['errors'] if result['errors'] else ''}")
        shutil.rmtree(var_dir, ignore_errors=True)
        archive.unlink()


if __name__ == "__main__":
    main()
