"""Recurrent learners benchmark: the fit time of each recurrent learner (GRU, LSTM,
bidirectional GRU and LSTM, default sizes) against logistic regression on the same
participant-grouped folds, the process's peak memory, and the wall time of the grid of the
4 recurrent learners x 5 folds (fit, predict and score, as a training.fold job runs each) with
1 and 2 single-threaded worker processes. Features: relative band power of the demo
consortium (the small scale by default), label: workload level.

Fit times are measured interleaved on each fold (logistic, learner, logistic, learner, ...),
3 rounds; the ratio printed is the median of the learner's times over the median of
logistic regression's, both from this run. Peak memory is the maximum resident set size of
the process (getrusage): after the logistic fits alone, and after every recurrent fit.

With ``--compare``: instead, accuracy and balanced accuracy (mean ± SD over folds) of the
recurrent learners and of feature learners (lda, logistic, random_forest, mlp) on the same
participant-grouped folds (5 folds × 2 repeats), 2 worker processes, and the corrected
resampled paired t-test (Nadeau & Bengio; cairn_science.learning.metrics.paired_comparison,
Holm-adjusted over all pairs) of each recurrent learner against each feature learner.

Run:  .venv/bin/python bench/recurrent.py [--scale small|full] [--table file.parquet]
      [--rounds 3] [--compare] [--json]
"""

import argparse
import json
import os
import resource
import statistics
import sys
import tempfile
import time
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path

REPO = Path(__file__).resolve().parents[1]
if str(REPO) not in sys.path:
    sys.path.insert(0, str(REPO))

from cairn_science.runtime import THREAD_VARIABLES  # noqa: E402

RECURRENT = ("gru", "lstm", "bigru", "bilstm")
FEATURE_LEARNERS = ("lda", "logistic", "random_forest", "mlp")
_STATE = {}


def _spec_dict(compare=False):
    if compare:
        return {"feature_set": 0, "label": {"kind": "level"},
                "validation": {"scheme": "grouped_kfold", "n_splits": 5, "n_repeats": 2},
                "models": [{"learner": n} for n in (*FEATURE_LEARNERS, *RECURRENT)],
                "seed": 0}
    return {"feature_set": 0, "label": {"kind": "level"},
            "validation": {"scheme": "grouped_kfold", "n_splits": 5},
            "models": [{"learner": "logistic"}, *({"learner": n} for n in RECURRENT)],
            "seed": 0}


def _init(frame_path, compare=False):
    os.environ["CAIRN_WORKER_THREADS"] = "1"
    from cairn_science.runtime import limit_numeric_threads

    limit_numeric_threads(1)
    import pandas as pd

    from cairn_science.learning.run import folds_for, prepare_data
    from cairn_science.learning.spec import TrainingSpec

    spec = TrainingSpec.from_dict(_spec_dict(compare))
    data = prepare_data(pd.read_parquet(frame_path), spec)
    _STATE.update(spec=spec, data=data, folds=folds_for(spec, data))


def _model(name):
    return next(m for m in _STATE["spec"].models if m.name == name)


def fit_seconds(name, index):
    """Seconds to fit model ``name`` on fold ``index``'s training rows (inputs prepared
    before the clock starts)."""
    from cairn_science.learning.run import build_estimator, fold_matrix, model_inputs

    data, fold = _STATE["data"], _STATE["folds"][index]
    model = _model(name)
    X = model_inputs(model, data, fold_matrix(data, fold))
    estimator = build_estimator(model, seed=_STATE["spec"].seed)
    start = time.perf_counter()
    estimator.fit(X[fold.train], data.y[fold.train])
    return time.perf_counter() - start


def fold_task(task):
    """One (model, fold) as a training.fold job runs it; its balanced accuracy."""
    return fold_scores(task)["balanced_accuracy"]


def fold_scores(task):
    from cairn_science.learning.run import fold_result

    name, index = task
    fold = _STATE["folds"][index]
    result = fold_result(_model(name), _STATE["data"], fold, seed=_STATE["spec"].seed)
    return {**result["scores"], "n_train": int(fold.train.size), "n_test": int(fold.test.size)}


