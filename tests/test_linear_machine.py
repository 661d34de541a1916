"""The two-class linear machine solved by Newton's method (analysis.linear_machine)."""

import numpy as np
import pytest

from analysis.errors import StepError
from analysis.linear_machine import MOST_FEATURES, ExactLinearMachine


def _scaled_breast_cancer():
    # scikit-learn's breast cancer data (569 tumours, 30 measurements, two classes; the
    # sklearn.datasets.load_breast_cancer documentation), standardized
    from sklearn.datasets import load_breast_cancer
    from sklearn.preprocessing import StandardScaler

    X, y = load_breast_cancer(return_X_y=True)
    return StandardScaler().fit_transform(X), y


def _objective(X, y, c, coef, intercept):
    # the squared hinge problem written out (scikit-learn's LinearSVC documentation, with
    # liblinear's constant feature for the intercept, so the intercept is penalized too)
    sign = np.where(y == np.unique(y)[1], 1.0, -1.0)
    weights = len(y) / (2.0 * np.bincount(y))[y]
    slack = np.maximum(0.0, 1.0 - sign * (X @ coef + intercept))
    return 0.5 * (coef @ coef + intercept ** 2) + c * np.sum(weights * slack ** 2)


@pytest.mark.parametrize("c", [0.01, 1.0, 100.0], ids=["c=0.01", "c=1", "c=100"])
@pytest.mark.parametrize("shuffled", [False, True], ids=["true labels", "shuffled labels"])
def test_the_minimum_is_liblinears_at_a_tight_tolerance(c, shuffled):
    # Reference: scikit-learn's LinearSVC(dual=False, class_weight="balanced"), liblinear's
    # primal solver of the same problem, run to a tolerance of 1e-14
    from sklearn.svm import LinearSVC

    X, y = _scaled_breast_cancer()
    if shuffled:
        y = np.random.default_rng(3).permutation(y)
    reference = LinearSVC(C=c, dual=False, class_weight="balanced", tol=1e-14,
                          max_iter=100_000).fit(X, y)
    machine = ExactLinearMachine(C=c).fit(X, y)
    scale = np.max(np.abs(reference.coef_))
    gap = np.max(np.abs(machine.coef_ - reference.coef_)) / scale
    assert gap < 1e-6, f"coefficients differ by {gap:.2e} of the largest"
    assert abs(machine.intercept_[0] - reference.intercept_[0]) < 1e-6 * max(1.0, scale)
    np.testing.assert_array_equal(machine.classes_, reference.classes_)
    np.testing.assert_array_equal(machine.predict(X), reference.predict(X))
    ours = _objective(X, y, c, machine.coef_[0], machine.intercept_[0])
    theirs = _objective(X, y, c, reference.coef_[0], reference.intercept_[0])
    assert ours <= theirs * (1 + 1e-9), f"objective {ours} against liblinear's {theirs}"
    assert machine.n_iter_ < machine.max_iter


def test_labels_of_any_values_and_the_second_class_on_the_positive_side():
    # Reference: scikit-learn's convention for two-class linear models (the
    # LinearClassifierMixin documentation): a positive decision value predicts classes_[1]
    X, y = _scaled_breast_cancer()
    words = np.where(y == 1, "benign", "malignant")
    machine = ExactLinearMachine().fit(X, words)
    assert list(machine.classes_) == ["benign", "malignant"]
    values = machine.decision_function(X)
    np.testing.assert_array_equal(machine.predict(X), np.where(values > 0, "malignant",
                                                               "benign"))


@pytest.mark.parametrize("features", [12, MOST_FEATURES])
def test_the_same_weights_whatever_the_threads(features):
    # exact equality: the numbers must not depend on the linear algebra library's threads
    from threadpoolctl import threadpool_limits

    rng = np.random.default_rng(0)
    X = rng.standard_normal((30_000, features))
    y = (X[:, 0] + 0.5 * rng.standard_normal(30_000) > 0).astype(int)
    free = ExactLinearMachine().fit(X, y)
    with threadpool_limits(1):
        alone = ExactLinearMachine().fit(X, y)
    np.testing.assert_array_equal(free.coef_, alone.coef_)
    np.testing.assert_array_equal(free.intercept_, alone.intercept_)


def test_one_class_is_refused():
    X, _ = _scaled_breast_cancer()
    with pytest.raises(StepError, match="needs two classes; got 1"):
        ExactLinearMachine().fit(X, np.zeros(len(X), dtype=int))


def test_a_start_changes_the_steps_not_the_minimum():
    # the problem is strictly convex (an L2 penalty on every weight), so its minimum is one
    # point whatever the start (any convex optimization text, e.g. Boyd and Vandenberghe 2004)
    X, y = _scaled_breast_cancer()
    cold = ExactLinearMachine().fit(X, y)
    near = np.append(cold.coef_[0], cold.intercept_) * 1.01
    warm = ExactLinearMachine().fit(X, y, start=near)
    far = ExactLinearMachine().fit(X, y, start=np.full(X.shape[1] + 1, 50.0))
    for other in (warm, far):
        np.testing.assert_allclose(other.coef_, cold.coef_, rtol=1e-9, atol=1e-12)
    assert warm.n_iter_ < cold.n_iter_, (warm.n_iter_, cold.n_iter_)
