"""Closed-form refits with shuffled labels agree with scikit-learn's own fits."""

import numpy as np
import pytest

from analysis.refits import LdaShuffles, RidgeShuffles
from analysis.scaling import TrainingRangeScaler


def _data(seed: int, rows: int = 300, columns: int = 6):
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(rows, columns)) * rng.uniform(0.5, 20, columns) + rng.normal(0, 5,
                                                                                        columns)
    return X[:200], X[200:], rng


def test_ridge_matches_scikit_learn_for_every_shuffle():
    # Reference: scikit-learn's Ridge behind the separator's scaler (StandardScaler after
    # clipping to the training range) with the target standardized
    # (TransformedTargetRegressor), refitted on each shuffled label vector.
    from sklearn.compose import TransformedTargetRegressor
    from sklearn.linear_model import Ridge
    from sklearn.pipeline import make_pipeline
    from sklearn.preprocessing import StandardScaler

    X_train, X_test, rng = _data(1)
    y = X_train @ rng.normal(size=X_train.shape[1]) + rng.normal(size=len(X_train))
    closed = RidgeShuffles(X_train, X_test, alpha=2.0)
    shuffles = np.column_stack([rng.permutation(y) for _ in range(5)])
    together = closed.predict(shuffles)
    for k in range(shuffles.shape[1]):
        model = TransformedTargetRegressor(
            regressor=make_pipeline(TrainingRangeScaler(), Ridge(alpha=2.0)),
            transformer=StandardScaler())
        model.fit(X_train, shuffles[:, k])
        reference = model.predict(X_test)
        assert np.allclose(together[:, k], reference, atol=1e-8), k
        assert np.allclose(closed.predict(shuffles[:, k]), reference, atol=1e-8), k


@pytest.mark.parametrize("share", [0.5, 0.2], ids=["balanced", "unbalanced"])
def test_lda_matches_scikit_learn_for_every_shuffle(share):
    # Reference: scikit-learn's LinearDiscriminantAnalysis (svd solver, priors from the class
    # shares) behind the separator's scaler, refitted on each shuffled label vector.
    from sklearn.discriminant_analysis import LinearDiscriminantAnalysis
    from sklearn.pipeline import make_pipeline

    X_train, X_test, rng = _data(2)
    labels = (rng.random(len(X_train)) < share).astype(int)
    closed = LdaShuffles(X_train, X_test)
    assert closed.usable
    for _ in range(5):
        shuffled = rng.permutation(labels)
        model = make_pipeline(TrainingRangeScaler(), LinearDiscriminantAnalysis(solver="svd"))
        model.fit(X_train, shuffled)
        reference = model.predict(X_test)
        agree = np.mean(closed.predict(shuffled) == reference)
        assert agree == 1.0, f"closed form agrees on {agree:.3f} of test rows"


def test_lda_declines_a_singular_scatter_matrix():
    X_train, X_test, _ = _data(3)
    X_train = np.column_stack([X_train, X_train[:, 0] * 2 + X_train[:, 1]])
    X_test = np.column_stack([X_test, X_test[:, 0] * 2 + X_test[:, 1]])
    assert not LdaShuffles(X_train, X_test).usable
