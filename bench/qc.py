"""QC benchmark: ``run_qc`` against pyprep's ``NoisyChannels`` on the same recording.

Builds a realistic 32-channel, 256 Hz recording (the demo generator's spatially smooth
background of the 32-channel site, 10 minutes, with one flat, one noisy, one popping channel
and a bridged pair), then times in this run:

* ``run_qc`` without the predictability check and with it;
* pyprep 0.9.0 ``NoisyChannels(raw).find_all_bads(ransac=False)`` and ``(ransac=True)``;

measured interleaved in one run (each round runs every call once, in turn; ``--rounds``
rounds, default 3), and prints the median wall times, peak traced memory of each call
(tracemalloc, a separate untimed pass), the process's peak resident memory, the channels each
found, and the ratios, each the median of the per-round ratios (goals: without
predictability <= 1.5 x pyprep without RANSAC; with predictability <= 1 x pyprep without
RANSAC (issue 16) and <= 1 x pyprep with RANSAC). ``--no-ransac`` leaves pyprep's RANSAC
run out. The machine may be shared: interleaving keeps both sides under the same load.
Both sides use a worker's numeric threads (``CAIRN_WORKER_THREADS``, default 1).
Run:  .venv/bin/python bench/qc.py [--duration-s 600] [--rounds 3]
"""

import argparse
import contextlib
import datetime
import io
import logging
import resource
import sys
import time
import tracemalloc
import warnings
from pathlib import Path

REPO = Path(__file__).resolve().parents[1]
if str(REPO) not in sys.path:
    sys.path.insert(0, str(REPO))

# Both sides run with a worker's numeric threads (CAIRN_WORKER_THREADS, default 1), set
# before numpy loads, as portal/celery.py sets them for every worker process.
from cairn_science.runtime import limit_numeric_threads  # noqa: E402

THREADS = limit_numeric_threads()

import mne  # noqa: E402
import numpy as np  # noqa: E402

from cairn_science.qc import QCSettings, run_qc  # noqa: E402
from fixtures.demo.bids_output import build_raw  # noqa: E402
from fixtures.demo.protocol import draw_person  # noqa: E402
from fixtures.demo.scenario import SITES  # noqa: E402
from fixtures.demo.signals import simulate_recording  # noqa: E402

SITE = next(site for site in SITES if site.slug == "kestrel-junction")
FAULTS = ("flat", "noisy", "popping", "bridged")


def build_recording(*, duration_s, seed):
    """The 32-channel site's simulated EEG with four channel faults, as an mne Raw."""
    rng = np.random.default_rng(seed)
    person = draw_person(participant_id="sub-bench", rng=rng)
    data_v, faults, _ = simulate_recording(
        ch_names=SITE.ch_names, sfreq_hz=SITE.sfreq_hz,
        n_times=int(round(duration_s * SITE.sfreq_hz)), condition="moderate", person=person,
        site=SITE, channel_fault_kinds=FAULTS, with_bad_segments=False,
        signal_rng=np.random.default_rng(seed + 1), fault_rng=np.random.default_rng(seed + 2),
    )
    raw = build_raw(data_v=data_v, site=SITE, condition="moderate", block_s=duration_s,
                    meas_date=datetime.datetime(2024, 4, 8, 9, tzinfo=datetime.UTC))
    return raw, {fault["name"]: fault["kind"] for fault in faults}


def ours(raw, *, predictability):
    settings = QCSettings(check_predictability=predictability)
    return run_qc(raw, settings=settings, power_line_hz=SITE.power_line_hz, random_state=0)


def pyprep_bads(raw, *, ransac):
    import pyprep

    with contextlib.redirect_stderr(io.StringIO()), contextlib.redirect_stdout(io.StringIO()):
        noisy = pyprep.NoisyChannels(raw.copy(), random_state=0, ransac=ransac)
        noisy.find_all_bads(ransac=ransac)
    return noisy


def interleaved_times(runs, *, rounds):
    """Wall times of every call, ``rounds`` rounds of each call once in turn (A, B, A, B,
    ...), so that each round's calls share the machine's load of that moment."""
    times = {name: [] for name in runs}
    for _ in range(rounds):
        for name, function in runs.items():
            start = time.perf_counter()
            function()
            times[name].append(time.perf_counter() - start)
    return times


def median_ratio(times, numerator, denominator):
    return float(np.median([a / b for a, b in zip(times[numerator], times[denominator],
                                                     strict=True)]))


def peak_traced_mb(function):
    tracemalloc.start()
    function()
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    return peak / 2**20


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--duration-s", type=float, default=600.0)
    parser.add_argument("--rounds", type=int, default=3)
    parser.add_argument("--seed", type=int, default=11)
    parser.add_argument("--no-ransac", action="store_true",
                        help="leave out pyprep with RANSAC (the slowest run)")
    args = parser.parse_args(argv)
    warnings.filterwarnings("ignore")
    mne.set_log_level("ERROR")
    logging.getLogger("pyprep").setLevel(logging.ERROR)

    raw, truth = build_recording(duration_s=args.duration_s, seed=args.seed)
    print(f"recording: {len(raw.ch_names)} channels, {raw.info['sfreq']:g} Hz, "
          f"{raw.times[-1] + 1 / raw.info['sfreq']:.0f} s; injected: {truth}; numeric "
          f"threads per process: {THREADS} (CAIRN_WORKER_THREADS)")
    runs = {
        "run_qc without predictability": lambda: ours(raw, predictability=False),
        "run_qc with predictability": lambda: ours(raw, predictability=True),
        "pyprep find_all_bads(ransac=False)": lambda: pyprep_bads(raw, ransac=False),
    }
    if not args.no_ransac:
        runs["pyprep find_all_bads(ransac=True)"] = lambda: pyprep_bads(raw, ransac=True)
    found = {}
    for name, function in runs.items():  # also a warm-up round, untimed
        outcome = function()
        if hasattr(outcome, "bad_channels"):
            found[name] = {n: [r.check for r in outcome.channels[n].reasons]
                           for n in outcome.bad_channels}
        else:
            found[name] = {key.removeprefix("bad_by_"): value
                           for key, value in outcome.get_bads(as_dict=True).items()
                           if value and key != "bad_all"}
    times = interleaved_times(runs, rounds=max(1, args.rounds))
    memory = {name: peak_traced_mb(function) for name, function in runs.items()}

    print(f"\n{'':38} {'median s':>9} {'min s':>8} {'peak MB':>8}")
    for name in runs:
        print(f"{name:38} {np.median(times[name]):9.2f} {min(times[name]):8.2f} "
              f"{memory[name]:8.0f}")
    print(f"process peak resident memory: "
          f"{resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024:.0f} MB")
    prep = "pyprep find_all_bads(ransac=False)"
    print(f"\nratios, median of {len(times[prep])} interleaved rounds:")
    print(f"without predictability / pyprep ransac=False: "
          f"{median_ratio(times, 'run_qc without predictability', prep):.2f} (goal <= 1.5)")
    print(f"with predictability / pyprep ransac=False:    "
          f"{median_ratio(times, 'run_qc with predictability', prep):.2f} (goal <= 1.0)")
    if "pyprep find_all_bads(ransac=True)" in times:
        print(f"with predictability / pyprep ransac=True:     "
              f"{median_ratio(times, 'run_qc with predictability', 'pyprep find_all_bads(ransac=True)'):.2f} "  # noqa: E501
              "(goal <= 1.0)")
    print("\nchannels found:")
    for name, channels in found.items():
        print(f"  {name}: {channels}")


if __name__ == "__main__":
    main()
