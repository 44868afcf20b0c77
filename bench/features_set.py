"""Feature-set benchmark: the whole demo consortium's features with 1 and with 2 worker
processes, each single-threaded, in one run.

Each task is what a ``features.recording`` job does after it has the files: read the
recording with mne-bids, prepare it (band-pass, resample, interpolate, re-reference), cut
4 s windows and compute every registered feature. Bad channels and segments come from the
demo's answer key (standing in for the quality checks). Processes are started and warmed
up (imports, numba's cached kernels) before the clock starts, as long-running workers are;
the warm-up time is printed too.

The 1- and 2-process runs are measured interleaved (1, 2, 1, 2, ...; ``--rounds`` rounds,
default 3). Prints median wall times, recordings per second and the speed-up ratio (the
median of the per-round ratios; goal: >= 1.8 with 2 processes).
Run:  .venv/bin/python bench/features_set.py [--scale full] [--rounds 3] [--json]
"""

import argparse
import json
import os
import sys
import tempfile
import time
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path

REPO = Path(__file__).resolve().parents[1]
if str(REPO) not in sys.path:
    sys.path.insert(0, str(REPO))

from cairn_science.runtime import THREAD_VARIABLES  # noqa: E402

#: Common practice, no source: the study's default bands inside 0.5–40 Hz.
BANDS = [{"name": "delta", "l_freq_hz": 0.5, "h_freq_hz": 4.0},
         {"name": "theta", "l_freq_hz": 4.0, "h_freq_hz": 8.0},
         {"name": "alpha", "l_freq_hz": 8.0, "h_freq_hz": 13.0},
         {"name": "beta", "l_freq_hz": 13.0, "h_freq_hz": 30.0},
         {"name": "gamma", "l_freq_hz": 30.0, "h_freq_hz": 40.0}]


def _init_worker():
    from cairn_science.runtime import limit_numeric_threads

    limit_numeric_threads(1)


def warm_up(_):
    """Load everything a worker loads and compile (or load cached) kernels on a tiny input."""
    import numpy as np

    from cairn_science.features import FeatureRequest, compute_features

    request = FeatureRequest.from_dict({"bands": BANDS})
    data = np.random.default_rng(0).standard_normal((2, 1000)) * 1e-5
    compute_features(data, sfreq_hz=125.0, ch_names=["Fz", "Pz"], starts=[0, 500],
                     window_samples=500, request=request)
    import mne_bids  # noqa: F401

    return os.getpid()


def read_part(task):
    """What a features.recording job computes once it has the files: the recording's part."""
    import warnings

    import mne
    import mne_bids

    from cairn_science.features.pipeline import recording_part

    path, inputs, params = task
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        raw = mne_bids.read_raw_bids(mne_bids.get_bids_path_from_fname(path), verbose="ERROR")
        raw.load_data(verbose="ERROR")
    picks = mne.pick_types(raw.info, eeg=True, exclude=[])
    return recording_part(raw.get_data(picks=picks), sfreq_hz=raw.info["sfreq"],
                          ch_names=[raw.ch_names[i] for i in picks], inputs=inputs,
                          params=params)


def one_recording(task):
    part = read_part(task)
    return part.window_start_s.size, part.values.shape[1]


def tasks_for(manifest):
    key = json.loads(manifest.answer_key.read_text(encoding="utf-8"))
    sites = {s["slug"]: s for s in key["sites"]}
    recordings = key["recordings"]
    names = None
    import mne_bids

    for record in recordings:
        path = manifest.out_dir / record["bids_root"] / record["path"]
        header = mne_bids.read_raw_bids(mne_bids.get_bids_path_from_fname(path),
                                        verbose="ERROR")
        channels = [c for c, t in zip(header.ch_names, header.get_channel_types(), strict=True)
                    if t == "eeg"]
        names = channels if names is None else [c for c in names if c in set(channels)]
    params = {"preprocessing": {"l_freq_hz": 0.5, "h_freq_hz": 40.0, "notch": True,
                                "analysis_sfreq_hz": min(s["sfreq_hz"] for s in sites.values()),
                                "channels": names, "bad_channels": "interpolate",
                                "reference": "average", "window_s": 4.0, "overlap": 0.5},
              "features": {"bands": BANDS}}
    tasks = []
    for record in recordings:
        inputs = {"bad_channels": [f["name"] for f in record["faulty_channels"]],
                  "bad_segments": [[s["onset_s"], s["duration_s"]]
                                   for s in record["bad_segments"]],
                  "blocks": [], "power_line_hz": sites[record["site"]]["power_line_hz"]}
        tasks.append((str(manifest.out_dir / record["bids_root"] / record["path"]), inputs,
                      params))
    return tasks, names


def timed(tasks, processes):
    with ProcessPoolExecutor(max_workers=processes, initializer=_init_worker) as pool:
        start = time.perf_counter()
        pids = set(pool.map(warm_up, range(processes * 4)))
        warm_s = time.perf_counter() - start
        start = time.perf_counter()
        results = list(pool.map(one_recording, tasks, chunksize=1))
        wall_s = time.perf_counter() - start
    return {"processes": processes, "warm_up_s": round(warm_s, 2), "wall_s": round(wall_s, 2),
            "recordings_per_s": round(len(tasks) / wall_s, 2),
            "windows": sum(r[0] for r in results), "columns": results[0][1] if results else 0,
            "pids": len(pids)}


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--scale", default="full", choices=["small", "full"])
    parser.add_argument("--json", action="store_true")
    parser.add_argument("--rounds", type=int, default=3)
    args = parser.parse_args()
    for name in THREAD_VARIABLES:  # children inherit one thread per numeric pool
        os.environ[name] = "1"
    import statistics

    from fixtures.demo import generate

    runs = {1: [], 2: []}
    with tempfile.TemporaryDirectory(prefix="cairn-bench-features-") as tmp:
        manifest = generate(Path(tmp) / "demo", scale=args.scale, seed=7)
        tasks, channels = tasks_for(manifest)
        for _ in range(max(1, args.rounds)):
            for processes in (1, 2):
                runs[processes].append(timed(tasks, processes))

    def median_run(rows):
        middle = statistics.median(row["wall_s"] for row in rows)
        return min(rows, key=lambda row: abs(row["wall_s"] - middle))

    one, two = median_run(runs[1]), median_run(runs[2])
    ratio = statistics.median(a["wall_s"] / b["wall_s"]
                              for a, b in zip(runs[1], runs[2], strict=True))
    report = {"recordings": len(tasks), "common_channels": len(channels), "one": one,
              "two": two, "speed_up": round(ratio, 2), "goal": 1.8, "met": ratio >= 1.8,
              "cpu_count": os.cpu_count()}
    if args.json:
        print(json.dumps(report, indent=2))
        return
    print(f"demo consortium ({args.scale}): {len(tasks)} recordings, {len(channels)} common "
          f"channels, {one['windows']} windows × {one['columns']} feature columns")
    print(f"| processes | warm-up (s) | median wall (s) of {len(runs[1])} interleaved rounds | "
          "recordings/s |")
    print("|---|---|---|---|")
    for row in (one, two):
        print(f"| {row['processes']} | {row['warm_up_s']} | {row['wall_s']} | "
              f"{row['recordings_per_s']} |")
    print(f"speed-up with 2 processes: {ratio:.2f}× (goal ≥ 1.8: "
          f"{'met' if ratio >= 1.8 else 'missed'}; machine has {os.cpu_count()} cores)")


if __name__ == "__main__":
    main()
