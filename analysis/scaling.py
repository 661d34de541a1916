"""Standardizing that never lets a feature explode on rows the model did not see.

A feature standardized on the training rows can take values far outside anything seen in
training on a test row (a matrix column whose cells differ in shape, padded with zeros, is
the usual culprit); a linear model then predicts absurd values there (R^2 of -1e22 was seen).
:class:`TrainingRangeScaler` first clips each feature to its range on the training rows, then
standardizes as scikit-learn's StandardScaler does. On the training rows themselves it is the
same as StandardScaler, so fitted coefficients, and equations read off them, are unchanged.

This module imports scikit-learn when it is imported; the separator imports it when it fits.
"""

from __future__ import annotations

import numpy as np
from sklearn.preprocessing import StandardScaler

__all__ = ["TrainingRangeScaler"]


class TrainingRangeScaler(StandardScaler):
    """StandardScaler that clips every feature to its training range before scaling."""

    def fit(self, X, y=None, sample_weight=None):
        super().fit(X, y, sample_weight=sample_weight)
        values = np.asarray(X, dtype=np.float64)
        self.training_min_ = np.nanmin(values, axis=0) if len(values) else None
        self.training_max_ = np.nanmax(values, axis=0) if len(values) else None
        return self

    def transform(self, X, copy=None):
        if getattr(self, "training_min_", None) is not None:
            X = np.clip(np.asarray(X, dtype=np.float64), self.training_min_, self.training_max_)
        return super().transform(X, copy=copy)
