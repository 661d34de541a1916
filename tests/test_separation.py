"""The separator step: validation against chance, leakage guards, and exact equations.

Reference points come from outside the program: Fisher's iris data as shipped with
scikit-learn, scikit-learn's own metrics, Pick's theorem on the demo lattice polygons, and
planted rules on generated tables whose truth is known by construction.
"""

from __future__ import annotations

import json
from collections import Counter
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from sklearn.datasets import load_iris
from sklearn.metrics import balanced_accuracy_score, matthews_corrcoef

from analysis.errors import StepError
from analysis.features import canonical_key
from analysis.figures import figures_for
from analysis.separation import SeparatorResult, SeparatorStep
from analysis.separator_metrics import mcc_from_counts
from analysis.separator_models import decision, predict
from analysis.steps import make_step, step_params
from analysis.table import load_table, read_table

TABLES = Path(__file__).resolve().parent.parent / "sample_tables"
# Enough permutations that p can fall below 0.05 (smallest p is 1/40), few enough to be quick.
FEW = {"permutations": 39, "repeats": 3}


def _table(frame: pd.DataFrame, name: str = "generated.csv"):
    return read_table(frame.to_csv(index=False).encode(), name)


def _labels_of(table, column, ids):
    """Target values of the rows with ``ids``, read straight from the table's frame."""
    position = {rid: i for i, rid in enumerate(table.row_ids.tolist())}
    values = table.frame[column].to_numpy()
    return [values[position[r]] for r in ids]


@pytest.fixture(scope="module")
def iris():
    # Fisher's iris measurements (Fisher 1936) as shipped with scikit-learn.
    data = load_iris(as_frame=True)
    frame = data.frame.rename(columns=lambda c: c.replace(" (cm)", "").replace(" ", "_"))
    frame["species"] = [str(data.target_names[i]) for i in data.target]
    return _table(frame.drop(columns="target"), "iris.csv")


@pytest.fixture(scope="module")
def setosa(iris):
    return SeparatorStep(target="species", positive_class="setosa", seed=0, **FEW).run(iris)


@pytest.fixture(scope="module")
def iris_three(iris):
    return SeparatorStep(target="species", seed=0, **FEW).run(iris)


# ----------------------------------------------------------------------------------------
# Known answers


def test_setosa_is_linearly_separable(setosa):
    # Iris setosa is linearly separable from the other two species (Fisher 1936; the
    # scikit-learn dataset description says so too).
    assert setosa.metrics["accuracy"] == 1.0, setosa.metrics
    assert setosa.repeats["mean"]["accuracy"] == 1.0, setosa.repeats
    equation = setosa.equation
    assert equation is not None
    assert equation.violations == 0, equation.text
    assert equation.positive_class == "setosa"
    assert setosa.beats_chance_text == "yes", setosa.summary()
    # the equation, read independently off the table, picks out exactly the setosa rows
    holds = equation.holds(pd.DataFrame(_iris_columns()))
    assert np.array_equal(holds, _iris_species() == "setosa")


def _iris_columns():
    data = load_iris()
    names = ["sepal_length", "sepal_width", "petal_length", "petal_width"]
    return {name: data.data[:, j] for j, name in enumerate(names)}


def _iris_species():
    data = load_iris()
    return np.array([str(data.target_names[i]) for i in data.target])


def test_setosa_json_follows_the_contract(setosa):
    payload = setosa.to_json()
    json.dumps(payload, allow_nan=False)
    for key in ("accuracy", "balanced_accuracy", "mcc", "mcc_ci"):
        assert key in payload["metrics"]
    low, high = payload["metrics"]["mcc_ci"]
    assert low <= payload["metrics"]["mcc"] <= high
    assert set(payload["baseline"]) >= {"accuracy"}
    assert isinstance(payload["train_rows"], int) and isinstance(payload["test_rows"], int)
    assert payload["train_rows"] + payload["test_rows"] == 150
    equation = payload["equation"]
    assert equation["relation"] in (">=", "<=")
    assert equation["violations"] == 0 and equation["violating_rows"] == []
    for term in equation["terms"]:
        assert set(term) >= {"feature", "coef"} and isinstance(term["coef"], str)
    assert isinstance(equation["constant"], str)
    assert payload["beats_chance"] == "yes"
    assert "bootstrap, 1000 resamples" in payload["interval_method"]
    assert "interval" in payload["beats_chance_rule"] and "0.05" in payload["beats_chance_rule"]
    assert payload["confusion_matrix"]["labels"] == ["not setosa", "setosa"]


def test_setosa_summary_ends_with_equation_and_verdict(setosa):
    lines = setosa.summary().splitlines()
    assert lines[-1] == "beats chance: yes"
    assert lines[-2].strip().startswith("equation:") and setosa.equation.text in lines[-2]


def test_iris_three_classes_give_three_equations(iris_three):
    assert iris_three.task == "classification"
    assert len(iris_three.equations) == 3
    assert {e.positive_class for e in iris_three.equations} == {"setosa", "versicolor",
                                                                "virginica"}
    assert iris_three.to_json()["equation"] is None
    assert len(iris_three.to_json()["equations"]) == 3
    counts = np.array(iris_three.confusion_matrix["counts"])
    assert counts.shape == (3, 3)
    # multiclass scores agree with scikit-learn computed from the same confusion matrix
    actual, predicted = _pairs_from_counts(counts)
    assert iris_three.metrics["mcc"] == pytest.approx(matthews_corrcoef(actual, predicted))
    assert iris_three.metrics["balanced_accuracy"] == pytest.approx(
        balanced_accuracy_score(actual, predicted))
    # the setosa equation is exact (Fisher 1936); the other two species overlap a little
    setosa = next(e for e in iris_three.equations if e.positive_class == "setosa")
    assert setosa.violations == 0, setosa.text
    # well above chance: three balanced classes give a baseline of 1/3
    assert iris_three.metrics["accuracy"] >= 0.85, iris_three.metrics
    assert iris_three.baseline["accuracy"] == pytest.approx(1 / 3)


def _pairs_from_counts(counts):
    actual, predicted = [], []
    for i in range(counts.shape[0]):
        for j in range(counts.shape[1]):
            actual += [i] * int(counts[i, j])
            predicted += [j] * int(counts[i, j])
    return np.array(actual), np.array(predicted)


