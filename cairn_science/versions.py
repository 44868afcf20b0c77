"""Code versions of the science steps, each part of every stored result's identity: bump one
when its step computes something different for the same input and settings.

Import-cheap on purpose (no numpy, scipy, mne or scikit-learn; a test checks): the web
process reads these without loading the signal libraries.
"""

#: Quality checks (:mod:`cairn_science.qc`).
QC_CODE_VERSION = "qc-2"
#: Feature extraction (:mod:`cairn_science.features`).
FEATURES_CODE_VERSION = "features-1"
#: Training and evaluation (:mod:`cairn_science.learning`).
LEARNING_CODE_VERSION = "learning-4"

__all__ = ["FEATURES_CODE_VERSION", "LEARNING_CODE_VERSION", "QC_CODE_VERSION"]
