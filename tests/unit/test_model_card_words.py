"""A release's model card names what the model predicts and which recordings it used in
words, not codes ("Label: level" before). Invented plumbing inputs: common practice, no
source."""

import numpy as np
from sklearn.linear_model import LogisticRegression

from cairn_science.release import model_card


def test_the_card_writes_label_kind_and_verdicts_in_words():
    rng = np.random.default_rng(0)
    estimator = LogisticRegression().fit(rng.normal(size=(20, 3)), [0, 1] * 10)
    training = {"labels": ["low", "high"], "sites": ["a", "b"], "participants": 6,
                "windows": 20, "qc_verdicts": ["pass", "review"],
                "label": {"kind": "level", "map": None}, "feature_set": 1, "training_run": 2}
    scores = {"evaluation": "pooled", "scheme": {"scheme": "grouped_kfold", "n_splits": 5},
              "per_fold": {m: {"mean": 0.6, "sd": 0.1, "n": 5} for m in
                           ("balanced_accuracy", "accuracy", "macro_f1", "kappa")},
              "pooled": {"balanced_accuracy": 0.6}, "ci": {"low": 0.5, "high": 0.7},
              "chance": {"balanced_accuracy": 0.5}, "per_site": {}}
    card = model_card(estimator, name="lda", kind="pooled", training=training, scores=scores,
                      caution="Research use only.", trusted=[])
    assert "Label: workload level (from the ratings)" in card
    assert "quality verdicts usable, needs a look" in card
    assert "Validation: k folds grouped by participant, 5 folds" in card
    assert "Label: level" not in card and "verdicts pass" not in card
    assert "grouped_kfold" not in card