def test_planted_integer_rule_comes_back_exactly():
    # Truth by construction: label = (3a - 2b + c >= 4) on random integers.
    rng = np.random.default_rng(5)
    frame = pd.DataFrame({name: rng.integers(-6, 7, 400) for name in "abcd"})
    frame["label"] = 3 * frame.a - 2 * frame.b + frame.c >= 4
    table = _table(frame)
    result = SeparatorStep(target="label", seed=0, **FEW).run(table)
    equation = result.equation
    assert equation.violations == 0, equation.text
    coefs = {t.feature: t.coef for t in equation.terms}
    assert set(coefs) == {"a", "b", "c"}, equation.text
    scale = coefs["a"] / 3
    assert scale > 0 if equation.relation == ">=" else scale < 0
    assert coefs["b"] == -2 * scale and coefs["c"] == scale, equation.text
    # on fresh integer points the equation and the planted rule agree everywhere
    fresh = pd.DataFrame({name: rng.integers(-10, 11, 3000) for name in "abcd"})
    planted = (3 * fresh.a - 2 * fresh.b + fresh.c >= 4).to_numpy()
    assert np.array_equal(equation.holds(fresh), planted)
    assert result.beats_chance


def test_picks_theorem_comes_back_as_a_formula():
    # Pick's theorem (Pick 1899): twice the area of a lattice polygon is 2 I + B - 2.
    table = load_table(TABLES / "lattice_polygons.csv")
    result = SeparatorStep(target="twice_area", columns=["interior_points", "boundary_points"],
                           permutations=19, repeats=2, seed=0).run(table)
    assert result.task == "regression"
    formula = result.formula
    assert formula.rows_off == 0, formula.text
    coefs = {t.feature: t.coef for t in formula.terms}
    assert coefs == {"interior_points": 2, "boundary_points": 1}, formula.text
    assert formula.constant == -2
    assert result.metrics["r2"] > 0.99, result.metrics
    # the baseline is the training mean: its R^2 on the test rows is at most about 0
    assert result.baseline["r2"] < 0.01, result.baseline
    payload = result.to_json()
    assert payload["formula"]["text"] == formula.text
    assert set(payload["metrics"]) >= {"r2", "r2_ci", "mean_absolute_error"}


# ----------------------------------------------------------------------------------------
# Chance


@pytest.mark.parametrize("seed", [0, 1, 2], ids=["coin-seed-0", "coin-seed-1", "coin-seed-2"])
def test_fair_coin_target_is_chance(seed):
    # Labels from a fair coin, independent of the features by construction: no separator
    # can beat chance, so the verdict must be no.
    rng = np.random.default_rng(100 + seed)
    frame = pd.DataFrame({name: rng.integers(0, 50, 240) for name in ("a", "b", "c", "d")})
    frame["coin"] = rng.integers(0, 2, 240).astype(bool)
    result = SeparatorStep(target="coin", seed=seed, **FEW).run(_table(frame))
    low, high = result.metrics["mcc_ci"]
    assert low <= 0 <= high or result.permutation_p >= 0.05, (result.metrics,
                                                               result.permutation_p)
    assert result.beats_chance_text == "no", result.summary()
    assert result.summary().endswith("beats chance: no")
    assert abs(result.repeats["mean"]["mcc"]) < 0.25, result.repeats["mean"]


def test_permutation_p_value_follows_its_formula(setosa):
    # p = (count of permuted scores >= observed + 1) / (permutations + 1), common practice
    # for permutation tests (Phipson and Smyth 2010).
    scores = np.array(setosa.permutation_scores)
    assert len(scores) == 39
    expected = (np.sum(scores >= setosa.permutation_observed) + 1) / (len(scores) + 1)
    assert setosa.permutation_p == pytest.approx(expected)


# ----------------------------------------------------------------------------------------
# Metrics against independent computations


def test_baseline_is_the_majority_rate_of_the_test_rows(iris):
    result = SeparatorStep(target="species", positive_class="virginica", seed=3,
                           train_fraction=0.6, **FEW).run(iris)
    labels = _labels_of(iris, "species", result.test_row_ids)
    binary = ["virginica" if v == "virginica" else "rest" for v in labels]
    expected = max(Counter(binary).values()) / len(binary)
    assert result.baseline["accuracy"] == pytest.approx(expected)
    assert len(result.test_row_ids) == result.test_rows == 60


def test_mcc_matches_scikit_learn(iris):
    result = SeparatorStep(target="species", positive_class="versicolor", seed=1,
                           **FEW).run(iris)
    counts = np.array(result.confusion_matrix["counts"])
    actual, predicted = _pairs_from_counts(counts)
    # scikit-learn's Matthews correlation and balanced accuracy on the same predictions
    assert result.metrics["mcc"] == pytest.approx(matthews_corrcoef(actual, predicted))
    assert result.metrics["balanced_accuracy"] == pytest.approx(
        balanced_accuracy_score(actual, predicted))
    # the confusion matrix's rows are the actual classes of the listed test rows
    labels = _labels_of(iris, "species", result.test_row_ids)
    positives = sum(1 for v in labels if v == "versicolor")
    assert counts[1].sum() == positives and counts[0].sum() == len(labels) - positives


@pytest.mark.parametrize("classes", [2, 3, 5], ids=["two-classes", "three-classes",
                                                    "five-classes"])
def test_mcc_formula_matches_scikit_learn_on_random_predictions(classes):
    rng = np.random.default_rng(classes)
    for _ in range(20):
        actual = rng.integers(0, classes, 80)
        predicted = np.where(rng.random(80) < 0.5, actual, rng.integers(0, classes, 80))
        counts = np.zeros((classes, classes), dtype=int)
        np.add.at(counts, (actual, predicted), 1)
        assert float(mcc_from_counts(counts)) == pytest.approx(
            matthews_corrcoef(actual, predicted), abs=1e-12)


def test_bootstrap_interval_matches_resampling_rows(iris):
    # A percentile bootstrap over the test rows (Efron and Tibshirani 1993), redone here by
    # resampling rows. For two classes the Matthews correlation is the phi coefficient,
    # Pearson's r of the two 0/1 vectors (Matthews 1975), computed with numpy.
    result = SeparatorStep(target="species", positive_class="virginica", seed=2,
                           **FEW).run(iris)
    actual, predicted = _pairs_from_counts(np.array(result.confusion_matrix["counts"]))
    assert result.metrics["mcc"] == pytest.approx(np.corrcoef(actual, predicted)[0, 1])
    rng = np.random.default_rng(123)
    values = []
    for _ in range(2000):
        pick = rng.integers(0, len(actual), len(actual))
        a, p = actual[pick], predicted[pick]
        values.append(0.0 if a.std() == 0 or p.std() == 0 else np.corrcoef(a, p)[0, 1])
    low, high = np.percentile(values, [2.5, 97.5])
    got_low, got_high = result.metrics["mcc_ci"]
    assert got_low == pytest.approx(low, abs=0.05), (got_low, low)
    assert got_high == pytest.approx(high, abs=0.05), (got_high, high)


# ----------------------------------------------------------------------------------------
# Leakage


