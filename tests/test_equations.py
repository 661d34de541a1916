"""Tests for analysis/equations.py: exact equations from separators and regressions.

Reference points come from outside the project: planted rules on generated integer tables
(the rule is known by construction), Fisher's iris data shipped by scikit-learn, the kernel
definition scikit-learn documents for SVC, Pick's theorem for lattice polygons, and exact
rational arithmetic in Python's fractions module.
"""

from __future__ import annotations

import json
import math
import os
import subprocess
import sys
from fractions import Fraction
from pathlib import Path

import numpy as np
import pytest
from sklearn.datasets import load_iris
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler
from sklearn.svm import SVC, LinearSVC

from analysis.equations import (
    Formula,
    LinearEquation,
    PolynomialEquation,
    Term,
    expand_poly2,
    find_formula,
    find_linear_equation,
    one_vs_rest_equations,
    poly2_equation,
    surrogate_quadratic,
)
from analysis.errors import StepError
from analysis.notes import note_code

# ------------------------------------------------------------------------------------------
# Helpers
# ------------------------------------------------------------------------------------------


def integer_table(n: int, columns: int, seed: int, low: int = 0, high: int = 10) -> np.ndarray:
    """Integer invariants in [low, high], stored as float64 as the feature matrix holds them."""
    rng = np.random.default_rng(seed)
    return rng.integers(low, high + 1, size=(n, columns)).astype(float)


def exact_mask(equation: LinearEquation, rows: list[dict]) -> np.ndarray:
    """Where the equation holds, row by row in Python Fractions (independent of numpy)."""
    result = []
    for row in rows:
        total = sum(
            (term.coef * math.prod(Fraction(row[name]) for name in term.factor_names()))
            for term in equation.terms
        )
        if equation.relation == ">=":
            result.append(total >= equation.constant)
        else:
            result.append(total <= equation.constant)
    return np.array(result)


def as_records(X: np.ndarray, names: list[str]) -> list[dict]:
    # Fraction(str(x)) reads each value as the decimal it was written as (e.g. "5.1" -> 51/10).
    return [{name: str(value) for name, value in zip(names, row)} for row in X.tolist()]


# ------------------------------------------------------------------------------------------
# Planted linear rules
# ------------------------------------------------------------------------------------------

# Each rule is planted in a generated integer table, so the true separator is known by
# construction; with every integer point of [0, 10]^k well populated no other readable
# inequality splits the rows the same way with coefficients this small.
PLANTED = [
    pytest.param(lambda a, b, c: 2 * a - b >= 3, "2*a - b >= 3", id="2a-b>=3"),
    pytest.param(lambda a, b, c: a + b + c <= 7, "a + b + c <= 7", id="a+b+c<=7"),
    pytest.param(lambda a, b, c: 3 * a - 2 * c >= 0, "3*a - 2*c >= 0", id="3a-2c>=0"),
]


@pytest.mark.parametrize("noise_columns", [0, 3], ids=["no-noise", "3-noise-columns"])
@pytest.mark.parametrize(("rule", "expected"), PLANTED)
def test_planted_integer_rule_is_recovered_exactly(rule, expected, noise_columns):
    X = integer_table(1200, 3 + noise_columns, seed=11 + noise_columns)
    names = ["a", "b", "c"] + [f"noise_{i}" for i in range(noise_columns)]
    positive = rule(X[:, 0], X[:, 1], X[:, 2])
    equation = find_linear_equation(X, positive, names, seed=0)
    assert equation.text == expected
    assert equation.violations == 0
    assert equation.violating_rows == ()
    assert equation.exact
    assert not any(term.feature.startswith("noise") for term in equation.terms)
    # Independent check in exact rational arithmetic, row by row.
    assert np.array_equal(exact_mask(equation, as_records(X, names)), positive)