def compare(frame_path, as_json):
    """Recurrent against feature learners on the same folds, with the corrected paired
    test; prints a table and the comparisons."""
    import numpy as np

    from cairn_science.learning.metrics import holm, paired_comparison

    _init(frame_path, compare=True)
    names = (*FEATURE_LEARNERS, *RECURRENT)
    n_folds = len(_STATE["folds"])
    tasks = [(name, index) for name in names for index in range(n_folds)]
    start = time.perf_counter()
    with ProcessPoolExecutor(max_workers=2, initializer=_init,
                             initargs=(str(frame_path), True)) as pool:
        results = list(pool.map(fold_scores, tasks, chunksize=1))
    wall = time.perf_counter() - start
    by_model = {name: [r for (n, _), r in zip(tasks, results, strict=True) if n == name]
                for name in names}
    n_train = float(np.mean([r["n_train"] for r in by_model[names[0]]]))
    n_test = float(np.mean([r["n_test"] for r in by_model[names[0]]]))
    summary = {name: {metric: {"mean": float(np.mean([r[metric] for r in rows])),
                               "sd": float(np.std([r[metric] for r in rows], ddof=1))}
                      for metric in ("accuracy", "balanced_accuracy")}
               for name, rows in by_model.items()}
    pairs = []
    for learner in RECURRENT:
        for other in FEATURE_LEARNERS:
            test = paired_comparison([r["balanced_accuracy"] for r in by_model[learner]],
                                     [r["balanced_accuracy"] for r in by_model[other]],
                                     n_train=n_train, n_test=n_test)
            pairs.append({"recurrent": learner, "feature": other,
                          "mean_difference": test["mean_difference"], "t": test["t"],
                          "p_value": test["p_value"], "n_folds": test["n_folds"]})
    for item, adjusted in zip(pairs, holm([p["p_value"] for p in pairs]), strict=True):
        item["p_holm"] = adjusted
    data = _STATE["data"]
    report = {"windows": int(data.y.size), "participants": int(len(set(data.participants))),
              "classes": list(data.labels), "folds": n_folds, "wall_s": round(wall, 1),
              "load_average": [round(v, 2) for v in os.getloadavg()],
              "summary": summary, "paired_balanced_accuracy": pairs}
    if as_json:
        print(json.dumps(report, indent=2))
        return
    print(f"{report['windows']} labelled windows, {report['participants']} participants, "
          f"classes {', '.join(report['classes'])}; grouped 5 folds × 2 repeats = {n_folds} "
          f"folds; {report['wall_s']} s with 2 worker processes")
    print("| learner | accuracy (mean ± SD over folds) | balanced accuracy |\n|---|---|---|")
    for name in names:
        a, b = summary[name]["accuracy"], summary[name]["balanced_accuracy"]
        print(f"| {name} | {a['mean']:.3f} ± {a['sd']:.3f} | {b['mean']:.3f} ± {b['sd']:.3f} |")
    print("corrected resampled t-test on balanced accuracy, recurrent − feature learner "
          "(Holm over all pairs):")
    print("| recurrent | feature | mean difference | t | p | p (Holm) |\n|---|---|---|---|---|---|")
    for p in pairs:
        print(f"| {p['recurrent']} | {p['feature']} | {p['mean_difference']:+.3f} | "
              f"{p['t']:.2f} | {p['p_value']:.3f} | {p['p_holm']:.3f} |")


def _noop(_):
    return os.getpid()


def grid_wall(frame_path, tasks, processes):
    with ProcessPoolExecutor(max_workers=processes, initializer=_init,
                             initargs=(str(frame_path),)) as pool:
        list(pool.map(_noop, range(processes * 2)))  # start and load before the clock
        start = time.perf_counter()
        scores = list(pool.map(fold_task, tasks, chunksize=1))
        return time.perf_counter() - start, scores