def _matrix_table(objects: int = 36, copies: int = 4, seed: int = 0):
    """Random symmetric integer matrices, each written ``copies`` times with its rows and
    columns permuted together; the label (trace > 0) is the same for all copies."""
    rng = np.random.default_rng(seed)
    records = []
    for k in range(objects):
        base = rng.integers(-5, 6, (4, 4))
        base = base + base.T
        for _ in range(copies):
            order = rng.permutation(4)
            cell = base[np.ix_(order, order)]
            records.append({"object": f"O{k:03d}", "matrix": json.dumps(cell.tolist()),
                            "positive_trace": bool(np.trace(base) > 0)})
    return _table(pd.DataFrame(records), "matrices.csv")


def test_groups_keep_permuted_copies_on_one_side():
    table = _matrix_table()
    # the copies of one object share one canonical key (rows and columns permuted together)
    keys = {}
    for name, cell in zip(table.frame["object"], table.frame["matrix"]):
        keys.setdefault(name, set()).add(canonical_key(cell))
    assert all(len(v) == 1 for v in keys.values())
    for groups in ("matrix", "object"):
        result = SeparatorStep(target="positive_trace", columns=["matrix"], groups=groups,
                               seed=4, **FEW).run(table)
        train = set(_labels_of(table, "object", result.train_row_ids))
        test = set(_labels_of(table, "object", result.test_row_ids))
        assert train and test and not train & test, groups
        assert result.identical_rows_across_split == 0
        assert not result.warnings, result.warnings


def test_copies_across_a_split_are_warned_about_with_their_count():
    table = _matrix_table(seed=1)
    result = SeparatorStep(target="positive_trace", columns=["matrix"], seed=4,
                           **FEW).run(table)
    # independently: test rows whose object (hence invariant features) also sits in training
    train_objects = set(_labels_of(table, "object", result.train_row_ids))
    test_objects = _labels_of(table, "object", result.test_row_ids)
    expected = sum(1 for name in test_objects if name in train_objects)
    assert expected > 0
    assert result.identical_rows_across_split == expected
    assert any(f"{expected} test rows" in w for w in result.warnings), result.warnings


def test_identical_feature_rows_are_counted():
    rng = np.random.default_rng(8)
    base = pd.DataFrame({"a": rng.integers(0, 1000, 120), "b": rng.integers(0, 1000, 120)})
    base["label"] = base.a > base.b
    frame = pd.concat([base, base.iloc[:30]], ignore_index=True)   # 30 exact duplicates
    table = _table(frame)
    result = SeparatorStep(target="label", seed=6, **FEW).run(table)
    train = set(zip(_labels_of(table, "a", result.train_row_ids),
                    _labels_of(table, "b", result.train_row_ids)))
    test = list(zip(_labels_of(table, "a", result.test_row_ids),
                    _labels_of(table, "b", result.test_row_ids)))
    expected = sum(1 for row in test if row in train)
    assert result.identical_rows_across_split == expected
    if expected:
        assert any(f"{expected} test rows" in w for w in result.warnings)
    else:
        assert not result.warnings


def test_augmented_copies_stay_on_the_training_side():
    table = _matrix_table(objects=20, copies=2, seed=2)
    plain = SeparatorStep(target="positive_trace", columns=["matrix"], groups="matrix",
                          array_encoding="flat", seed=0, **FEW).run(table)
    augmented = SeparatorStep(target="positive_trace", columns=["matrix"], groups="matrix",
                              array_encoding="flat", augment_permutations=3, seed=0,
                              **FEW).run(table)
    # same split, same test rows: the copies only ever join the training side
    assert augmented.test_row_ids == plain.test_row_ids
    assert augmented.train_row_ids == plain.train_row_ids
    assert any("3 permuted copies" in n for n in augmented.notes), augmented.notes


# ----------------------------------------------------------------------------------------
# Other models


def _circle_table(rows: int = 300, seed: int = 3):
    # Truth by construction: inside the circle a^2 + b^2 <= 40.
    rng = np.random.default_rng(seed)
    frame = pd.DataFrame({"a": rng.integers(-10, 11, rows), "b": rng.integers(-10, 11, rows)})
    frame["inside"] = frame.a**2 + frame.b**2 <= 40
    return _table(frame, "circle.csv")


def test_poly2_model_gives_a_checked_polynomial_equation():
    table = _circle_table()
    result = SeparatorStep(target="inside", model="poly2", seed=0, **FEW).run(table)
    equation = result.equation
    assert equation is not None
    assert max(term.degree for term in equation.terms) == 2, equation.text
    frame = table.frame[["a", "b"]]
    labels = table.frame["inside"].to_numpy(dtype=bool)
    holds = equation.holds(frame)
    assert equation.violations == int(np.sum(holds != labels)), equation.text
    # the decision scores drawn in the figure are the equation's left side minus constant
    assert np.array_equal(result.decision.scores >= 0, holds)
    assert result.metrics["accuracy"] >= 0.9, result.metrics
    assert result.kernel_method == "exact kernel machine"


def test_rbf_model_gives_a_quadratic_surrogate_with_its_agreement():
    table = _circle_table()
    result = SeparatorStep(target="inside", model="rbf", seed=0, **FEW).run(table)
    surrogate = result.surrogate
    assert surrogate is not None and 0.0 <= surrogate.agreement <= 1.0
    # agreement is with the machine's own predictions on every row
    machine = result.decision.predicted == 1
    holds = surrogate.holds(table.frame[["a", "b"]])
    assert surrogate.agreement == pytest.approx(np.mean(holds == machine))
    assert "agrees with the machine" in result.summary()


@pytest.mark.parametrize("kernel", ["rbf", "poly"], ids=["rbf", "poly2"])
def test_kernel_decision_values_match_scikit_learn(kernel):
    # The one-matrix-product evaluation must give scikit-learn's own decision values.
    from sklearn.pipeline import make_pipeline
    from sklearn.preprocessing import StandardScaler
    from sklearn.svm import SVC

    rng = np.random.default_rng(4)
    X = rng.normal(size=(300, 4))
    y = (X[:, 0] ** 2 + X[:, 1] > 1).astype(int)
    model = make_pipeline(StandardScaler(), SVC(kernel=kernel, degree=2, coef0=1.0,
                                                gamma="scale")).fit(X, y)
    fresh = rng.normal(size=(500, 4))
    assert np.allclose(decision(model, fresh), model.decision_function(fresh), atol=1e-9)
    assert np.array_equal(predict(model, fresh), model.predict(fresh))


def _nystroem_pipeline(kernel: str, regression: bool):
    from sklearn.compose import TransformedTargetRegressor
    from sklearn.kernel_approximation import Nystroem
    from sklearn.linear_model import Ridge
    from sklearn.pipeline import make_pipeline
    from sklearn.preprocessing import StandardScaler
    from sklearn.svm import LinearSVC

    options = {"kernel": "rbf"} if kernel == "rbf" else {"kernel": "poly", "degree": 2,
                                                         "coef0": 1.0}
    features = Nystroem(n_components=120, random_state=3, **options)
    if regression:
        return TransformedTargetRegressor(
            regressor=make_pipeline(StandardScaler(), features, Ridge(alpha=1.0)),
            transformer=StandardScaler())
    return make_pipeline(StandardScaler(), features,
                         LinearSVC(dual=False, class_weight="balanced"))