def test_planted_rule_among_coarse_columns_is_found_and_its_counts_are_consistent():
    # Columns with 5 values on 3000 rows: every pair of columns has rows that agree on it but
    # lie on both sides of the planted rule (constructed here, so known), so the search may
    # skip refitting those pairs; the rule itself must still come out, and its note must
    # count no more rows checked than candidates ranked.
    X = integer_table(3000, 6, seed=5, high=4)
    names = ["a", "b", "c", "d", "e", "f"]
    positive = X[:, 0] + 2 * X[:, 1] - X[:, 2] >= 3
    equation = find_linear_equation(X, positive, names, seed=0)
    assert equation.text == "a + 2*b - c >= 3"
    assert equation.violations == 0
    counts = next(note.figures for note in equation.notes if note_code(note) == "candidates")
    assert 1 <= counts["checked"] <= counts["tried"], counts
    assert np.array_equal(exact_mask(equation, as_records(X, names)), positive)


def test_flipped_labels_are_exactly_the_violating_rows():
    # Planted rule a + b + c <= 14 with six labels flipped on purpose: the rule must come back
    # unchanged and name exactly the flipped rows (by their row ids) as violations.
    rng = np.random.default_rng(7)
    X = integer_table(1500, 5, seed=7)
    positive = X[:, 0] + X[:, 1] + X[:, 2] <= 14
    flipped = rng.choice(1500, size=6, replace=False)
    positive[flipped] = ~positive[flipped]
    row_ids = np.array([f"obj{i:04d}" for i in range(1500)])
    names = ["a", "b", "c", "noise_0", "noise_1"]
    equation = find_linear_equation(X, positive, names, row_ids=row_ids)
    assert equation.text == "a + b + c <= 14"
    assert equation.violations == 6
    assert sorted(equation.violating_rows) == sorted(row_ids[flipped].tolist())


@pytest.mark.parametrize("offset", [0, 2**49], ids=["small", "near-2^49"])
def test_planted_rule_is_found_whatever_the_size_of_the_values(offset):
    # Planted rule a - 2*b + c >= 4 (known by construction) on integers shifted by a common
    # offset, so that the rule's left side moves by a multiple of the offset only through
    # a - 2*b + c's coefficient sum, which is 0. Near 2**49 the candidates' scores pass 2**50
    # and are ranked by sorting the scores themselves; small values take the other way. Both
    # must find the same rule with no violation, checked row by row in Python Fractions.
    X = integer_table(3000, 4, seed=11)
    positive = X[:, 0] - 2 * X[:, 1] + X[:, 2] >= 4
    shifted = X.astype(np.int64) + offset
    names = ["a", "b", "c", "d"]
    equation = find_linear_equation(shifted, positive, names)
    assert equation.text == "a - 2*b + c >= 4"
    assert equation.violations == 0
    records = [{name: int(value) for name, value in zip(names, row)} for row in shifted.tolist()]
    assert np.array_equal(exact_mask(equation, records), positive)


def test_hint_from_a_fitted_separator_is_rounded_to_the_rule():
    # A linear support vector machine fitted in raw units gives a float normal close to
    # (2, -1); the rounded equation must be the planted rule and the notes must say how the
    # unrounded separator did.
    X = integer_table(800, 2, seed=3)
    positive = 2 * X[:, 0] - X[:, 1] >= 3
    machine = LinearSVC(C=10.0, max_iter=20000).fit(X, positive)
    hint = (machine.coef_[0], machine.intercept_[0])
    equation = find_linear_equation(X, positive, ["a", "b"], hint=hint)
    assert equation.text == "2*a - b >= 3"
    assert any("before rounding" in note for note in equation.notes)


def test_real_valued_rule_keeps_its_rational_normal():
    # Planted rule a - 2b >= 0.3 on normally distributed (not exact) values, with two noise
    # columns: the normal comes back as (1, -2), evaluated in floating point and said so.
    rng = np.random.default_rng(12)
    X = rng.normal(size=(800, 4))
    positive = X[:, 0] - 2 * X[:, 1] >= 0.3
    equation = find_linear_equation(X, positive, ["a", "b", "noise_0", "noise_1"])
    assert [(t.feature, t.coef) for t in equation.terms] == [("a", 1), ("b", -2)]
    assert equation.relation == ">="
    assert equation.violations == 0
    assert not equation.exact
    assert any("floating point" in note for note in equation.notes)


