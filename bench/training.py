"""Training benchmark: a full comparison run on the demo consortium's features, with 1 and 2
single-threaded worker processes, against the same grid as a plain scikit-learn loop in one
process, all in one run.

The grid: bagging and stacking × three learners (lda, logistic, knn) and one mixed
composition (stacking only) × 5, 10 and 25 members, plus each learner alone, on 5 folds
grouped by participant; label: workload level. Features: relative band power of the common
channels (the bench computes them first, with 2 processes, from the full-scale demo).

Ours: each (model, fold) is one task as a ``training.fold`` job runs it (fit inside the
outer training part, predict, score overall and per site). Plain: scikit-learn's
``BaggingClassifier`` and ``StackingClassifier`` (inner splits grouped by participant, as a
precomputed list) in the same pipeline, fitted and scored with ``balanced_accuracy_score``.
The three runs are measured interleaved in one run (plain, ours with 1 process, ours with 2,
then again; ``--rounds`` rounds, default 3). Prints median wall times, our overhead against
plain (goal ≤ 10%) and the 2-process speed-up (goal ≥ 1.8), each the median of the per-round
ratios, so that both sides of a ratio ran under the same load. Run:
.venv/bin/python bench/training.py [--scale full] [--rounds 3] [--json]
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

GRID = {"strategies": ["bagging", "stacking"], "learners": ["lda", "logistic", "knn"],
        "mixed": [["lda", "logistic", "knn"]], "members": [5, 10, 25]}
_STATE = {}


def _init(frame_path, spec_dict):
    from cairn_science.runtime import limit_numeric_threads

    limit_numeric_threads(1)
    import pandas as pd

    from cairn_science.learning.run import folds_for, prepare_data
    from cairn_science.learning.spec import TrainingSpec

    spec = TrainingSpec.from_dict(spec_dict)
    data = prepare_data(pd.read_parquet(frame_path), spec)
    _STATE.update(spec=spec, data=data, folds=folds_for(spec, data))


def ours(task):
    from cairn_science.learning.run import fold_result

    name, index = task
    spec, data, folds = _STATE["spec"], _STATE["data"], _STATE["folds"]
    model = next(m for m in spec.models if m.name == name)
    return fold_result(model, data, folds[index], seed=spec.seed)["scores"]["balanced_accuracy"]


def plain_estimator(model, inner_cv, seed):
    from sklearn.ensemble import BaggingClassifier, StackingClassifier
    from sklearn.impute import SimpleImputer
    from sklearn.pipeline import Pipeline
    from sklearn.preprocessing import StandardScaler

    from cairn_science.learning.learners import make_learner

    if model.ensemble is None:
        core = make_learner(model.learner, random_state=seed)
    elif model.ensemble == "bagging":
        core = BaggingClassifier(make_learner(model.learner, random_state=seed),
                                 n_estimators=model.n_members, random_state=seed)
    else:
        core = StackingClassifier(
            [(f"{n}-{i}", make_learner(n, random_state=seed + i))
             for i, n in enumerate(model.members)],
            final_estimator=make_learner(model.meta, random_state=seed), cv=inner_cv)
    return Pipeline([("impute", SimpleImputer(strategy="median", keep_empty_features=True)),
                     ("scale", StandardScaler()), ("model", core)])


def plain(tasks):
    from sklearn.metrics import balanced_accuracy_score

    from cairn_science.learning.validation import inner_splits

    spec, data, folds = _STATE["spec"], _STATE["data"], _STATE["folds"]
    out = []
    for name, index in tasks:
        model = next(m for m in spec.models if m.name == name)
        fold = folds[index]
        inner = inner_splits(data.y[fold.train], data.participants[fold.train], n_splits=5,
                             seed=spec.seed)
        estimator = plain_estimator(model, inner, spec.seed)
        estimator.fit(data.X[fold.train], data.y[fold.train])
        out.append(balanced_accuracy_score(data.y[fold.test],
                                           estimator.predict(data.X[fold.test])))
    return out


def demo_table(scale, out_dir):
    import numpy as np
    import pandas as pd

    from bench.features_set import BANDS, tasks_for  # the same recordings and parameters
    from fixtures.demo import generate

    manifest = generate(Path(out_dir) / "demo", scale=scale, seed=7)
    tasks, _ = tasks_for(manifest)
    key = json.loads(manifest.answer_key.read_text(encoding="utf-8"))
    for task in tasks:
        task[2]["features"] = {"bands": BANDS, "features": ["relative_power"]}
    with ProcessPoolExecutor(max_workers=2) as pool:
        parts = list(pool.map(_part, tasks))
    frames = []
    for record, (columns, starts, values) in zip(key["recordings"], parts, strict=True):
        frame = pd.DataFrame(values, columns=columns)
        level = record["rating_band"] if record["task"] != "rest" else None
        head = pd.DataFrame({
            "site": record["site"], "participant": record["participant_id"], "session": "",
            "task": record["task"], "run": str(record.get("run") or ""),
            "window_start_s": starts, "rating": record.get("workload_rating"),
            "level": level, "condition": record["difficulty"] if level else "rest",
            "recording": record["path"], "acquisition": "", "block_onset_s": 0.0,
            "qc_verdict": "pass"}, index=np.arange(len(starts)))
        frames.append(pd.concat([head, frame], axis=1))
    table = pd.concat(frames, ignore_index=True)
    path = Path(out_dir) / "table.parquet"
    table.to_parquet(path)
    return path, len(table), len(table.columns)


def _part(task):
    from bench.features_set import _init_worker, read_part

    _init_worker()
    part = read_part(task)
    return [c["name"] for c in part.columns], part.window_start_s, part.values


def timed_ours(frame_path, spec_dict, tasks, processes):
    with ProcessPoolExecutor(max_workers=processes, initializer=_init,
                             initargs=(str(frame_path), spec_dict)) as pool:
        list(pool.map(_noop, range(processes * 2)))  # start and load before the clock
        start = time.perf_counter()
        scores = list(pool.map(ours, tasks, chunksize=1))
        return time.perf_counter() - start, scores


def _noop(_):
    return os.getpid()


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--scale", default="full", choices=["small", "full"])
    parser.add_argument("--json", action="store_true")
    parser.add_argument("--rounds", type=int, default=3)
    args = parser.parse_args()
    for name in THREAD_VARIABLES:
        os.environ[name] = "1"
    from cairn_science.learning.spec import TrainingSpec

    spec_dict = {"feature_set": 0, "label": {"kind": "level"},
                 "validation": {"scheme": "grouped_kfold", "n_splits": 5},
                 "comparison": GRID, "seed": 0}
    spec = TrainingSpec.from_dict(spec_dict)
    tasks = [(m.name, f) for m in spec.models for f in range(5)]
    times = {"plain": [], "one": [], "two": []}
    with tempfile.TemporaryDirectory(prefix="cairn-bench-training-") as tmp:
        frame_path, n_rows, n_columns = demo_table(args.scale, tmp)
        _init(str(frame_path), spec_dict)
        for _ in range(max(1, args.rounds)):
            start = time.perf_counter()
            plain_scores = plain(tasks)
            times["plain"].append(time.perf_counter() - start)
            one_s, _ = timed_ours(frame_path, spec_dict, tasks, 1)
            times["one"].append(one_s)
            two_s, our_scores = timed_ours(frame_path, spec_dict, tasks, 2)
            times["two"].append(two_s)
    import numpy as np

    plain_s, one_s, two_s = (float(np.median(times[k])) for k in ("plain", "one", "two"))
    overhead = float(np.median([o / p for o, p in zip(times["one"], times["plain"],
                                                       strict=True)])) - 1
    speed_up = float(np.median([o / t for o, t in zip(times["one"], times["two"],
                                                       strict=True)]))
    report = {"rows": n_rows, "columns": n_columns, "models": len(spec.models),
              "fold_tasks": len(tasks), "plain_s": round(plain_s, 1),
              "ours_1_s": round(one_s, 1), "ours_2_s": round(two_s, 1),
              "overhead": round(overhead, 3), "speed_up": round(speed_up, 2),
              "rounds": len(times["plain"]),
              "mean_balanced_accuracy": {"plain": round(float(np.mean(plain_scores)), 3),
                                         "ours": round(float(np.mean(our_scores)), 3)},
              "cpu_count": os.cpu_count()}
    if args.json:
        print(json.dumps(report, indent=2))
        return
    print(f"demo ({args.scale}): {n_rows} windows, {len(spec.models)} models × 5 grouped "
          f"folds = {len(tasks)} fits")
    print(f"| run | median wall (s) of {report['rounds']} interleaved rounds |\n|---|---|")
    print(f"| plain scikit-learn loop, 1 process | {report['plain_s']} |")
    print(f"| ours, 1 worker process | {report['ours_1_s']} |")
    print(f"| ours, 2 worker processes | {report['ours_2_s']} |")
    print(f"overhead against plain: {100 * report['overhead']:+.1f}% (goal ≤ +10%); speed-up "
          f"with 2 processes: {report['speed_up']:.2f}× (goal ≥ 1.8)")
    print(f"mean fold balanced accuracy: plain {report['mean_balanced_accuracy']['plain']}, "
          f"ours {report['mean_balanced_accuracy']['ours']} (bagging draws differ: ours by "
          "participant)")


if __name__ == "__main__":
    main()