@pytest.mark.parametrize("kernel,classes", [("rbf", 2), ("rbf", 3), ("poly", 2), ("rbf", 0)],
                         ids=["rbf", "rbf-3-classes", "poly2", "rbf-regression"])
def test_nystroem_kernel_machines_are_evaluated_as_scikit_learn_does(kernel, classes):
    # Evaluated through the kernel against the components, a Nystroem machine must give
    # scikit-learn's own decision values and predictions (Nystroem features, then the
    # linear machine or ridge).
    from analysis.separator_models import predictions_and_decision

    rng = np.random.default_rng(8)
    X = rng.normal(size=(900, 5)) * [1.0, 4.0, 0.2, 2.0, 9.0]
    if classes == 0:
        y = X[:, 0] ** 2 + 0.1 * X[:, 1]
    else:
        y = np.digitize(X[:, 0] ** 2 + X[:, 2] * 5, [0.8, 1.6][:classes - 1])
    model = _nystroem_pipeline(kernel, regression=classes == 0).fit(X[:600], y[:600])
    fresh = X[600:]
    expected = model.predict(fresh)
    if classes == 0:
        assert np.allclose(predict(model, fresh), expected, atol=1e-9)
        return
    assert np.array_equal(predict(model, fresh), expected)
    assert np.allclose(decision(model, fresh), model.decision_function(fresh), atol=1e-6)
    both, values = predictions_and_decision(model, fresh)
    assert np.array_equal(both, expected)
    assert np.allclose(values, model.decision_function(fresh), atol=1e-6)


# poly2 on a numeric target is ridge on monomials, not a kernel machine
@pytest.mark.parametrize("model,mode,regression", [
    ("rbf", "exact", False), ("poly2", "exact", False), ("rbf", "nystroem", False),
    ("rbf", "exact", True), ("rbf", "nystroem", True)],
    ids=["rbf", "poly2", "rbf-nystroem", "rbf-regression", "rbf-nystroem-regression"])
def test_kernel_refits_from_one_kernel_matrix_match_refits_from_scratch(model, mode,
                                                                        regression):
    # The permutation test's refits reuse the kernel matrix (or Nystroem features) of the
    # training rows: each must predict as the same pipeline fitted from scratch by
    # scikit-learn on the shuffled labels.
    from types import SimpleNamespace

    from analysis.separator_models import KernelRefits, fit, make_estimator
    from analysis.separator_prepare import RunLog

    rng = np.random.default_rng(5)
    X = rng.integers(-9, 10, size=(700, 4)).astype(float)
    y = X[:, 0] ** 2 + X[:, 1] * X[:, 2] if regression else \
        (X[:, 0] ** 2 + X[:, 1] * X[:, 2] > 20).astype(np.int64)
    step = SeparatorStep(target="t", model=model, seed=2)
    run = SimpleNamespace(step=step, y=y, X=X, regression=regression, n_classes=2,
                          kernel_mode=mode, kernel_method=mode, copy_values=None,
                          log=RunLog())
    train, test = np.arange(300), np.arange(300, 700)
    assert KernelRefits.usable(run, train)
    refits = KernelRefits(run, fit(run, train, seed_offset=1000), X[train], X[test])
    for shuffle in range(3):
        labels = np.random.default_rng([shuffle]).permutation(y[train])
        scratch = make_estimator(step, regression=regression, n_classes=2, kernel_mode=mode,
                                 n_rows=len(train), seed=step.seed + 1000)
        expected = scratch.fit(X[train], labels).predict(X[test])
        if regression:
            assert np.allclose(refits.predict(labels), expected, atol=1e-6)
        else:
            assert np.array_equal(refits.predict(labels), expected)


@pytest.mark.parametrize("model", ["logistic", "lda"], ids=["logistic", "lda"])
def test_other_linear_models_give_equations(iris, model):
    result = SeparatorStep(target="species", positive_class="setosa", model=model, seed=0,
                           **FEW).run(iris)
    assert result.equation.violations == 0, result.equation.text
    assert result.metrics["accuracy"] == 1.0


def test_kernel_machines_past_the_row_limit_need_approximation_asked_for():
    table = _circle_table(rows=260)
    quick = {"permutations": 9, "repeats": 2}
    with pytest.raises(StepError, match="kernel_approximation"):
        SeparatorStep(target="inside", model="rbf", kernel_row_limit=200, **quick).run(table)
    result = SeparatorStep(target="inside", model="rbf", kernel_row_limit=200,
                           kernel_approximation="auto", seed=0, **quick).run(table)
    assert "Nystroem" in result.kernel_method
    assert any("Nystroem" in n for n in result.notes)
    assert result.surrogate is not None
    sampled = SeparatorStep(target="inside", model="rbf", kernel_row_limit=200,
                            kernel_approximation="sample", seed=0, **quick).run(table)
    assert "sample" in sampled.kernel_method


def test_large_tables_use_fewer_permutations_and_a_sampled_equation_search():
    # A small table run with the large-table settings lowered, so the cheaper path is taken.
    rng = np.random.default_rng(21)
    frame = pd.DataFrame({name: rng.integers(-6, 7, 400) for name in "abc"})
    frame["label"] = 2 * frame.a + frame.b >= 1
    result = SeparatorStep(target="label", permutations=80, repeats=2, large_table_rows=300,
                           sample_rows=150, seed=0).run(_table(frame))
    assert len(result.permutation_scores) == 50
    assert "fewer than the 80 asked" in result.permutation_method
    assert "sample of 150" in result.permutation_method
    assert any("searched on a sample of 150 rows" in n for n in result.notes), result.notes
    # the equation found on the sample is checked on every row: 2a + b >= 1 by construction
    assert result.equation.n_rows == 400
    assert result.equation.violations == 0, result.equation.text


def test_past_the_search_sample_split_1s_model_starts_the_equation_and_the_note_says_so():
    # Truth by construction: label = (a - 2b >= 0). Below large_table_rows but past the
    # search's sample, the equation starts from split 1's model, not a refit on every row.
    rng = np.random.default_rng(5)
    frame = pd.DataFrame({name: rng.integers(-9, 10, 400) for name in "abc"})
    frame["label"] = frame.a - 2 * frame.b >= 0
    table = _table(frame)
    sampled = SeparatorStep(target="label", sample_rows=150, seed=0, **FEW).run(table)
    codes = [getattr(n, "code", None) for n in sampled.notes]
    assert "equation_from_split" in codes, sampled.notes
    assert sampled.equation.n_rows == 400 and sampled.equation.violations == 0
    whole = SeparatorStep(target="label", sample_rows=400, seed=0, **FEW).run(table)
    assert "equation_from_split" not in [getattr(n, "code", None) for n in whole.notes]
    # either way the exact check on every row finds the planted rule
    assert whole.equation.text == sampled.equation.text, (whole.equation.text,
                                                          sampled.equation.text)


