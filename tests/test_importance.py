"""Permutation importance: the planted columns come first."""

import numpy as np
from sklearn.metrics import make_scorer, matthews_corrcoef
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler
from sklearn.svm import LinearSVC

from analysis.importance import ShuffledKernelRows, permutation_importances

SCORER = make_scorer(matthews_corrcoef)


def test_planted_columns_come_first_and_matrix_features_sum_under_their_column():
    rng = np.random.default_rng(0)
    n = 1500
    planted = rng.normal(size=(n, 2))           # the entries of a 1x2 "matrix" column m
    noise = rng.normal(size=(n, 3))
    y = (planted[:, 0] + 2 * planted[:, 1] > 0).astype(int)  # the planted rule
    X = np.column_stack([noise[:, 0], planted, noise[:, 1:]])
    features = ["a", "m[0]", "m[1]", "b", "c"]
    columns = ["a", "m", "m", "b", "c"]
    model = make_pipeline(StandardScaler(), LinearSVC(dual=False)).fit(X[:1000], y[:1000])
    found = permutation_importances(model, X[1000:], y[1000:], features, columns, SCORER,
                                    seed=3)
    order = [r.feature for r in found]
    assert order[0] == "m" and found[0].whole_column, order
    singles = [r.feature for r in found if not r.whole_column]
    assert singles[:2] == ["m[1]", "m[0]"], singles    # coefficient 2 before coefficient 1
    for r in found:
        if r.column in ("a", "b", "c"):
            assert abs(r.mean) < 0.05, (r.feature, r.mean)


def test_iris_petals_matter_more_than_sepals():
    # Fisher's iris data as scikit-learn ships it: the petal measurements separate the
    # species far better than the sepal ones (Fisher 1936, Annals of Eugenics 7).
    from sklearn.datasets import load_iris
    from sklearn.linear_model import LogisticRegression
    from sklearn.model_selection import train_test_split

    data = load_iris()
    X_train, X_test, y_train, y_test = train_test_split(
        data.data, data.target, test_size=0.5, random_state=0, stratify=data.target)
    model = make_pipeline(StandardScaler(), LogisticRegression(max_iter=2000))
    model.fit(X_train, y_train)
    names = list(data.feature_names)
    found = permutation_importances(model, X_test, y_test, names, names, SCORER, seed=1)
    top = {r.feature for r in found[:2]}
    assert top == {"petal length (cm)", "petal width (cm)"}, [
        (r.feature, round(r.mean, 3)) for r in found]


def test_same_seed_same_numbers():
    rng = np.random.default_rng(2)
    X = rng.normal(size=(300, 3))
    y = (X[:, 0] > 0).astype(int)
    model = make_pipeline(StandardScaler(), LinearSVC(dual=False)).fit(X, y)
    one = permutation_importances(model, X, y, list("pqr"), list("pqr"), SCORER, seed=5)
    two = permutation_importances(model, X, y, list("pqr"), list("pqr"), SCORER, seed=5)
    assert one == two


def _rbf_machines():
    """A two-class RBF support vector machine, a support vector regression and an RBF
    Nystroem machine on integer columns and one real column, fitted by scikit-learn."""
    from sklearn.compose import TransformedTargetRegressor
    from sklearn.kernel_approximation import Nystroem
    from sklearn.svm import SVC, SVR

    rng = np.random.default_rng(6)
    X = np.column_stack([rng.integers(-5, 6, size=(800, 3)), rng.normal(size=800)])
    labels = (X[:, 0] ** 2 + X[:, 1] - X[:, 3] > 4).astype(int)
    numbers = X[:, 0] ** 2 + X[:, 1] * X[:, 3]
    train = slice(0, 500)
    classifier = make_pipeline(StandardScaler(), SVC(kernel="rbf", gamma="scale"))
    regression = TransformedTargetRegressor(
        regressor=make_pipeline(StandardScaler(), SVR(kernel="rbf", gamma="scale")),
        transformer=StandardScaler())
    nystroem = make_pipeline(StandardScaler(), Nystroem(n_components=100, random_state=0),
                             LinearSVC(dual=False))
    return X[500:], {
        "svc": classifier.fit(X[train], labels[train]),
        "svr": regression.fit(X[train], numbers[train]),
        "nystroem": nystroem.fit(X[train], labels[train]),
    }


def test_shuffled_kernel_rows_predict_as_scikit_learn_on_every_shuffle():
    # The factored evaluation of shuffled rows must give scikit-learn's own predictions:
    # one integer column shuffled (a table of partial sums), the real column (one product
    # per shuffle), two columns shuffled together, and rows that are not shuffles at all.
    from analysis.separator_models import kernel_expansion

    rows, machines = _rbf_machines()
    rng = np.random.default_rng(9)
    for name, model in machines.items():
        shuffles = ShuffledKernelRows(kernel_expansion(model), rows)
        for columns in ([0], [3], [1, 2]):
            for _ in range(2):
                shuffled = rows.copy()
                order = rng.permutation(len(rows))
                shuffled[:, columns] = rows[order][:, columns]
                got, expected = shuffles.predict(shuffled), model.predict(shuffled)
                if name == "svr":
                    assert np.allclose(got, expected, atol=1e-9), (name, columns)
                else:
                    assert np.array_equal(got, expected), (name, columns)
        fresh = rows + 0.5
        assert np.allclose(shuffles.predict(fresh), model.predict(fresh), atol=1e-9), name


def test_kernel_importance_equals_scikit_learns_permutation_importance():
    # The same shuffles scored by the factored evaluation and by the machine's own
    # predictions give the same importances (scikit-learn's permutation_importance).
    from analysis.separator_models import kernel_expansion

    rows, machines = _rbf_machines()
    model = machines["svc"]
    truth = model.predict(rows)
    shuffles = ShuffledKernelRows(kernel_expansion(model), rows)
    names = ["p", "q", "r", "s"]

    def factored(estimator, X, y):
        return matthews_corrcoef(y, shuffles.predict(X))

    fast = permutation_importances(model, rows, truth, names, names, factored, seed=4)
    plain = permutation_importances(model, rows, truth, names, names, SCORER, seed=4)
    assert [(r.feature, round(r.mean, 12)) for r in fast] == \
        [(r.feature, round(r.mean, 12)) for r in plain]
