"""Refits with shuffled labels in closed form, for the models whose fit is one linear solve.

A permutation test refits the model once per shuffle of the training labels. For ridge
regression and for linear discriminant analysis the features never change between shuffles,
so the expensive part of the fit (a matrix factorisation) is done once, and each shuffled
label vector costs a matrix product:

* **ridge** (standardized features, target standardized on the training rows): the test
  predictions are ``m + A (y - m)`` with ``A = Xc_test (Xc^T Xc + alpha I)^-1 Xc^T``, ``m`` the
  training mean of the target, which a shuffle does not change (Hastie, Tibshirani and
  Friedman, The Elements of Statistical Learning, 2nd ed., section 3.4.1: ridge is a linear
  smoother).
* **two-class LDA**: with ``S`` the total scatter matrix of the training rows, fixed under a
  shuffle, and ``d`` the difference of the two class means, the pooled within-class scatter is
  ``S - (n0 n1 / n) d d^T``, and the Sherman-Morrison formula gives the discriminant direction
  ``W^-1 d = (n - 2) S^-1 d / (1 - (n0 n1 / n) d^T S^-1 d)`` with one solve against ``S``
  shared by all shuffles (ibid., section 4.3).

Test rows are clipped to the training range first, as the separator's scaler does. Both agree
with scikit-learn's fits to rounding (tests/test_refits.py checks them against ``Ridge`` and
``LinearDiscriminantAnalysis`` behind that scaler); LDA is used only when ``S`` is well
conditioned, and the caller refits otherwise.
"""

from __future__ import annotations

import numpy as np

__all__ = ["LdaShuffles", "RidgeShuffles"]

# The total scatter matrix must be at least this well conditioned for the LDA closed form.
LDA_CONDITION_LIMIT = 1e10


def _standardized(X_train: np.ndarray, X_test: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Both matrices scaled as the separator's scaler fitted on the training rows does: test
    rows clipped to the training range, then standardized (analysis/scaling.py)."""
    X_test = np.clip(X_test, X_train.min(axis=0), X_train.max(axis=0))
    mean = X_train.mean(axis=0)
    scale = X_train.std(axis=0)
    scale[scale == 0] = 1.0
    return (X_train - mean) / scale, (X_test - mean) / scale


class RidgeShuffles:
    """Test predictions of standardized ridge regression for many training label vectors.

    X_train, X_test: raw feature rows; alpha: the ridge penalty (scikit-learn's ``alpha``).
    """

    def __init__(self, X_train: np.ndarray, X_test: np.ndarray, alpha: float):
        train, test = _standardized(np.asarray(X_train, float), np.asarray(X_test, float))
        centre = train.mean(axis=0)
        train = train - centre
        gram = train.T @ train + alpha * np.eye(train.shape[1])
        # A = (X_test - centre) gram^-1 train^T, formed as a solve rather than an inverse
        self._smoother = (test - centre) @ np.linalg.solve(gram, train.T)

    def predict(self, labels: np.ndarray) -> np.ndarray:
        """Predictions on the test rows; ``labels`` is one training label vector or a matrix
        with one vector per column."""
        labels = np.asarray(labels, float)
        mean = labels.mean(axis=0)
        return mean + self._smoother @ (labels - mean)


class LdaShuffles:
    """Test predictions (class codes 0 and 1) of two-class LDA for many label vectors.

    Priors are the class shares of the training rows, as scikit-learn's default; a shuffle
    keeps them. ``usable`` is False when the scatter matrix is too badly conditioned for the
    closed form (then refit instead).
    """

    def __init__(self, X_train: np.ndarray, X_test: np.ndarray):
        train, test = _standardized(np.asarray(X_train, float), np.asarray(X_test, float))
        self._train = train
        self._test = test
        self._mean = train.mean(axis=0)
        centred = train - self._mean
        scatter = centred.T @ centred
        self.usable = bool(np.isfinite(scatter).all()
                           and np.linalg.cond(scatter) < LDA_CONDITION_LIMIT)
        self._scatter = scatter

    def predict(self, labels: np.ndarray) -> np.ndarray:
        """Predicted class codes on the test rows for one 0/1 training label vector."""
        labels = np.asarray(labels, dtype=bool)
        n = len(labels)
        n1 = int(labels.sum())
        n0 = n - n1
        mean1 = self._train[labels].mean(axis=0)
        mean0 = self._train[~labels].mean(axis=0)
        d = mean1 - mean0
        solved = np.linalg.solve(self._scatter, d)
        direction = (n - 2) * solved / (1.0 - (n0 * n1 / n) * float(d @ solved))
        middle = (mean0 + mean1) / 2
        scores = (self._test - middle) @ direction + np.log(n1 / n0)
        return (scores > 0).astype(int)