def test_mispredicted_lists_confidently_wrong_test_rows():
    # Truth by construction: label = (a > b), with the labels of a few rows far from the
    # boundary flipped. Those rows, when on the test side, are confident mistakes.
    rng = np.random.default_rng(11)
    frame = pd.DataFrame({"a": rng.integers(0, 100, 300), "b": rng.integers(0, 100, 300)})
    label = np.array(frame.a > frame.b, dtype=bool)
    far = np.flatnonzero(np.abs(frame.a - frame.b).to_numpy() > 60)[:6]
    label[far] = ~label[far]
    frame["label"] = label
    table = _table(frame)
    result = SeparatorStep(target="label", seed=0, **FEW).run(table)
    flipped_in_test = set(far.tolist()) & set(result.test_row_ids)
    assert flipped_in_test, "the seed should put some flipped rows on the test side"
    listed = set(result.to_json()["mispredicted"])
    assert flipped_in_test <= listed, (flipped_in_test, listed)


# ----------------------------------------------------------------------------------------
# Learning curve, determinism, settings


def test_learning_curve_covers_the_training_fractions(setosa):
    fractions = [p["train_fraction"] for p in setosa.learning_curve]
    assert fractions == [0.1, 0.2, 0.3, 0.4, 0.5, 0.6, 0.7, 0.8]
    for point in setosa.learning_curve:
        assert point["metric"] == "mcc" and len(point["scores"]) == 3
        assert point["mean"] == pytest.approx(np.mean(point["scores"]))
        # setosa is separable, so even a few training rows find the gap
        assert point["mean"] >= 0.9, point


def test_same_seed_gives_identical_json(iris):
    step = SeparatorStep(target="species", positive_class="versicolor", seed=7, **FEW)
    first = json.dumps(step.run(iris).to_json(), sort_keys=True)
    second = json.dumps(step.run(iris).to_json(), sort_keys=True)
    assert first == second
    other = SeparatorStep(target="species", positive_class="versicolor", seed=8, **FEW)
    assert json.loads(first)["test_row_ids"] != other.run(iris).to_json()["test_row_ids"]


def test_step_round_trips_through_its_parameters():
    step = make_step("separator", {"target": "species", "model": "logistic",
                                   "train_fraction": 0.7, "groups": None})
    assert isinstance(step, SeparatorStep)
    assert make_step("separator", step_params(step)) == step


def test_one_class_target_is_refused():
    frame = pd.DataFrame({"a": range(40), "b": range(40, 80), "label": ["yes"] * 40})
    with pytest.raises(StepError, match="one class"):
        SeparatorStep(target="label", **FEW).run(_table(frame))


@pytest.mark.parametrize(
    ("settings", "message"),
    [
        ({"train_fraction": 0.99}, "train fraction"),
        ({"train_fraction": 0.01}, "train fraction"),
        ({"model": "forest"}, "model 'forest'"),
        ({"penalty": "l1", "model": "lda"}, "penalty l1"),
        ({"penalty": "l3"}, "penalty 'l3'"),
        ({"repeats": 0}, "repeats"),
        ({"permutations": -1}, "permutations"),
        ({"positive_class": "daisy"}, "positive class 'daisy'"),
        ({"kernel_approximation": "guess"}, "kernel approximation"),
        ({"target": None}, "needs a target"),
        ({"target": "species", "groups": "species"}, "group column"),
    ],
    ids=["fraction-high", "fraction-low", "unknown-model", "l1-lda", "unknown-penalty",
         "no-repeats", "negative-permutations", "unknown-class", "unknown-approximation",
         "no-target", "groups-is-target"],
)
def test_bad_settings_are_refused(iris, settings, message):
    params = {"target": "species", **FEW, **settings}
    with pytest.raises(StepError, match=message):
        SeparatorStep(**params).run(iris)


def test_class_models_refuse_a_numeric_target():
    table = _circle_table()
    frame = table.frame[["a", "b"]].copy()
    frame["c"] = frame.a * 7 + frame.b * 3    # many values: a numeric target
    with pytest.raises(StepError, match="needs classes"):
        SeparatorStep(target="c", model="logistic", **FEW).run(_table(frame))


# ----------------------------------------------------------------------------------------
# Figures


def test_figures_show_the_result(iris, setosa):
    drawn = dict(figures_for(setosa, iris, feature="petal_width", hover=["species"]))
    assert list(drawn) == ["Confusion matrix (split 1, test rows)", "Learning curve",
                           "Score against chance", "What the prediction rests on",
                           "Decision score of every row"]
    # the petals separate setosa (Fisher 1936): a petal measurement leads the importance bars
    bars = drawn["What the prediction rests on"].data[0]
    assert "petal" in list(bars.y)[-1], list(bars.y)
    heatmap = drawn["Confusion matrix (split 1, test rows)"].data[0]
    counts = np.array(setosa.confusion_matrix["counts"])
    assert np.allclose(np.asarray(heatmap.z) * counts.sum(axis=1, keepdims=True), counts)
    chance = drawn["Score against chance"]
    histogram = [t for t in chance.data if t.type == "histogram"][0]
    assert list(histogram.x) == list(setosa.permutation_scores)
    scatter = drawn["Decision score of every row"]
    ids = [row for trace in scatter.data for row in np.asarray(trace.customdata)[:, 0]]
    assert sorted(ids) == list(range(150))
    # x is the chosen feature; the threshold is drawn at 0
    xs = np.concatenate([np.asarray(trace.x) for trace in scatter.data])
    assert set(np.round(xs, 1)) <= set(np.round(load_iris().data[:, 3], 1))
    assert any(shape.y0 == 0 and shape.y1 == 0 for shape in scatter.layout.shapes)


def test_regression_figures_draw_predictions():
    table = _circle_table()
    frame = table.frame[["a", "b"]].copy()
    frame["c"] = frame.a * 7 + frame.b * 3
    result = SeparatorStep(target="c", permutations=9, repeats=2).run(_table(frame))
    assert isinstance(result, SeparatorResult)
    titles = [title for title, _ in figures_for(result)]
    assert titles[0].startswith("Predicted against actual")
    assert result.formula.rows_off == 0, result.formula.text   # c = 7a + 3b by construction


