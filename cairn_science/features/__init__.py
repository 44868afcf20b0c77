"""Windowed EEG features: a registry of feature functions in families, computed in batches.

Pure numpy/scipy/numba, no Django. :func:`cairn_science.features.extract.compute_features` turns
one prepared recording's windows into a table; each family module
(:mod:`.spectral`, :mod:`.timedomain`, :mod:`.distribution`, :mod:`.complexity`,
:mod:`.indices`) lists its features in ``FEATURES``.
"""

from ..versions import FEATURES_CODE_VERSION as CODE_VERSION
from .extract import FeatureRequest, compute_features, describe_columns
from .registry import Band, Feature, get_feature, registry

__all__ = ["CODE_VERSION", "Band", "Feature", "FeatureRequest", "compute_features",
           "describe_columns", "get_feature", "registry"]
