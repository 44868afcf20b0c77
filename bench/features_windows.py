"""Complexity-feature benchmark: time per window against antropy and mne-features.

On the same seeded windows (``--windows`` of each of ``--lengths`` samples; white noise by
default, ``--kind filtered`` for noise band-passed 1-40 Hz at 256 Hz) times, after warming
every function up (numba compile excluded), every implementation of a feature in turn for
``--rounds`` rounds (A, B, C, A, B, C, ...; median times shown):

* approximate entropy: ours vs antropy 0.2.3 ``app_entropy`` vs mne-features 0.3.2
  ``compute_app_entropy``;
* sample entropy: ours vs antropy ``sample_entropy``;
* Hurst exponent: ours vs mne-features ``compute_hurst_exp``;
* DFA exponent: ours vs antropy ``detrended_fluctuation`` (goal: match, >= 1);
* Hjorth mobility and complexity: ours (both feature functions on one window batch, as the
  extractor calls them) vs antropy ``hjorth_params`` on the same array (goal: match, >= 1).

Ours is called once on all windows (as a feature function does), antropy once per window
(its API is 1-D), mne-features once on the (windows, samples) array (it loops inside); ours
one window per call is shown too. Values are checked against every reference (max abs
difference; mne-features' entropies take their tolerance from the ddof=1 SD, so ours is given
r = 0.2 x sqrt(n / (n - 1)) for that comparison). Prints a table, the ratio fastest reference
/ ours per feature and length (the median over rounds of each round's ratio, so that both
sides of a ratio ran under the same load) with its goal (>= 5 for the entropies, >= 3 for
Hurst, >= 1 for DFA and Hjorth), and the
numba compile and cache-load times, measured in fresh processes with an empty cache
directory. Run:  .venv/bin/python bench/features_windows.py [--windows 200] [--json]
"""

import argparse
import json
import os
import subprocess
import sys
import tempfile
import time
import warnings
from pathlib import Path

import numpy as np

REPO = Path(__file__).resolve().parents[1]
if str(REPO) not in sys.path:
    sys.path.insert(0, str(REPO))

GOALS = {"approximate_entropy": 5.0, "sample_entropy": 5.0, "hurst_exponent": 3.0,
         "dfa_exponent": 1.0, "hjorth": 1.0}

# First use in a fresh process: import, then each function on a 4 x 64 array.
COMPILE_CHILD = r"""
import json, sys, time
import numpy as np
t0 = time.perf_counter()
from cairn_science.features import complexity as c
times = {"import": time.perf_counter() - t0}
x = np.random.default_rng(0).standard_normal((4, 64))
for name in ("approximate_entropy", "sample_entropy", "hurst_exponent", "dfa_exponent"):
    t0 = time.perf_counter()
    getattr(c, name)(x)
    times[name] = time.perf_counter() - t0
print(json.dumps(times))
"""


def make_windows(*, n_windows, n_samples, kind, seed):
    rng = np.random.default_rng(seed)
    if kind == "noise":
        return rng.standard_normal((n_windows, n_samples))
    from scipy import signal

    sos = signal.butter(4, [1.0, 40.0], btype="bandpass", fs=256.0, output="sos")
    x = signal.sosfiltfilt(sos, rng.standard_normal((n_windows, n_samples + 512)), axis=1)
    return np.ascontiguousarray(x[:, 256:-256])


def interleaved_times(functions, *, rounds):
    """Seconds per call of each function, ``rounds`` rounds of each one in turn."""
    times = {name: [] for name in functions}
    for _ in range(rounds):
        for name, function in functions.items():
            start = time.perf_counter()
            function()
            times[name].append(time.perf_counter() - start)
    return times


def first_use_times():
    """(cold, cached): first-use seconds in a fresh process with an empty numba cache
    directory, then in another fresh process reading that cache."""
    with tempfile.TemporaryDirectory(prefix="cairn-numba-") as cache_dir:
        env = {**os.environ, "NUMBA_CACHE_DIR": cache_dir, "PYTHONPATH": str(REPO)}
        runs = []
        for _ in range(2):
            out = subprocess.run([sys.executable, "-c", COMPILE_CHILD], cwd=REPO, env=env,
                                 check=True, capture_output=True, text=True)
            runs.append(json.loads(out.stdout.strip().splitlines()[-1]))
    return runs[0], runs[1]


def hjorth_ours(x):
    """Mobility then complexity of each window, as the feature extractor computes them:
    both feature functions on one batch (one channel per window here)."""
    from cairn_science.features import timedomain
    from cairn_science.features.batch import WindowBatch

    batch = WindowBatch(x[:, None, :], sfreq_hz=256.0, ch_names=["x"], bands=[])
    return np.concatenate([timedomain.hjorth_mobility(batch)[:, 0],
                           timedomain.hjorth_complexity(batch)[:, 0]])


