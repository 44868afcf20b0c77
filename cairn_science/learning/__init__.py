"""Training and evaluating workload classifiers on feature tables, grouped by participant.

Pure scikit-learn and numpy, no Django: :mod:`.learners` (the single learners),
:mod:`.ensembles` (bagging and stacking that respect participants), :mod:`.validation`
(outer and inner splits), :mod:`.metrics` (scores and statistics), :mod:`.spec` (a training
request as data) and :mod:`.run` (evaluating a request on a table).
"""

from ..versions import LEARNING_CODE_VERSION as CODE_VERSION

__all__ = ["CODE_VERSION"]