def test_max_terms_is_respected():
    # With three terms needed for the exact planted rule, one term is the best allowed.
    X = integer_table(900, 3, seed=5)
    positive = X[:, 0] + X[:, 1] + X[:, 2] <= 12
    equation = find_linear_equation(X, positive, ["a", "b", "c"], max_terms=1)
    assert len(equation.terms) == 1
    assert equation.violations > 0


def test_same_seed_gives_the_same_equation():
    X = integer_table(700, 4, seed=9)
    positive = X[:, 0] - 2 * X[:, 3] >= -4
    first = find_linear_equation(X, positive, list("abcd"), seed=3)
    second = find_linear_equation(X, positive, list("abcd"), seed=3)
    assert first == second


def test_large_planted_table_is_searched_on_a_sample_and_verified_on_every_row():
    # 200k rows: the search uses a sample, the constant and the violation count use all rows.
    X = integer_table(200_000, 6, seed=21, low=-20, high=20)
    positive = X[:, 1] + 2 * X[:, 2] - X[:, 4] >= 4
    equation = find_linear_equation(X, positive, [f"x{i}" for i in range(6)], sample_size=20000)
    assert equation.text == "x1 + 2*x2 - x4 >= 4"
    assert equation.violations == 0
    assert equation.n_rows == 200_000
    assert any("sample of 20000 of 200000 rows" in note for note in equation.notes)
    assert np.array_equal(equation.holds(X), positive)


# ------------------------------------------------------------------------------------------
# Fisher's iris data (shipped by scikit-learn)
# ------------------------------------------------------------------------------------------


def test_iris_setosa_is_linearly_separated_with_few_terms():
    # Fisher (1936) / scikit-learn's iris description: "One class is linearly separable from
    # the other 2". A single threshold on a petal measurement already does it, so the sparsest
    # exact equation has one term (at most two is the target).
    iris = load_iris()
    names = list(iris.feature_names)
    positive = iris.target == 0
    equation = find_linear_equation(iris.data, positive, names, positive_class="setosa")
    assert equation.violations == 0
    assert 1 <= len(equation.terms) <= 2, equation.text
    assert all(term.feature.startswith("petal") for term in equation.terms), equation.text
    # The measurements are written with one decimal: evaluated exactly as decimals.
    assert equation.exact
    assert np.array_equal(exact_mask(equation, as_records(iris.data, names)), positive)
    assert equation.to_json()["positive_class"] == "setosa"


def test_iris_one_vs_rest_gives_one_checked_equation_per_class():
    # One equation per species; setosa separates exactly (Fisher 1936), the other two do not
    # separate linearly from the rest (scikit-learn's iris description), and every reported
    # violation count must match a recount done independently in exact arithmetic.
    iris = load_iris()
    names = list(iris.feature_names)
    labels = iris.target_names[iris.target]
    equations = one_vs_rest_equations(iris.data, labels, names, max_terms=2)
    assert list(equations) == ["setosa", "versicolor", "virginica"]
    records = as_records(iris.data, names)
    for label, equation in equations.items():
        assert equation.positive_class == label
        recount = int((exact_mask(equation, records) != (labels == label)).sum())
        assert recount == equation.violations, (label, equation.text)
    assert equations["setosa"].violations == 0
    # A small number of exceptions at most for virginica (one overlapping pair of species).
    assert equations["virginica"].violations <= 6, equations["virginica"].text


# ------------------------------------------------------------------------------------------
# Output formats
# ------------------------------------------------------------------------------------------


def test_to_json_has_exactly_the_fields_of_the_separate_contract():
    # Field names from the `separate` JSON contract in the design document.
    X = integer_table(600, 2, seed=1)
    positive = 2 * X[:, 0] - X[:, 1] >= 3
    row_ids = np.arange(600, dtype=np.int64) + 100
    positive[5] = not positive[5]
    equation = find_linear_equation(X, positive, ["a", "b"], row_ids=row_ids)
    payload = equation.to_json()
    assert set(payload) == {
        "terms",
        "relation",
        "constant",
        "positive_class",
        "text",
        "violations",
        "violating_rows",
        # added beside the contract's fields (more may be added, none renamed)
        "positives",
        "rows_checked",
    }
    assert payload["positives"] == int(positive.sum()) and payload["rows_checked"] == 600
    assert payload["terms"] == [{"feature": "a", "coef": "2"}, {"feature": "b", "coef": "-1"}]
    assert payload["relation"] == ">="
    assert payload["constant"] == "3"
    assert payload["violating_rows"] == [105]
    assert type(payload["violating_rows"][0]) is int
    json.dumps(payload)  # plain JSON types only