def candidates(x):
    """{feature: {implementation: callable returning one value per window}}."""
    import antropy
    from mne_features.univariate import compute_app_entropy, compute_hurst_exp

    from cairn_science.features import complexity as ours

    n = x.shape[1]
    rows = [np.ascontiguousarray(row) for row in x]
    r_ddof1 = 0.2 * np.sqrt(n / (n - 1))

    def per_row(function, **kwargs):
        return lambda: np.array([function(row, **kwargs) for row in rows])

    def ours_per_row(function, **kwargs):
        return lambda: np.concatenate([function(row[None], **kwargs) for row in rows])

    return {
        "approximate_entropy": {
            "ours": lambda: ours.approximate_entropy(x),
            "ours, 1 window/call": ours_per_row(ours.approximate_entropy),
            "antropy": per_row(antropy.app_entropy),
            "mne_features": lambda: compute_app_entropy(x),
        },
        "sample_entropy": {
            "ours": lambda: ours.sample_entropy(x),
            "ours, 1 window/call": ours_per_row(ours.sample_entropy),
            "antropy": per_row(antropy.sample_entropy),
        },
        "hurst_exponent": {
            "ours": lambda: ours.hurst_exponent(x),
            "ours, 1 window/call": ours_per_row(ours.hurst_exponent),
            "mne_features": lambda: compute_hurst_exp(x),
        },
        "dfa_exponent": {
            "ours": lambda: ours.dfa_exponent(x),
            "ours, 1 window/call": ours_per_row(ours.dfa_exponent),
            "antropy": per_row(antropy.detrended_fluctuation),
        },
        "hjorth": {
            "ours": lambda: hjorth_ours(x),
            "antropy": lambda: np.concatenate(antropy.hjorth_params(x)),
        },
    }, {
        # the reference's definition where it differs from ours (mne-features' ddof=1 SD)
        ("approximate_entropy", "mne_features"): lambda: ours.approximate_entropy(x, r=r_ddof1),
    }


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--windows", type=int, default=200)
    parser.add_argument("--lengths", type=int, nargs="+", default=[500, 1024])
    parser.add_argument("--kind", choices=("noise", "filtered"), default="noise")
    parser.add_argument("--rounds", type=int, default=3)
    parser.add_argument("--seed", type=int, default=5)
    parser.add_argument("--no-compile", action="store_true",
                        help="skip the fresh-process compile and cache-load timing")
    parser.add_argument("--json", action="store_true", help="also print the results as JSON")
    args = parser.parse_args(argv)
    warnings.filterwarnings("ignore")

    results = {"windows": args.windows, "kind": args.kind, "features": []}
    if not args.no_compile:
        cold, cached = first_use_times()
        results["first_use_s"] = {"empty_cache": cold, "cached": cached}
    print(f"{args.windows} {args.kind} windows per length; ms per window, median of "
          f"{args.rounds} interleaved rounds; max |ours - reference| in the last column\n")
    print(f"{'feature':20} {'n':>5} {'implementation':22} {'ms/window':>10} {'max |diff|':>11}")
    ratios = []
    for n_samples in args.lengths:
        x = make_windows(n_windows=args.windows, n_samples=n_samples, kind=args.kind,
                         seed=args.seed + n_samples)
        table, ours_as_reference = candidates(x)
        for feature, implementations in table.items():
            ours_values = implementations["ours"]()
            diffs = {}
            for name, function in implementations.items():
                values = function()  # warm-up (compiles ours on the first length) + check
                comparable = ours_as_reference.get((feature, name))
                reference_values = ours_values if comparable is None else comparable()
                diffs[name] = float(np.nanmax(np.abs(values - reference_values)))
            rounds = interleaved_times(implementations, rounds=max(1, args.rounds))
            times = {name: float(np.median(t)) / args.windows * 1e3
                     for name, t in rounds.items()}
            for name in implementations:
                diff = diffs[name]
                label = "" if name.startswith("ours") else f"{diff:11.1e}"
                print(f"{feature:20} {n_samples:5d} {name:22} {times[name]:10.4f} {label}")
                results["features"].append({"feature": feature, "n_samples": n_samples,
                                            "implementation": name,
                                            "ms_per_window": times[name],
                                            "max_abs_diff": None if name.startswith("ours")
                                            else diff})
            references = {k: v for k, v in times.items() if not k.startswith("ours")}
            fastest = min(references, key=references.get)
            ratio = float(np.median([r / o for r, o in zip(rounds[fastest], rounds["ours"],
                                                            strict=True)]))
            ratios.append((feature, n_samples, fastest, ratio))

    print(f"\n{'feature':20} {'n':>5} {'fastest reference':18} {'ratio':>7} {'goal':>6}  met")
    results["ratios"] = []
    for feature, n_samples, fastest, ratio in ratios:
        goal = GOALS.get(feature)
        met = None if goal is None else bool(ratio >= goal)
        goal_text = "-" if goal is None else f">= {goal:g}"
        met_text = "-" if met is None else ("yes" if met else "NO")
        print(f"{feature:20} {n_samples:5d} {fastest:18} {ratio:7.1f} {goal_text:>6}  {met_text}")
        results["ratios"].append({"feature": feature, "n_samples": n_samples,
                                  "fastest_reference": fastest, "ratio": ratio,
                                  "goal": goal, "met": met})
    if not args.no_compile:
        print("\nfirst use in a fresh process, 4 x 64 array (s): "
              "empty numba cache / cache present")
        for name in cold:
            print(f"  {name:20} {cold[name]:7.3f} / {cached[name]:.3f}")
    if args.json:
        print(json.dumps(results))


if __name__ == "__main__":
    main()