def peak_mb():
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024  # Linux: KiB


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--scale", default="small", choices=["small", "full"])
    parser.add_argument("--table", help="a feature table made before (Parquet), instead of "
                                        "computing the demo's")
    parser.add_argument("--rounds", type=int, default=3)
    parser.add_argument("--compare", action="store_true",
                        help="accuracy ± SD against feature learners, with the paired test")
    parser.add_argument("--json", action="store_true")
    args = parser.parse_args()
    for name in THREAD_VARIABLES:
        os.environ[name] = "1"
    os.environ["CAIRN_WORKER_THREADS"] = "1"
    if args.compare:
        if args.table:
            compare(Path(args.table), args.json)
            return
        from bench.training import demo_table

        with tempfile.TemporaryDirectory(prefix="cairn-bench-recurrent-") as tmp:
            compare(demo_table(args.scale, tmp)[0], args.json)
        return
    with tempfile.TemporaryDirectory(prefix="cairn-bench-recurrent-") as tmp:
        if args.table:
            frame_path = Path(args.table)
        else:
            from bench.training import demo_table

            frame_path, _, _ = demo_table(args.scale, tmp)
        _init(frame_path)
        data, folds = _STATE["data"], _STATE["folds"]
        import torch  # loaded before the clock and the memory reading

        times = {name: [] for name in ("logistic", *RECURRENT)}
        for index in range(len(folds)):  # warm-up: first calls load code
            fit_seconds("logistic", index)
        memory_before = peak_mb()
        for _ in range(args.rounds):
            for index in range(len(folds)):
                for name in RECURRENT:
                    times["logistic"].append(fit_seconds("logistic", index))
                    times[name].append(fit_seconds(name, index))
        memory_after = peak_mb()
        tasks = [(name, index) for name in RECURRENT for index in range(len(folds))]
        one_s, _ = grid_wall(frame_path, tasks, 1)
        two_s, scores = grid_wall(frame_path, tasks, 2)
    median = {name: statistics.median(values) for name, values in times.items()}
    report = {
        "windows": int(data.y.size), "participants": int(len(set(data.participants))),
        "features": len(data.columns), "folds": len(folds), "rounds": args.rounds,
        "torch": torch.__version__, "cpu_count": os.cpu_count(),
        "load_average": [round(v, 2) for v in os.getloadavg()],
        "median_fit_s": {k: round(v, 4) for k, v in median.items()},
        "ratio_to_logistic": {n: round(median[n] / median["logistic"], 1) for n in RECURRENT},
        "peak_rss_mb": {"after_logistic": round(memory_before), "after_recurrent":
                        round(memory_after)},
        "grid_4x5_s": {"1_process": round(one_s, 1), "2_processes": round(two_s, 1)},
        "grid_mean_balanced_accuracy": round(sum(scores) / len(scores), 3),
    }
    if args.json:
        print(json.dumps(report, indent=2))
        return
    print(f"demo ({args.table or args.scale}): {report['windows']} labelled windows, "
          f"{report['participants']} participants, {report['features']} features, "
          f"{report['folds']} grouped folds; torch {report['torch']}, 1 thread per process; "
          f"load average at the end {report['load_average']} on {report['cpu_count']} CPUs")
    print("| learner | median fit (s) | × logistic regression |\n|---|---|---|")
    print(f"| logistic | {report['median_fit_s']['logistic']} | 1 |")
    for name in RECURRENT:
        print(f"| {name} | {report['median_fit_s'][name]} | "
              f"{report['ratio_to_logistic'][name]} |")
    print(f"peak resident memory: {report['peak_rss_mb']['after_logistic']} MB after the "
          f"logistic fits, {report['peak_rss_mb']['after_recurrent']} MB after the recurrent "
          "fits")
    print(f"grid of 4 recurrent learners × {report['folds']} folds (fit, predict, score): "
          f"{report['grid_4x5_s']['1_process']} s with 1 worker process, "
          f"{report['grid_4x5_s']['2_processes']} s with 2 (goal: under 600 s on 2 cores); "
          f"mean balanced accuracy {report['grid_mean_balanced_accuracy']}")


if __name__ == "__main__":
    main()