def test_text_and_latex_of_rational_terms():
    equation = LinearEquation(
        terms=(Term("h_11", Fraction(2)), Term("h_21", Fraction(-1, 3))),
        relation="<=",
        constant=Fraction(-5, 2),
        positive_class=True,
        violations=0,
        violating_rows=(),
        n_rows=0,
        method="",
        notes=(),
    )
    assert equation.text == "2*h_11 - 1/3*h_21 <= -5/2"
    assert equation.latex() == (r"2\,\mathrm{h\_11} - \tfrac{1}{3}\,\mathrm{h\_21} "
                                r"\leq -\tfrac{5}{2}")
    assert equation.to_json()["terms"][1] == {"feature": "h_21", "coef": "-1/3"}


def test_a_category_indicator_is_written_as_an_iverson_bracket():
    # the Iverson bracket [P] (1 when P holds, else 0; Knuth, "Two notes on notation", Amer.
    # Math. Monthly 99, 1992): "mobius=0 <= 0" set as mobius = 0 <= 0 reads as a chain
    equation = LinearEquation(
        terms=(Term("mobius=0", Fraction(1)), Term("Omega", Fraction(-1, 2))),
        relation="<=", constant=Fraction(0), positive_class=True, violations=0,
        violating_rows=(), n_rows=0, method="", notes=())
    assert equation.latex() == (r"[\mathrm{mobius} = \mathrm{0}] - \tfrac{1}{2}\,"
                                r"\mathrm{Omega} \leq 0")
    assert equation.text == "[mobius=0] - 1/2*Omega <= 0"
    assert equation.to_json()["terms"][0]["feature"] == "mobius=0"   # the feature's name
    square = LinearEquation(
        terms=(Term("galois=S3*galois=S3", Fraction(1), ("galois=S3", "galois=S3")),),
        relation=">=", constant=Fraction(1), positive_class=True, violations=0,
        violating_rows=(), n_rows=0, method="", notes=())
    assert square.latex() == r"[\mathrm{galois} = \mathrm{S3}]^{2} \geq 1"
    assert square.text == "[galois=S3]^2 >= 1"


def test_holds_is_exact_beyond_float_precision():
    # Python integers are the reference: 2**60 + 1 and 2**60 are the same float64, so only
    # exact arithmetic sees that a - b >= 1 holds on the first row and not on the second.
    equation = LinearEquation(
        terms=(Term("a", Fraction(1)), Term("b", Fraction(-1))),
        relation=">=",
        constant=Fraction(1),
        positive_class=True,
        violations=0,
        violating_rows=(),
        n_rows=2,
        method="",
        notes=(),
        feature_names=("a", "b"),
    )
    big = 2**60
    a = np.array([big + 1, big], dtype=object)
    b = np.array([big, big], dtype=object)
    assert float(a[0]) == float(a[1])
    assert equation.holds({"a": a, "b": b}).tolist() == [True, False]


def test_inexact_columns_are_evaluated_in_floating_point_and_say_so():
    X = integer_table(500, 2, seed=4)
    positive = X[:, 0] - X[:, 1] >= 1
    equation = find_linear_equation(X, positive, ["a", "b"], exact_columns=[False, True])
    assert equation.violations == 0
    assert not equation.exact
    assert any("floating point" in note and "'a'" in note for note in equation.notes)


# ------------------------------------------------------------------------------------------
# Degree-2 polynomial kernel machines
# ------------------------------------------------------------------------------------------


def circle_table(seed: int):
    X = integer_table(500, 3, seed=seed, low=-6, high=6)
    positive = X[:, 0] ** 2 + X[:, 1] ** 2 <= 20
    return X, positive