def _ranked_matrices(rows: int, seed: int):
    """Integer matrices of different shapes (2x2 to 15x15) with their ranks, computed exactly by
    sympy (the reference), and two more invariants: the matrix's size and a noise column."""
    import sympy

    rng = np.random.default_rng(seed)
    records = []
    for i in range(rows):
        size = int(rng.integers(2, 16))
        rank = int(rng.integers(1, size + 1))
        left = rng.integers(-2, 3, (size, rank))
        right = rng.integers(-2, 3, (rank, size))
        m = left @ right
        records.append({"name": f"m{i}", "matrix": m.tolist(), "size": size,
                        "noise": int(rng.integers(0, 5)),
                        "rank": int(sympy.Matrix(m.tolist()).rank())})
    return read_table(json.dumps(records).encode(), "ranks.json")


def test_whole_number_target_is_judged_by_exact_hits_and_never_explodes():
    # Matrices of different shapes, padded when flattened: with few training rows, test rows
    # hold padded entries never seen in training. Clipping to the training range keeps the
    # predictions sane (R^2 had been -4.9e22 on such a table); the rank is a whole number, so
    # the share of exactly right predictions is reported beside R^2, with both baselines.
    table = _ranked_matrices(400, 5)
    step = SeparatorStep(target="rank", array_encoding="flat", train_fraction=0.2,
                         permutations=19, repeats=2)
    result = step.run(table)
    m, b = result.metrics, result.baseline
    assert result.task == "regression"
    assert m["r2"] > -1.0, f"R^2 {m['r2']} on test rows"
    assert 0.0 <= m["exact"] <= 1.0 and m["exact_ci"][0] <= m["exact"] <= m["exact_ci"][1]
    ranks = Counter(table.frame["rank"])
    assert b["most_common_value"] in ranks
    assert "formula_exact" in b and 0.0 <= b["formula_exact"] <= 1.0
    assert "exactly right" in result.summary()
    assert "confusion matrix" not in " ".join(result.notes)
    data = result.to_json()
    assert data["metrics"]["exact"] == m["exact"] and data["baseline"]["exact"] == b["exact"]


def test_a_mostly_empty_column_is_left_out_and_the_rows_kept():
    # 13,000 rows; one feature column missing in three quarters of them. The default features
    # leave it out (with a warning), so at least 90% of the rows are used.
    rng = np.random.default_rng(0)
    n = 13_000
    a = rng.integers(0, 50, n)
    b = rng.integers(0, 50, n)
    sparse = rng.integers(0, 9, n).astype(float)
    sparse[rng.random(n) < 0.77] = np.nan
    frame = pd.DataFrame({"a": a, "b": b, "sparse": sparse, "flag": (a + 2 * b > 75)})
    result = SeparatorStep(target="flag", permutations=0, repeats=1).run(_table(frame))
    assert result.rows_used >= 0.9 * n, result.rows_used
    assert result.left_out_columns == ("sparse",)
    assert any("sparse" in w and "Left out" in w for w in result.warnings), result.warnings
    assert result.to_json()["left_out_columns"] == ["sparse"]
    assert "warning: Left out" in result.summary()


def test_many_dropped_rows_are_a_warning():
    rng = np.random.default_rng(1)
    n = 600
    a = rng.integers(0, 50, n).astype(float)
    a[rng.random(n) < 0.2] = np.nan
    frame = pd.DataFrame({"a": a, "b": rng.integers(0, 50, n), "flag": rng.random(n) < 0.5})
    result = SeparatorStep(target="flag", columns=["a", "b"], permutations=0,
                           repeats=1).run(_table(frame))
    assert any(w.startswith("Dropped") and "more than 10%" in w for w in result.warnings), \
        result.warnings


def test_a_target_that_follows_from_the_features_is_said_first():
    # The Euler number of a Calabi-Yau threefold is 2 (h11 - h21) (Candelas, Dale, Lutken and
    # Schimmrigk 1988): with h21 and euler as features, h11 follows exactly.
    rng = np.random.default_rng(2)
    h11 = rng.integers(1, 20, 300)
    h21 = rng.integers(1, 100, 300)
    frame = pd.DataFrame({"h11": h11, "h21": h21, "euler": 2 * (h11 - h21),
                          "other": rng.integers(0, 9, 300)})
    result = SeparatorStep(target="h11", permutations=0, repeats=1).run(_table(frame))
    assert result.target_follows is not None
    assert set(result.target_follows.columns) == {"h21", "euler"}
    assert "follows exactly from the features" in result.warnings[0]
    assert result.summary().splitlines()[1].startswith("  finding: the target follows")


def test_progress_reports_phases_and_first_figures():
    from analysis.progress import StepStopped, Stopper

    frame = pd.DataFrame({"a": np.arange(200) % 17, "b": np.arange(200) % 5,
                          "flag": (np.arange(200) % 17) > 8})
    seen = []
    SeparatorStep(target="flag", permutations=19, repeats=2).run(_table(frame),
                                                                  progress=seen.append)
    phases = [p.phase for p in seen]
    for phase in ("fitting the splits", "permutation test", "learning curve",
                  "searching the exact equation"):
        assert phase in phases, phases
    first = next(p for p in seen if p.first_figures)
    assert dict(first.first_figures)["accuracy"] >= 0.9
    stopper = Stopper()
    stopper.request()
    from analysis.progress import Reporter

    with pytest.raises(StepStopped, match="stopped by request"):
        SeparatorStep(target="flag", permutations=19).run(
            _table(frame), progress=Reporter(stopper=stopper))


def test_importance_puts_the_planted_columns_first():
    # a planted rule on a and b; c and d are noise
    rng = np.random.default_rng(6)
    n = 800
    frame = pd.DataFrame({"a": rng.integers(0, 40, n), "b": rng.integers(0, 40, n),
                          "c": rng.integers(0, 40, n), "d": rng.integers(0, 40, n)})
    frame["flag"] = frame["a"] - 2 * frame["b"] > -20
    result = SeparatorStep(target="flag", permutations=0, repeats=1).run(_table(frame))
    order = [r.feature for r in result.importance]
    assert set(order[:2]) == {"a", "b"}, order
    assert result.importance[0].mean > 0.1
    assert result.to_json()["importance"][0]["feature"] == order[0]


def test_open_values_are_predicted_and_said_to_be_predictions():
    # the planted rule decides the flag; a tenth of the rows have no flag recorded
    rng = np.random.default_rng(7)
    n = 600
    frame = pd.DataFrame({"a": rng.integers(0, 40, n), "b": rng.integers(0, 40, n)})
    truth = frame["a"] + frame["b"] > 40
    frame["flag"] = truth.astype(object)
    hidden = rng.choice(n, 60, replace=False)
    frame.loc[hidden, "flag"] = None
    result = SeparatorStep(target="flag", permutations=0, repeats=1).run(_table(frame))
    assert len(result.open_predictions) == 60
    right = sum(p["prediction"] == bool(truth[p["row"]]) for p in result.open_predictions)
    assert right >= 54, right
    assert all(p["confidence"] is not None and p["interval"] is None
               for p in result.open_predictions)
    assert any("to check by hand, not values" in note for note in result.notes)
    frame = result.open_predictions_frame()
    assert len(frame) == 60 and set(frame["object"]) == set(int(h) for h in hidden)


