"""The demo consortium's names and its first training run, shared by ``load_demo`` (which sets
the consortium up and leaves markers asking for a feature set and a training run) and
``serve_demo`` (which acts on the markers once the checks are done)."""

STUDY_SLUG = "rail-workload"
STUDY_NAME = "Signalling control-room workload under timetable disruption"

FEATURES_MARKER = "features-wanted"
TRAINING_MARKER = "training-wanted"
#: The demo's first comparison run: low against high workload, participants held out.
DEMO_SPEC = {
    "label": {"kind": "level", "classes": ["low", "high"]},
    "features": {"include": ["*.relative_power.*", "engagement_index.*"]},
    "normalisation": {"participant": "mean"},
    "validation": {"scheme": "grouped_kfold", "n_splits": 5},
    "comparison": {"strategies": ["bagging", "stacking"], "learners": ["lda", "logistic"],
                   "members": [5, 10]},
    "statistics": {"paired_test": True, "permutations": 20},
    "release": {"pooled": True, "per_site": True},
    "seed": 0,
}