@pytest.mark.parametrize(
    ("gamma", "coef0"), [(0.5, 1.0), ("scale", 2.0), (0.1, 0.0)], ids=["g0.5", "scale", "r0"]
)
def test_poly2_expansion_reproduces_the_decision_function(gamma, coef0):
    # scikit-learn documents the polynomial kernel as (gamma <x, x'> + coef0)^degree and the
    # decision function as sum_i dual_coef_i K(sv_i, x) + intercept; the expansion must agree
    # with svc.decision_function to 1e-8 relative on the data.
    X, positive = circle_table(seed=2)
    scaler = StandardScaler().fit(X)
    svc = SVC(kernel="poly", degree=2, gamma=gamma, coef0=coef0, C=10.0)
    svc.fit(scaler.transform(X), positive)
    expansion = expand_poly2(svc, scaler, ["a", "b", "c"])
    reference = svc.decision_function(scaler.transform(X))
    error = np.max(np.abs(expansion.decision(X) - reference)) / np.max(np.abs(reference))
    assert error < 1e-8, error


def test_poly2_expansion_accepts_a_pipeline():
    X, positive = circle_table(seed=3)
    pipeline = make_pipeline(StandardScaler(), SVC(kernel="poly", degree=2, coef0=1.0, C=10.0))
    pipeline.fit(X, positive)
    expansion = expand_poly2(pipeline, None, ["a", "b", "c"])
    reference = pipeline.decision_function(X)
    error = np.max(np.abs(expansion.decision(X) - reference)) / np.max(np.abs(reference))
    assert error < 1e-8, error
    assert expansion.positive_class == pipeline.classes_[1]


def test_poly2_equation_rounds_to_the_planted_circle():
    # Planted rule a^2 + b^2 <= 20 on integer points; the kernel machine separates it and its
    # rounded polynomial must be the rule itself, verified on every row.
    X, positive = circle_table(seed=4)
    scaler = StandardScaler().fit(X)
    svc = SVC(kernel="poly", degree=2, gamma=0.5, coef0=1.0, C=100.0)
    svc.fit(scaler.transform(X), positive)
    equation = poly2_equation(svc, scaler, ["a", "b", "c"], X, positive)
    assert isinstance(equation, PolynomialEquation)
    assert equation.text == "a^2 + b^2 <= 20"
    assert equation.violations == 0
    assert equation.expansion is not None
    payload = equation.to_json()
    assert payload["terms"][0] == {"feature": "a^2", "coef": "1", "factors": ["a", "a"]}
    assert np.array_equal(exact_mask(equation, as_records(X, ["a", "b", "c"])), positive)


def test_poly2_rejects_other_kernels():
    X, positive = circle_table(seed=5)
    svc = SVC(kernel="rbf").fit(X, positive)
    with pytest.raises(StepError, match="kernel='poly' and degree=2"):
        expand_poly2(svc, None, ["a", "b", "c"])


def test_surrogate_quadratic_agrees_with_an_rbf_machine():
    # A sparse quadratic stand-in for an RBF machine on the planted circle: agreement is the
    # fraction of rows where the two predict the same, and must be high here.
    X, positive = circle_table(seed=6)
    scaler = StandardScaler().fit(X)
    machine = SVC(kernel="rbf", C=10.0).fit(scaler.transform(X), positive)
    predicted = machine.predict(scaler.transform(X))
    equation = surrogate_quadratic(X, predicted, ["a", "b", "c"], max_terms=4)
    assert equation.agreement == pytest.approx(1 - equation.violations / X.shape[0])
    assert equation.agreement >= 0.97, (equation.agreement, equation.text)
    assert len(equation.terms) <= 4
    disagree = np.flatnonzero(equation.holds(X) != predicted)
    assert sorted(equation.violating_rows) == disagree.tolist()


# ------------------------------------------------------------------------------------------
# Formulas: Pick's theorem
# ------------------------------------------------------------------------------------------


