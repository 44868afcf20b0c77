"""Small helpers shared by the test modules (importable without Django set up)."""

import datetime

#: When pyedflib's test recording is said to start, in its BIDS wrapper (conftest).
PYEDFLIB_MEAS_DATE = datetime.datetime(2011, 4, 4, 12, 57, 2, tzinfo=datetime.UTC)


def member(username, *, role, site_slug=None, study_slug=None):
    """A person with a role, already past their one-time password (as after first log-in)."""
    from portal.accounts.models import AccountFlags
    from portal.accounts.setup import add_member

    user, password = add_member(username, role=role, site_slug=site_slug,
                                study_slug=study_slug)
    AccountFlags.require_new_password(user, required=False)
    return user, password


def run_pending(kind):
    """Run every waiting job of a kind in this process, as a worker would; returns how many."""
    from portal.jobs import runner
    from portal.jobs.models import Job, JobState

    count = 0
    for job in Job.objects.filter(kind=kind, state=JobState.QUEUED).order_by("pk"):
        assert runner.run(job.pk) == "done", Job.objects.get(pk=job.pk).error
        count += 1
    return count


def run_all_pending(kinds):
    """Run waiting jobs of these kinds, in this order, until none is left."""
    total = 0
    while True:
        ran = sum(run_pending(kind) for kind in kinds)
        if not ran:
            return total
        total += ran


def skip_or_fail(reason):
    """Skip for a missing service or outside reference; under CAIRN_REQUIRE_SERVICES=1 (as in
    ``make test``) fail instead, so the full suite cannot pass by skipping."""
    import os

    import pytest

    if os.environ.get("CAIRN_REQUIRE_SERVICES") == "1":
        pytest.fail(f"{reason} (CAIRN_REQUIRE_SERVICES=1: the full suite needs it)")
    pytest.skip(reason)


def _repo():
    from pathlib import Path

    return Path(__file__).resolve().parents[1]


def examples_location():
    import os
    from pathlib import Path

    return Path(os.environ.get("CAIRN_BIDS_EXAMPLES",
                               _repo().parent / "shared" / "reference" / "bids-examples"))


def bids_examples():
    """The BIDS standard's example datasets (beside the checkout, or CAIRN_BIDS_EXAMPLES).

    Missing, the tests that need them skip — or fail under CAIRN_REQUIRE_SERVICES=1, as in
    ``make test``, so the suite cannot pass without its outside references.
    """
    path = examples_location()
    if not path.is_dir():
        skip_or_fail(f"the BIDS example datasets are not at {path} (set CAIRN_BIDS_EXAMPLES)")
    return path


def demo_recordings(manifest):
    """Yield (answer-key record, raw read with mne-bids and loaded, mains frequency in Hz)
    for every recording of a generated demo consortium, in answer-key order."""
    import json
    import warnings

    import mne_bids

    key = json.loads(manifest.answer_key.read_text(encoding="utf-8"))
    mains_hz = {site["slug"]: site["power_line_hz"] for site in key["sites"]}
    for record in key["recordings"]:
        path = manifest.out_dir / record["bids_root"] / record["path"]
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            raw = mne_bids.read_raw_bids(mne_bids.get_bids_path_from_fname(path),
                                         verbose="ERROR")
        raw.load_data(verbose="ERROR")
        yield record, raw, mains_hz[record["site"]]