def test_a_class_of_three_rows_runs_and_the_curve_skips_what_cannot_be_fitted():
    # three breakers among 300 objects (a statement nearly every object obeys): small training
    # sides of the learning curve can miss them; those points are skipped, never a crash
    rng = np.random.default_rng(9)
    frame = pd.DataFrame({"a": rng.integers(0, 50, 300), "b": rng.integers(0, 50, 300)})
    frame["rare"] = False
    frame.loc[[5, 77, 150], "rare"] = True
    result = SeparatorStep(target="rare", permutations=19, repeats=2).run(_table(frame))
    fractions = [p["train_fraction"] for p in result.learning_curve]
    assert 0.1 not in fractions
    assert any("learning curve: no valid split" in note for note in result.notes)


def test_the_result_times_each_part_of_the_protocol_outside_its_json(iris):
    # Fisher's iris data (scikit-learn's copy): setosa against the rest, a protocol that runs
    # every part; the parts' seconds never add up to more than the whole step's
    step = SeparatorStep(target="species", positive_class="setosa", permutations=60, seed=3)
    result = step.run(iris)
    parts = dict(result.phase_seconds)
    assert [name for name, _ in result.phase_seconds] == [
        "target check", "split 1", "later splits", "importance", "permutation test",
        "learning curve", "fit on every row and exact equation", "open values"]
    assert all(seconds >= 0 for seconds in parts.values())
    assert sum(parts.values()) <= result.elapsed_seconds
    again = step.run(iris)
    assert json.dumps(again.to_json()) == json.dumps(result.to_json()), \
        "the timings must stay out of the JSON"


def test_l1_fits_run_one_at_a_time_and_the_same_seed_gives_the_same_numbers(iris):
    # liblinear's l1 solvers draw from C's one random state per process, so their refits
    # may not share it between threads: the rule, then its effect on a sample table
    from analysis.separator_models import shares_process_random
    from analysis.separator_protocol import split_workers

    assert shares_process_random(SeparatorStep(model="logistic", penalty="l1"))
    assert shares_process_random(SeparatorStep(model="linear", penalty="l1"))
    assert not shares_process_random(SeparatorStep(model="logistic"))
    assert not shares_process_random(SeparatorStep(model="linear"))
    assert split_workers("exact", 100, one_at_a_time=True) == 1
    # versicolor against virginica on Fisher's iris: not separable, so every refit works
    step = SeparatorStep(target="species", positive_class="virginica", model="logistic",
                         penalty="l1", seed=4, **FEW)
    runs = [json.dumps(step.run(iris).to_json(), sort_keys=True) for _ in range(3)]
    assert runs[0] == runs[1] == runs[2]


@pytest.fixture(scope="module")
def breast_cancer():
    # the Wisconsin diagnostic breast cancer data as shipped with scikit-learn (569 rows,
    # 30 real features), with a flag target and a column equal to twice another
    from sklearn.datasets import load_breast_cancer

    data = load_breast_cancer(as_frame=True)
    frame = data.frame.rename(columns=lambda c: c.replace(" ", "_"))
    frame["twice_radius"] = 2 * frame["mean_radius"]
    frame["malignant"] = data.target == 0
    return _table(frame.drop(columns="target"), "breast_cancer.csv")


def _prepared(table, target="malignant", **settings):
    from analysis.progress import quiet
    from analysis.separator_prepare import RunLog, prepare

    step = SeparatorStep(target=target, seed=0, **settings)
    step.check()
    return prepare(step, table, quiet(None), RunLog())


def test_each_fit_on_threads_gets_its_own_solver_notes(breast_cancer):
    # Reference: scikit-learn documents n_iter_ as the iterations run (the largest over the
    # classes for liblinear) and warns ConvergenceWarning when they reach max_iter; checked
    # here on one thread against its own warning. A column equal to twice another makes the
    # rows centred on their class means rank deficient (numpy's matrix_rank), which is the
    # collinearity LDA's note tells of.
    import dataclasses
    import warnings
    from concurrent.futures import ThreadPoolExecutor

    from sklearn.exceptions import ConvergenceWarning

    from analysis.separator_models import COLLINEAR_NOTE, ITERATION_LIMIT_NOTE, fit
    from analysis.separator_prepare import RunLog

    l1 = _prepared(breast_cancer, model="linear", penalty="l1", c=10.0)
    lda_twice = _prepared(breast_cancer, model="lda")
    lda_plain = _prepared(breast_cancer, model="lda", columns=[
        name for name in breast_cancer.frame.columns
        if name not in ("twice_radius", "malignant")])
    rng = np.random.default_rng(7)
    n = len(l1.y)
    # l1 fits on 150 to 300 rows: some reach liblinear's 5000 iterations, some stop before
    jobs = [(l1, np.sort(rng.choice(n, size, replace=False)))
            for size in (150, 160, 290, 300, 150, 300)]
    jobs += [(run, np.sort(rng.choice(n, 300, replace=False)))
             for run in (lda_twice, lda_plain) for _ in range(3)]

    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        alone = fit(dataclasses.replace(l1, log=RunLog()), jobs[4][1])
    warned = any(issubclass(w.category, ConvergenceWarning) for w in caught)
    assert warned == (alone[-1].n_iter_ >= alone[-1].max_iter)

    def one(job):
        run, rows = job
        own = dataclasses.replace(run, log=RunLog())
        return own, fit(own, rows)

    with ThreadPoolExecutor(max_workers=4) as pool:
        done = list(pool.map(one, jobs))
    reached = []
    for (run, rows), (own, model) in zip(jobs, done):
        expected = set()
        if run is l1:
            reached.append(model[-1].n_iter_ >= model[-1].max_iter)
            if reached[-1]:
                expected.add(ITERATION_LIMIT_NOTE)
        else:
            X = run.X[rows]
            centred = X - np.array([X[run.y[rows] == k].mean(axis=0)
                                    for k in range(2)])[run.y[rows]]
            if np.linalg.matrix_rank(centred) < X.shape[1]:
                expected.add(COLLINEAR_NOTE)
            assert (COLLINEAR_NOTE in expected) == (run is lda_twice)
        assert own.log.fit_warnings == expected, (run.step.model, len(rows))
    assert any(reached) and not all(reached), "both outcomes must occur among the fits"
    assert lda_twice.log.fit_warnings == set() and l1.log.fit_warnings == set()