def convex_hull(points):
    """Counter-clockwise hull of lattice points (monotone chain), no collinear vertices."""
    points = sorted(set(points))

    def turn(o, a, b):
        return (a[0] - o[0]) * (b[1] - o[1]) - (a[1] - o[1]) * (b[0] - o[0])

    lower, upper = [], []
    for point in points:
        while len(lower) >= 2 and turn(lower[-2], lower[-1], point) <= 0:
            lower.pop()
        lower.append(point)
    for point in reversed(points):
        while len(upper) >= 2 and turn(upper[-2], upper[-1], point) <= 0:
            upper.pop()
        upper.append(point)
    return lower[:-1] + upper[:-1]


def lattice_polygons(count: int, seed: int):
    """Convex lattice polygons in [0, 8]^2 with exact area (shoelace) and point counts."""
    rng = np.random.default_rng(seed)
    rows = []
    while len(rows) < count:
        points = [tuple(int(v) for v in rng.integers(0, 9, 2)) for _ in range(rng.integers(3, 7))]
        hull = convex_hull(points)
        if len(hull) < 3:
            continue
        edges = list(zip(hull, hull[1:] + hull[:1]))
        area = Fraction(abs(sum(p[0] * q[1] - q[0] * p[1] for p, q in edges)), 2)
        interior = boundary = 0
        for x in range(9):
            for y in range(9):
                sides = [(q[0] - p[0]) * (y - p[1]) - (q[1] - p[1]) * (x - p[0]) for p, q in edges]
                if all(side > 0 for side in sides):
                    interior += 1
                elif all(side >= 0 for side in sides):
                    boundary += 1
        rows.append((interior, boundary, len(hull), area))
    return rows


def test_pick_formula_for_lattice_polygon_area():
    # Pick (1899): a lattice polygon has area I + B/2 - 1 (I interior, B boundary points).
    # Areas come from the shoelace formula and point counts from enumeration, so the formula
    # is not put in by hand; the vertex count is a distractor.
    rows = lattice_polygons(200, seed=8)
    assert all(area == i + Fraction(b, 2) - 1 for i, b, _, area in rows)  # the data obey Pick
    X = np.array([row[:3] for row in rows], dtype=float)
    area = np.array([float(row[3]) for row in rows])
    names = ["interior_points", "boundary_points", "vertices"]
    formula = find_formula(X, area, names, target_name="area")
    assert isinstance(formula, Formula)
    assert formula.text == "area = interior_points + 1/2*boundary_points - 1"
    assert formula.rows_off == 0
    assert formula.max_residual == 0.0
    assert formula.exact
    payload = formula.to_json()
    assert {"terms", "constant", "text", "max_residual", "rows_off", "off_rows"} <= set(payload)
    assert payload["constant"] == "-1"
    assert payload["terms"][1] == {"feature": "boundary_points", "coef": "1/2"}


def test_formula_names_the_rows_that_break_it():
    # The same polygons with two areas altered by 1: the formula stays, the two rows are off.
    rows = lattice_polygons(150, seed=9)
    X = np.array([row[:3] for row in rows], dtype=float)
    area = np.empty(len(rows), dtype=object)
    area[:] = [row[3] for row in rows]  # exact Fractions, as a table's rational column holds
    area[[4, 77]] = area[[4, 77]] + 1
    row_ids = [f"P{i}" for i in range(len(rows))]
    names = ["interior_points", "boundary_points", "vertices"]
    formula = find_formula(X, area, names, row_ids=row_ids, target_name="area")
    assert formula.text == "area = interior_points + 1/2*boundary_points - 1"
    assert formula.rows_off == 2
    assert sorted(formula.off_rows) == ["P4", "P77"]
    assert formula.max_residual == 1.0


# ------------------------------------------------------------------------------------------
# Rejected input
# ------------------------------------------------------------------------------------------


def test_one_class_is_rejected():
    X = integer_table(50, 2, seed=0)
    with pytest.raises(StepError, match="same side"):
        find_linear_equation(X, np.ones(50, dtype=bool), ["a", "b"])


def test_name_count_mismatch_is_rejected():
    X = integer_table(50, 2, seed=0)
    with pytest.raises(StepError, match="2 feature columns"):
        find_linear_equation(X, X[:, 0] > 4, ["a"])


def test_missing_value_is_rejected_with_row_and_feature():
    X = integer_table(50, 2, seed=0)
    X[17, 1] = np.nan
    with pytest.raises(StepError, match=r"feature 'b', row 17"):
        find_linear_equation(X, X[:, 0] > 4, ["a", "b"])


def test_one_vs_rest_needs_two_classes():
    X = integer_table(20, 2, seed=0)
    with pytest.raises(StepError, match="at least two"):
        one_vs_rest_equations(X, ["x"] * 20, ["a", "b"])


# ------------------------------------------------------------------------------------------
# Workers
# ------------------------------------------------------------------------------------------

_ONE_CORE_SEARCH = """
import json, os, sys
import numpy as np
os.sched_setaffinity(0, {min(os.sched_getaffinity(0))})
from analysis.equations import find_linear_equation
X = np.array(json.loads(sys.stdin.read()))
y = 3 * X[:, 0] - 2 * X[:, 2] + X[:, 5] >= 10
print(json.dumps(find_linear_equation(X, y, [f"c{j}" for j in range(X.shape[1])]).to_json()))
"""


@pytest.mark.skipif(not hasattr(os, "sched_setaffinity") or len(os.sched_getaffinity(0)) < 2,
                    reason="needs two usable cores to compare one worker with several")
def test_the_search_gives_the_same_equation_on_one_core_and_on_several():
    # The planted rule is known by construction; the refits and sorts that run on every core
    # must give the same equation, constant, violations and notes as one core does alone.
    X = integer_table(3000, 8, seed=21, low=-10, high=10)
    names = [f"c{j}" for j in range(8)]
    y = 3 * X[:, 0] - 2 * X[:, 2] + X[:, 5] >= 10
    several = find_linear_equation(X, y, names).to_json()
    done = subprocess.run([sys.executable, "-c", _ONE_CORE_SEARCH], input=json.dumps(X.tolist()),
                          capture_output=True, text=True, check=True, timeout=600,
                          cwd=Path(__file__).resolve().parents[1])
    one = json.loads(done.stdout)
    assert several["text"] == "3*c0 - 2*c2 + c5 >= 10"
    assert one == json.loads(json.dumps(several))


def _simplest_by_search(low: Fraction, high: Fraction) -> Fraction:
    # the definition itself (common practice): smallest denominator first, then the
    # numerator of smallest absolute value, strictly inside the interval
    q = 1
    while True:
        inside = [Fraction(p, q) for p in range(math.floor(low * q) - 1, math.ceil(high * q) + 2)
                  if low < Fraction(p, q) < high]
        if inside:
            return min(inside, key=lambda f: (abs(f.numerator), f))
        q += 1


def test_the_simplest_rational_inside_a_gap_is_the_one_a_search_finds():
    from analysis.equations import simplest_inside

    rng = np.random.default_rng(3)
    for _ in range(300):
        a, b = sorted(Fraction(int(x), int(d)) for x, d in zip(rng.integers(-5000, 5000, 2),
                                                              rng.integers(1, 400, 2)))
        if a == b:
            continue
        assert simplest_inside(a, b) == _simplest_by_search(a, b), (a, b)


def test_a_long_attained_bound_gives_way_to_a_short_constant_with_the_same_rows():
    # decimals rounded from real numbers (six places) make the attained bound's denominator
    # 10**6; the constant is the simplest giving the same rows, and the gap note keeps the
    # attained bound
    from analysis.equations import SHARP_DENOMINATOR, find_linear_equation

    rng = np.random.default_rng(0)
    x = np.round(rng.uniform(0, 10, 400), 6)
    positive = x >= np.sort(x)[150]
    found = find_linear_equation(x[:, None], positive, ["x"])
    assert found.violations == 0 and found.terms[0].coef == 1
    low, high = np.sort(x)[149], np.sort(x)[150]
    assert Fraction(str(low)) < found.constant <= Fraction(str(high))
    assert found.constant.denominator <= SHARP_DENOMINATOR < Fraction(str(high)).denominator
    gap = [n for n in found.notes if getattr(n, "code", "") == "constant_gap"]
    assert gap and gap[0].figures["high"] == Fraction(str(high))