@pytest.mark.parametrize("model", ["linear", "logistic", "lda"])
def test_refits_on_fixed_rows_predict_as_a_whole_pipeline_does(iris, model):
    # Reference: scikit-learn's own pipeline, StandardScaler then the same model, fitted on
    # the training rows with shuffled labels, the test rows clipped to the training range with
    # numpy first (as the separator's scaler does); Fisher's iris data, three classes, so
    # none of the closed forms applies
    from sklearn.discriminant_analysis import LinearDiscriminantAnalysis
    from sklearn.linear_model import LogisticRegression
    from sklearn.pipeline import make_pipeline
    from sklearn.preprocessing import StandardScaler
    from sklearn.svm import LinearSVC

    from analysis.separator_models import LabelRefits

    run = _prepared(iris, target="species", model=model)
    rng = np.random.default_rng(5)
    order = rng.permutation(len(run.y))
    train, test = np.sort(order[:75]), np.sort(order[75:])
    refits = LabelRefits(run, train, test, seed_offset=1000)
    inner = {"linear": LinearSVC(C=1.0, dual=False, class_weight="balanced", max_iter=5000),
             "logistic": LogisticRegression(C=1.0, class_weight="balanced", max_iter=2000,
                                            random_state=1000),
             "lda": LinearDiscriminantAnalysis()}[model]
    X_train = run.X[train]
    X_test = np.clip(run.X[test], X_train.min(axis=0), X_train.max(axis=0))
    for _ in range(3):
        labels = run.y.copy()
        labels[train] = rng.permutation(run.y[train])
        expected = make_pipeline(StandardScaler(), inner).fit(
            X_train, labels[train]).predict(X_test)
        np.testing.assert_array_equal(refits.predict(labels), expected)


def test_an_equation_on_a_log_scaled_column_is_also_given_in_its_own_values():
    # a cubic x^3 + a*x + b has three real roots exactly when its discriminant
    # -4a^3 - 27b^2 is positive, one when it is negative (a classical fact; sympy counts
    # the real roots here). The discriminant times 10^20 lies past 64 bits, so it is
    # log-scaled, and the equation on slog(...) reads again in the column's own integers.
    import sympy

    from analysis.table import read_table

    x = sympy.symbols("x")
    lines = ["a,b,scaled_disc,three_real"]
    for a in range(-9, 4):
        for b in range(-9, 10):
            disc = -4 * a**3 - 27 * b**2
            if disc == 0:
                continue
            three = len(sympy.real_roots(x**3 + a * x + b)) == 3
            lines.append(f"{a},{b},{disc * 10**20},{three}")
    table = read_table(("\n".join(lines) + "\n").encode(), "cubics.csv")
    result = SeparatorStep(target="three_real", columns=("a", "b", "scaled_disc"),
                           permutations=10, seed=0).run(table)
    equation = result.equation
    assert equation is not None and equation.violations == 0
    assert [t.feature for t in equation.terms] == ["slog(scaled_disc)"]
    column, relation, threshold = equation.in_columns.split()
    assert column == "scaled_disc" and relation in (">=", "<=")
    values = [int(v) for v in table.frame["scaled_disc"]]
    said = [v >= int(threshold) if relation == ">=" else v <= int(threshold) for v in values]
    positive = [bool(v) == (equation.positive_class in (True, "True")) for v in
                table.frame["three_real"]]
    assert said == positive
    assert result.to_json()["equation"]["in_columns"] == equation.in_columns


def test_the_summary_says_how_many_rows_a_missing_value_left_out():
    # Fisher's iris measurements (scikit-learn's copy) with every 15th petal length removed
    data = load_iris(as_frame=True)
    frame = data.frame.rename(columns=lambda c: c.replace(" (cm)", "").replace(" ", "_"))
    frame["species"] = [str(data.target_names[i]) for i in data.target]
    frame = frame.drop(columns="target")
    frame.loc[frame.index % 15 == 0, "petal_length"] = np.nan
    gaps = int(frame["petal_length"].isna().sum())
    result = SeparatorStep(target="species", positive_class="setosa", seed=0,
                           **FEW).run(_table(frame, "iris_gaps.csv"))
    assert result.rows_used == len(frame) - gaps
    assert (f"  {len(frame) - gaps} of {len(frame)} rows ({gaps} with a missing value left "
            "out); split 1") in result.summary()
    whole = SeparatorStep(target="species", positive_class="setosa", seed=0,
                          **FEW).run(_table(frame.fillna(1.0), "iris_filled.csv"))
    assert f"  {len(frame)} rows; split 1" in whole.summary()


def test_an_equation_is_set_beside_the_rule_that_predicts_its_class_for_no_object(iris):
    # Fisher's iris (scikit-learn's copy): 50 plants of each species of 150 (the dataset
    # description); virginica is separated from the rest by a plane with few errors
    result = SeparatorStep(target="species", positive_class="virginica", seed=0,
                           **FEW).run(iris)
    equation = result.equation
    assert equation.positives == 50 and equation.n_rows == 150
    assert equation.constant_rule() == ("none", 50)
    assert 0 < equation.violations < 50, equation.text
    said = "Predicting 'virginica' for no object would break on 50 rows."
    assert said in result.summary()
    assert equation.to_json()["positives"] == 50 and equation.to_json()["rows_checked"] == 150
    # an equation that breaks on as many rows as naming no object says it tells nothing
    from analysis.separator_equation import constant_rule_sentence

    assert constant_rule_sentence(7, 2769, 55, 55) == (
        "No better than predicting 7 for no object, which breaks on 55 rows: the equation "
        "says nothing about this class.")
    assert constant_rule_sentence(True, 10, 8, 1) == (
        "Predicting True for every object would break on 2 rows.")
    assert constant_rule_sentence(True, 10, 8, 0) == ""   # an exact equation needs no comparison


@pytest.mark.parametrize("machine", ["linear", "logistic"])
def test_predictions_of_a_scaled_linear_model_are_its_own(machine):
    # scikit-learn's breast cancer data (569 tumours, 30 measurements; the dataset
    # description): the separator's predictions of a fitted pipeline are the pipeline's own,
    # row for row, also on rows beyond the training range (clipped by the scaler)
    from sklearn.datasets import load_breast_cancer
    from sklearn.linear_model import LogisticRegression
    from sklearn.pipeline import make_pipeline
    from sklearn.svm import LinearSVC

    from analysis.scaling import TrainingRangeScaler

    X, y = load_breast_cancer(return_X_y=True)
    labels = np.array(["benign", "malignant"])[1 - y]
    inner = LinearSVC(dual=False, class_weight="balanced") if machine == "linear" else \
        LogisticRegression(max_iter=5000, class_weight="balanced")
    model = make_pipeline(TrainingRangeScaler(), inner).fit(X[::2], labels[::2])
    beyond = X[1::2] * np.where(np.arange(X.shape[1]) % 3 == 0, 3.0, 1.0)
    for rows in (X[1::2], beyond, X[:1]):
        assert np.array_equal(predict(model, rows), model.predict(rows))
    assert set(predict(model, beyond)) <= set(labels)
