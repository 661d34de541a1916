"""Readable exact equations in the table's own invariants.

A fitted separator is a vector of floats in standardized units; a mathematician wants
``2*a - b >= 3`` and the list of objects that break it. This module turns separators (linear,
degree-2 polynomial kernel, or a sparse quadratic stand-in for an RBF machine) and regressions
into equations with small rational coefficients, re-chooses the constant exactly on every row,
and verifies the result row by row.

Everything works on plain numpy arrays: ``X`` holds one row per object and one column per
feature in the table's own units (not scaled). Columns whose values are integers, or decimals
with at most six digits after the point, are evaluated exactly in integer arithmetic (int64 when
the magnitudes allow it, Python integers otherwise); anything else is evaluated in floating
point and the equation's notes say so.
"""

from __future__ import annotations

import itertools
import math
import warnings
from collections import Counter
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from fractions import Fraction
from typing import Any

import numpy as np

from analysis.errors import StepError
from analysis.notes import Note, note_code

__all__ = [
    "Formula",
    "LinearEquation",
    "PolynomialEquation",
    "QuadraticForm",
    "Term",
    "choose_constant",
    "expand_poly2",
    "find_formula",
    "find_linear_equation",
    "one_vs_rest_equations",
    "poly2_equation",
    "surrogate_quadratic",
]

# Integer arithmetic stays in int64 while every intermediate is below this bound.
_INT64_SAFE = 2**62
# Coefficients larger than this after clearing denominators are not "readable" any more.
_MAX_HEIGHT = 10**6
# Decimals with more digits than this are treated as real numbers, not exact values.
_MAX_DECIMALS = 6
# Rows given to each linear program; larger samples make HiGHS slow on overlapping classes.
_LP_ROWS = 1500
# Rows used to fit the L1-logistic path (it proposes supports; the rest uses more rows).
_PATH_ROWS = 5000
# Multiples of the smallest useful C along the L1-logistic path. Past a few hundred the fits
# are nearly unpenalized, take many times longer and add supports the refits already cover.
_PATH_FACTORS = (1.2, 3, 10, 30, 100, 300)
# Rows used to fit the sparse path in the degree-2 feature space.
_QUADRATIC_PATH_ROWS = 5000
# Supports (sets of features) refitted one by one.
# The 1-norm programmes on every feature: their penalties, in rows' worth of hinge loss.
_PENALTY_SCALES = (0.01, 0.3)
_MAX_SUPPORTS = 16
# Rows used to rank every rounded candidate, candidates kept for ranking on the whole sample,
# and candidates checked exactly on every row.
_RANKING_ROWS = 1000
_SHORTLIST = 100
_FINALISTS = 10
# Largest support tried term by term when thinning a fitted direction.
_TRUNCATION_TERMS = 8


# ----------------------------------------------------------------------------------------------
# Results
# ----------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Term:
    """One term of an equation: ``coef`` times a feature (or a product of features).

    ``factors`` is empty for a plain feature; for a degree-2 monomial it names the two
    features multiplied (``("a", "b")`` for ``a*b``, ``("a", "a")`` for ``a^2``).
    """

    feature: str
    coef: Fraction
    factors: tuple[str, ...] = ()

    @property
    def degree(self) -> int:
        """Number of features multiplied in this term (1 for a plain feature)."""
        return len(self.factors) or 1

    def factor_names(self) -> tuple[str, ...]:
        """The features multiplied in this term (the feature itself for a plain term)."""
        return self.factors or (self.feature,)


@dataclass(frozen=True)
class LinearEquation:
    """A separating inequality ``sum(coef * feature) relation constant`` with exact rationals.

    A row is predicted ``positive_class`` exactly when the inequality holds. ``violations``
    counts the rows where that prediction is wrong and ``violating_rows`` names them by row id.

    Example: ``eq.text == "2*a - b >= 3"``, ``eq.holds(X)`` gives the rows predicted positive.
    """

    terms: tuple[Term, ...]
    relation: str
    constant: Fraction
    positive_class: Any
    violations: int
    violating_rows: tuple
    n_rows: int
    method: str
    notes: tuple[str, ...]
    feature_names: tuple[str, ...] = ()
    exact: bool = True
    # the same inequality in a column's own values when its one term is a log-scaled
    # feature (``"disc >= 0"`` for ``"slog(disc) >= 0"``); "" otherwise
    in_columns: str = ""
    # rows of ``positive_class`` among the ``n_rows`` checked (None where not counted): the
    # rule that names no object (or every object) breaks on the fewer of them and the rest
    positives: int | None = None

    def constant_rule(self) -> tuple[str, int] | None:
        """("none" or "all", violations) of the better rule that predicts ``positive_class``
        for no object or for every object, on the same rows; None when not counted."""
        return None if self.positives is None else constant_rule(self.n_rows, self.positives)

    @property
    def text(self) -> str:
        """Plain text, e.g. ``"2*a - b >= 3"``."""
        return f"{_format_sum(self.terms)} {self.relation} {_fraction_text(self.constant)}"

    def latex(self) -> str:
        """LaTeX for the inequality, e.g. ``2\\mathrm{a} - \\mathrm{b} \\geq 3``."""
        relation = r"\geq" if self.relation == ">=" else r"\leq"
        return f"{_latex_sum(self.terms)} {relation} {_latex_number(self.constant)}"

    def to_json(self) -> dict:
        """The ``equation`` object of the ``separate`` JSON contract (plain JSON types)."""
        return {
            "terms": [_term_json(term) for term in self.terms],
            "relation": self.relation,
            "constant": _fraction_text(self.constant),
            "positive_class": _plain(self.positive_class),
            "text": self.text,
            "violations": int(self.violations),
            "violating_rows": [_plain(row) for row in self.violating_rows],
            **({"in_columns": self.in_columns} if self.in_columns else {}),
            **({"positives": int(self.positives), "rows_checked": int(self.n_rows)}
               if self.positives is not None else {}),
        }

    def holds(self, X) -> np.ndarray:
        """Boolean mask of the rows predicted ``positive_class`` (where the inequality holds).

        ``X`` is either a 2-D array whose columns are the features the equation was found on
        (in ``feature_names`` order), or a mapping (dict, pandas DataFrame) from feature name
        to a column of values. Integer and short-decimal columns are evaluated exactly.
        """
        values, exact = term_scores(self.terms, X, self.feature_names)
        if exact:
            scores, denominator = values
            return _compare(scores, denominator, self.constant, self.relation)
        return _compare(values, 1, self.constant, self.relation)


@dataclass(frozen=True)
class PolynomialEquation(LinearEquation):
    """A separating inequality whose terms are monomials of degree at most 2.

    ``agreement`` (for a stand-in fitted to another machine's labels) is the fraction of rows
    where the equation and that machine agree; ``expansion`` is the machine's own polynomial
    with float coefficients when the equation came from expanding a polynomial kernel.
    """

    agreement: float | None = None
    expansion: QuadraticForm | None = None

    def to_json(self) -> dict:
        """The ``equation`` JSON object, with ``degree`` and, when known, ``agreement``."""
        result = super().to_json()
        result["degree"] = max((term.degree for term in self.terms), default=1)
        if self.agreement is not None:
            result["agreement"] = float(self.agreement)
        return result


@dataclass(frozen=True)
class Formula:
    """An exact formula ``target = sum(coef * feature) + constant`` and how well it holds.

    ``rows_off`` counts the rows where the formula is not exactly right, ``off_rows`` names
    them, ``max_residual`` is the largest absolute difference between target and formula.
    """

    target: str
    terms: tuple[Term, ...]
    constant: Fraction
    max_residual: float
    rows_off: int
    off_rows: tuple
    n_rows: int
    method: str
    notes: tuple[str, ...]
    feature_names: tuple[str, ...] = ()
    exact: bool = True

    @property
    def text(self) -> str:
        """Plain text, e.g. ``"area = interior_points + 1/2*boundary_points - 1"``."""
        return f"{self.target} = {_format_affine(self.terms, self.constant)}"

    def latex(self) -> str:
        """LaTeX for the formula."""
        if not self.terms:
            return f"{_latex_name(self.target)} = {_latex_number(self.constant)}"
        right = _latex_sum(self.terms)
        if self.constant != 0:
            sign = "-" if self.constant < 0 else "+"
            right += f" {sign} {_latex_number(abs(self.constant))}"
        return f"{_latex_name(self.target)} = {right}"

    def to_json(self) -> dict:
        """Plain JSON: terms, constant, text, max_residual, rows_off, off_rows."""
        return {
            "target": self.target,
            "terms": [_term_json(term) for term in self.terms],
            "constant": _fraction_text(self.constant),
            "text": self.text,
            "max_residual": float(self.max_residual),
            "rows_off": int(self.rows_off),
            "off_rows": [_plain(row) for row in self.off_rows],
        }

    def predict(self, X) -> np.ndarray:
        """Values of the right-hand side as floats (X as for ``LinearEquation.holds``)."""
        values, exact = term_scores(self.terms, X, self.feature_names)
        if exact:
            total, denominator = values
            return np.asarray(total, dtype=float) / denominator + float(self.constant)
        return values + float(self.constant)


@dataclass(frozen=True, eq=False)
class QuadraticForm:
    """A degree-2 polynomial ``constant + linear . x + x^T quadratic x`` in the raw features.

    ``quadratic`` is symmetric; the coefficient of the monomial ``x_j*x_k`` (j < k) is
    ``2 * quadratic[j, k]``. The machine predicts ``positive_class`` where the value is > 0.
    """

    names: tuple[str, ...]
    constant: float
    linear: np.ndarray
    quadratic: np.ndarray
    positive_class: Any = True

    def decision(self, X) -> np.ndarray:
        """Value of the polynomial on each row of ``X`` (columns in ``names`` order)."""
        X = np.asarray(X, dtype=float)
        return self.constant + X @ self.linear + np.einsum("ij,jk,ik->i", X, self.quadratic, X)

    def monomials(self) -> list[tuple[tuple[int, ...], float]]:
        """Monomials (as feature index tuples) and float coefficients, constant excluded."""
        p = len(self.names)
        items: list[tuple[tuple[int, ...], float]] = [
            ((j,), float(self.linear[j])) for j in range(p)
        ]
        for j in range(p):
            for k in range(j, p):
                factor = 1.0 if j == k else 2.0
                items.append(((j, k), factor * float(self.quadratic[j, k])))
        return items

    @property
    def text(self) -> str:
        """The polynomial with float coefficients, for display."""
        parts = []
        for monomial, coef in self.monomials():
            if coef != 0.0:
                parts.append(f"{coef:+.6g}*{_monomial_label(monomial, self.names)}")
        parts.append(f"{self.constant:+.6g}")
        return " ".join(parts) + " > 0"


# ----------------------------------------------------------------------------------------------
# Formatting
# ----------------------------------------------------------------------------------------------


def _fraction_text(value: Fraction) -> str:
    value = Fraction(value)
    if value.denominator == 1:
        return str(value.numerator)
    return f"{value.numerator}/{value.denominator}"


def _monomial_label(monomial: tuple[int, ...], names: Sequence[str]) -> str:
    if len(monomial) == 1:
        return names[monomial[0]]
    first, second = monomial
    if first == second:
        return f"{names[first]}^2"
    return f"{names[first]}*{names[second]}"


def _format_sum(terms: Sequence[Term]) -> str:
    if not terms:
        return "0"
    pieces = []
    for position, term in enumerate(terms):
        magnitude = abs(term.coef)
        name = _term_text(term)
        body = name if magnitude == 1 else f"{_fraction_text(magnitude)}*{name}"
        if position == 0:
            pieces.append(f"-{body}" if term.coef < 0 else body)
        else:
            pieces.append(f" {'-' if term.coef < 0 else '+'} {body}")
    return "".join(pieces)


def constant_rule(n_rows: int, positives: int) -> tuple[str, int]:
    """("none" or "all", violations) of the better of the rules that predict a class held by
    ``positives`` of ``n_rows`` rows for no row or for every row."""
    others = n_rows - positives
    return ("none", positives) if positives <= others else ("all", others)


def _term_text(term: Term) -> str:
    """A term's features in plain text, a category's indicator ``column=level`` in
    brackets (``[galois=S3]``, the Iverson bracket: 1 where it holds, 0 elsewhere)."""
    factors = term.factor_names()
    if not any(_is_indicator(name) for name in factors):
        return term.feature
    if len(factors) == 2 and factors[0] == factors[1]:
        return f"[{factors[0]}]^2"
    return "*".join(f"[{name}]" if _is_indicator(name) else name for name in factors)


def _is_indicator(name: str) -> bool:
    column, equals, level = str(name).partition("=")
    return bool(equals and column and level)


def _format_affine(terms: Sequence[Term], constant: Fraction) -> str:
    if not terms:
        return _fraction_text(constant)
    text = _format_sum(terms)
    if constant != 0:
        text += f" {'-' if constant < 0 else '+'} {_fraction_text(abs(constant))}"
    return text


_LATEX_ESCAPES = {
    "\\": r"\backslash{}",
    "_": r"\_",
    "%": r"\%",
    "&": r"\&",
    "#": r"\#",
    "$": r"\$",
    "{": r"\{",
    "}": r"\}",
    "^": r"\hat{}",
    "~": r"\sim{}",
    " ": r"\ ",
}


def _latex_name(name: str) -> str:
    return r"\mathrm{" + "".join(_LATEX_ESCAPES.get(ch, ch) for ch in str(name)) + "}"


def _latex_number(value: Fraction) -> str:
    value = Fraction(value)
    if value.denominator == 1:
        return str(value.numerator)
    sign = "-" if value < 0 else ""
    return rf"{sign}\tfrac{{{abs(value.numerator)}}}{{{value.denominator}}}"


def _latex_feature(name: str) -> str:
    """LaTeX for a feature: a category's indicator ``column=level`` (1 on the rows holding
    the level, 0 elsewhere) as the Iverson bracket [column = level], so that an inequality
    in it never reads as a chain of relations; any other name upright."""
    if not _is_indicator(name):
        return _latex_name(name)
    column, _, level = str(name).partition("=")
    return rf"[{_latex_name(column)} = {_latex_name(level)}]"


def _latex_term_body(term: Term) -> str:
    factors = term.factor_names()
    if len(factors) == 2 and factors[0] == factors[1]:
        return _latex_feature(factors[0]) + "^{2}"
    return r"\,".join(_latex_feature(name) for name in factors)


def _latex_sum(terms: Sequence[Term]) -> str:
    if not terms:
        return "0"
    pieces = []
    for position, term in enumerate(terms):
        magnitude = abs(term.coef)
        coefficient = "" if magnitude == 1 else _latex_number(magnitude)
        # a thin space keeps "2 interior_points" from reading as one symbol
        body = (coefficient + r"\," if coefficient else "") + _latex_term_body(term)
        if position == 0:
            pieces.append(f"-{body}" if term.coef < 0 else body)
        else:
            pieces.append(f" {'-' if term.coef < 0 else '+'} {body}")
    return "".join(pieces)


def _term_json(term: Term) -> dict:
    result = {"feature": term.feature, "coef": _fraction_text(term.coef)}
    if term.factors:
        result["factors"] = list(term.factors)
    return result


def _plain(value):
    """A numpy scalar as the plain Python value JSON understands."""
    if isinstance(value, np.generic):
        return value.item()
    if isinstance(value, Fraction):
        return _fraction_text(value)
    return value


# ----------------------------------------------------------------------------------------------
# Exact arithmetic on columns
# ----------------------------------------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class _ExactColumn:
    """Column values as ``ints / scale`` with ``bound >= max |ints|``."""

    ints: np.ndarray  # int64, or object holding Python ints
    scale: int
    bound: int
    decimals: int = 0


def _object_array(items: list) -> np.ndarray:
    array = np.empty(len(items), dtype=object)
    array[:] = items
    return array


def _max_abs(values: np.ndarray) -> int:
    if values.size == 0:
        return 0
    if values.dtype == object:
        return max(abs(int(v)) for v in values.tolist())
    return int(np.max(np.abs(values)))


def _exact_view(values) -> _ExactColumn | None:
    """The column as exact integers over a scale, or None if its values are not exact."""
    values = np.asarray(values)
    if values.dtype == bool:
        ints = values.astype(np.int64)
        return _ExactColumn(ints, 1, 1)
    if values.dtype.kind in "iu":
        if values.dtype.kind == "u" and values.size and int(values.max()) >= 2**63:
            ints = _object_array([int(v) for v in values.tolist()])
        else:
            ints = values.astype(np.int64)
        return _ExactColumn(ints, 1, _max_abs(ints))
    if values.dtype == object:
        return _exact_from_objects(values)
    if values.dtype.kind != "f":
        return None
    if not np.all(np.isfinite(values)):
        return None
    probe = values[:2048]
    for decimals in range(_MAX_DECIMALS + 1):
        scale = 10**decimals
        # A cheap look at the first values rules out most digit counts for real-valued columns.
        if not np.array_equal(np.rint(probe * scale) / scale, probe):
            continue
        scaled = np.rint(values * scale)
        largest = float(np.max(np.abs(scaled))) if scaled.size else 0.0
        if largest >= 2**53:
            # Past 2**53 a float no longer pins down one integer: the value is not exact.
            return None
        if np.array_equal(scaled / scale, values):
            return _ExactColumn(scaled.astype(np.int64), scale, int(largest), decimals)
    return None


def _exact_from_objects(values: np.ndarray) -> _ExactColumn | None:
    items = []
    for value in values.tolist():
        if isinstance(value, bool | int | np.integer):
            items.append(Fraction(int(value)))
        elif isinstance(value, Fraction):
            items.append(value)
        else:
            return None
    scale = 1
    for value in items:
        scale = math.lcm(scale, value.denominator)
    ints = [int(value * scale) for value in items]
    bound = max((abs(v) for v in ints), default=0)
    array = np.asarray(ints, dtype=np.int64) if bound < 2**63 else _object_array(ints)
    return _ExactColumn(array, scale, bound)


def _product(first: _ExactColumn, second: _ExactColumn) -> _ExactColumn:
    bound = first.bound * second.bound
    if bound < _INT64_SAFE and first.ints.dtype != object and second.ints.dtype != object:
        ints = first.ints * second.ints
    else:
        ints = first.ints.astype(object) * second.ints.astype(object)
    return _ExactColumn(ints, first.scale * second.scale, bound)


def _combine(columns: Sequence[_ExactColumn], coefs: Sequence[Fraction]) -> tuple[np.ndarray, int]:
    """Exact ``sum(coef * column)`` as integers ``S`` over a common denominator ``D``."""
    denominator = 1
    for column, coef in zip(columns, coefs):
        denominator = math.lcm(denominator, Fraction(coef).denominator * column.scale)
    multipliers = []
    bound = 0
    for column, coef in zip(columns, coefs):
        coef = Fraction(coef)
        multiplier = coef.numerator * (denominator // (coef.denominator * column.scale))
        multipliers.append(multiplier)
        bound += abs(multiplier) * column.bound
    n = columns[0].ints.size if columns else 0
    small = bound < _INT64_SAFE and all(column.ints.dtype != object for column in columns)
    if small:
        total = np.zeros(n, dtype=np.int64)
        for column, multiplier in zip(columns, multipliers):
            if multiplier and column.bound:
                total += multiplier * column.ints
        return total, denominator
    total = _object_array([0] * n)
    for column, multiplier in zip(columns, multipliers):
        if multiplier and column.bound:
            total = total + column.ints.astype(object) * multiplier
    return total, denominator


def _compare(scores: np.ndarray, denominator: int, constant: Fraction, relation: str) -> np.ndarray:
    """Rows where ``scores / denominator  relation  constant`` holds, decided exactly."""
    constant = Fraction(constant)
    if scores.dtype.kind == "f":
        # Floating point scores: the constant sits well inside a gap of the scores (see
        # choose_constant), so rounding the constant to a float does not move any row.
        threshold = float(constant)
        return np.asarray(scores >= threshold if relation == ">=" else scores <= threshold)
    p, q = constant.numerator, constant.denominator
    right = p * denominator
    if scores.dtype != object and _max_abs(scores) * q < _INT64_SAFE and abs(right) < _INT64_SAFE:
        left = scores * q
        right = np.int64(right)
    else:
        left = scores.astype(object) * q
    result = left >= right if relation == ">=" else left <= right
    return np.asarray(result, dtype=bool)


# An equation on exact scores states the bound its rows attain when that bound's denominator
# is at most this; past it, the simplest constant giving the same rows.
SHARP_DENOMINATOR = 12


def simplest_inside(low: Fraction, high: Fraction) -> Fraction:
    """The rational with the smallest denominator (then the smallest absolute numerator)
    strictly between ``low`` and ``high`` (``low < high``).

    >>> simplest_inside(Fraction(1038197, 100000), Fraction(1042327, 100000))
    Fraction(52, 5)
    >>> simplest_inside(Fraction(1), Fraction(2)), simplest_inside(Fraction(-1, 3), Fraction(0))
    (Fraction(3, 2), Fraction(-1, 4))
    """
    if low < 0 < high:
        return Fraction(0)
    if high <= 0:
        return -simplest_inside(-high, -low)
    floor = math.floor(low)
    if floor + 1 < high:
        return Fraction(floor + 1)
    if floor == low:
        # the gap (floor, high) with high at most floor + 1: the largest 1/m below high - floor
        return floor + Fraction(1, math.floor(1 / (high - floor)) + 1)
    return floor + 1 / simplest_inside(1 / (high - floor), 1 / (low - floor))


def _simplest_between(low: Fraction, high: Fraction) -> Fraction:
    """The rational with the smallest denominator (then numerator) in ``[low, high]``."""
    if low > high:
        low, high = high, low
    if low <= 0 <= high:
        return Fraction(0)
    if high < 0:
        return -_simplest_between(-high, -low)
    floor = math.floor(low)
    if floor == low:
        return Fraction(floor)
    if floor + 1 <= high:
        return Fraction(floor + 1)
    inner = _simplest_between(1 / (high - floor), 1 / (low - floor))
    return floor + 1 / inner


# ----------------------------------------------------------------------------------------------
# The columns an equation may use
# ----------------------------------------------------------------------------------------------


class _Space:
    """Features (degree 1) or features and their pairwise products (degree 2) of ``X``."""

    def __init__(self, X: np.ndarray, names: Sequence[str], exact_columns, degree: int) -> None:
        self.X = X
        self.Xf = X if X.dtype == np.float64 else np.asarray(X, dtype=float)
        self.names = list(names)
        p = len(self.names)
        self.monomials: list[tuple[int, ...]] = [(j,) for j in range(p)]
        if degree == 2:
            self.monomials += [(j, k) for j in range(p) for k in range(j, p)]
        self.exact_flags = None if exact_columns is None else [bool(f) for f in exact_columns]
        self._base: dict[int, _ExactColumn | None] = {}

    @property
    def n_rows(self) -> int:
        return self.X.shape[0]

    @property
    def size(self) -> int:
        return len(self.monomials)

    def label(self, index: int) -> str:
        return _monomial_label(self.monomials[index], self.names)

    def factors(self, index: int) -> tuple[str, ...]:
        monomial = self.monomials[index]
        if len(monomial) == 1:
            return ()
        return tuple(self.names[j] for j in monomial)

    def matrix(self, rows: np.ndarray) -> np.ndarray:
        base = self.Xf[rows]
        if all(len(m) == 1 for m in self.monomials):
            return np.array(base, dtype=float)
        columns = [
            base[:, m[0]] if len(m) == 1 else base[:, m[0]] * base[:, m[1]] for m in self.monomials
        ]
        return np.column_stack(columns)

    def float_column(self, index: int) -> np.ndarray:
        monomial = self.monomials[index]
        column = self.Xf[:, monomial[0]]
        for j in monomial[1:]:
            column = column * self.Xf[:, j]
        return column

    def base_exact(self, j: int) -> _ExactColumn | None:
        if j not in self._base:
            if self.exact_flags is not None and not self.exact_flags[j]:
                self._base[j] = None
            else:
                self._base[j] = _exact_view(self.X[:, j])
        return self._base[j]

    def exact_column(self, index: int) -> _ExactColumn | None:
        columns = [self.base_exact(j) for j in self.monomials[index]]
        if any(column is None for column in columns):
            return None
        result = columns[0]
        for column in columns[1:]:
            result = _product(result, column)
        return result

    def inexact_features(self, indices) -> list[str]:
        names = []
        for index in indices:
            for j in self.monomials[index]:
                if self.base_exact(j) is None and self.names[j] not in names:
                    names.append(self.names[j])
        return names


# ----------------------------------------------------------------------------------------------
# Validation
# ----------------------------------------------------------------------------------------------


def _check_matrix(X, names, row_ids) -> tuple[np.ndarray, list[str], np.ndarray]:
    X = np.asarray(X)
    if X.ndim != 2:
        raise StepError(
            f"expected a 2-D array of feature values (rows x features), got shape {X.shape}."
        )
    n, p = X.shape
    names = [str(name) for name in names]
    if len(names) != p:
        raise StepError(f"got {len(names)} feature names for {p} feature columns; give one each.")
    if len(set(names)) != len(names):
        repeated = sorted({name for name in names if names.count(name) > 1})
        raise StepError(f"feature names must differ; repeated: {', '.join(repeated)}.")
    if n == 0 or p == 0:
        raise StepError(f"need at least one row and one feature, got {n} rows and {p} features.")
    row_ids = np.arange(n) if row_ids is None else np.asarray(row_ids)
    if row_ids.shape != (n,):
        raise StepError(f"got {row_ids.size} row ids for {n} rows; give one per row.")
    try:
        as_float = X if X.dtype == np.float64 else np.asarray(X, dtype=float)
    except (TypeError, ValueError) as error:
        raise StepError(f"feature values must be numbers ({error}).") from None
    finite = np.isfinite(as_float)
    if not finite.all():
        row, column = np.argwhere(~finite)[0]
        raise StepError(
            f"feature '{names[column]}', row {_plain(row_ids[row])}: value is not a finite number "
            f"({as_float[row, column]}). Drop or impute missing values before looking for an "
            "equation."
        )
    return X, names, row_ids


def _check_labels(positive, n: int, what: str) -> np.ndarray:
    positive = np.asarray(positive)
    if positive.shape != (n,):
        raise StepError(f"{what}: got {positive.size} labels for {n} rows; give one per row.")
    if positive.dtype != bool:
        if positive.dtype.kind not in "iuf" or not np.isin(positive, (0, 1)).all():
            raise StepError(f"{what}: expected a True/False mask marking the positive rows.")
        positive = positive.astype(bool)
    count = int(positive.sum())
    if count == 0 or count == n:
        raise StepError(
            f"{what}: every one of the {n} rows is on the same side; an equation needs rows "
            "of both classes."
        )
    return positive


def _check_max_denominator(max_denominator: int) -> int:
    if int(max_denominator) != max_denominator or max_denominator < 1:
        raise StepError(f"max_denominator must be a positive integer, got {max_denominator!r}.")
    return int(max_denominator)


# ----------------------------------------------------------------------------------------------
# Sampling and fitting directions
# ----------------------------------------------------------------------------------------------


def _stratified_rows(positive: np.ndarray, size: int, rng: np.random.Generator) -> np.ndarray:
    """At most ``size`` rows, both classes kept (a rare class keeps at least a quarter)."""
    n = positive.size
    if n <= size:
        return np.arange(n)
    pos = np.flatnonzero(positive)
    neg = np.flatnonzero(~positive)
    small, large = (pos, neg) if pos.size <= neg.size else (neg, pos)
    take_small = min(small.size, max(round(size * small.size / n), size // 4))
    take_large = min(large.size, size - take_small)
    rows = np.concatenate(
        [rng.choice(small, take_small, replace=False), rng.choice(large, take_large, replace=False)]
    )
    return np.sort(rows)


def _solve_l1_svm(Z: np.ndarray, signs: np.ndarray, penalty: float):
    """The 1-norm support vector machine as a linear program (HiGHS).

    minimize penalty*|w|_1 + sum_i c_i xi_i  subject to  s_i (w.z_i + b) >= 1 - xi_i, xi >= 0,
    with class-balanced costs c_i (each class weighs 1/2 in total).
    """
    import scipy.sparse as sparse
    from scipy.optimize import linprog

    n, k = Z.shape
    n_pos = int((signs > 0).sum())
    n_neg = n - n_pos
    if n_pos == 0 or n_neg == 0:
        return None
    costs = np.where(signs > 0, 0.5 / n_pos, 0.5 / n_neg)
    objective = np.concatenate([np.full(2 * k, penalty), [0.0], costs])
    signed = signs[:, None] * Z
    constraints = sparse.hstack(
        [
            sparse.csr_matrix(-signed),
            sparse.csr_matrix(signed),
            sparse.csr_matrix(-signs[:, None]),
            -sparse.identity(n, format="csr"),
        ],
        format="csr",
    )
    bounds = [(0, None)] * (2 * k) + [(None, None)] + [(0, None)] * n
    result = linprog(objective, A_ub=constraints, b_ub=-np.ones(n), bounds=bounds, method="highs")
    if result.status != 0 or result.x is None:
        return None
    x = result.x
    return x[:k] - x[k : 2 * k], float(x[2 * k]), float(x[2 * k + 1 :].sum())


def _l1_svm_direction(Z, signs, working, penalty_scale: float, norm: float = 1.0):
    """1-norm SVM on a working set of rows, grown by the rows it misses while it separates.

    The penalty starts at ``penalty_scale`` rows' worth of hinge loss per ``norm`` units of the
    weights' 1-norm. When a wide-ranged feature decides on fine differences, separation needs
    large weights and that penalty buys a smaller norm with a few rows on the wrong side; while
    only a few rows are wrong the penalty is cut and the program solved again.
    Returns (direction or None, fraction of the rows of Z it misclassifies, its 1-norm).
    """
    working = np.asarray(working)
    penalty = penalty_scale / (working.size * max(1.0, norm))
    best = (None, 1.0, max(1.0, norm))
    for _ in range(8):
        solved = _solve_l1_svm(Z[working], signs[working], penalty)
        if solved is None:
            break
        direction, intercept, _ = solved
        margins = signs * (Z @ direction + intercept)
        errors = float(np.mean(margins <= 0))
        if best[0] is None or errors < best[1]:
            best = (direction, errors, max(1.0, float(np.abs(direction).sum())))
        if best[1] == 0.0:
            # every row of Z is on its side: no later programme can be kept over this one
            break
        wrong = int(np.count_nonzero(margins[working] <= 0))
        if wrong:
            # Below about 1e-8 HiGHS stops trusting the objective and reports failures.
            if wrong > 0.02 * working.size or penalty < 1e-7:
                # The classes overlap: more rows or a smaller penalty would only cost time.
                break
            penalty /= 100
            continue
        missed = np.setdiff1d(np.flatnonzero(margins < 1 - 1e-7), working)
        if missed.size == 0:
            break
        working = np.union1d(working, missed[:: max(1, missed.size // _LP_ROWS)])
    return best


class _DirectionFitter:
    """Sparse separators fitted to standardized sample rows, mapped back to raw units.

    ``Z`` holds the sample rows of the varying columns (``active``, indices into the space)
    standardized by ``mean`` and ``spread``; ``signs`` is +1 for positive rows, -1 otherwise.
    """

    def __init__(self, Z, signs, active, spread, size, rng, seed,
                 penalties=_PENALTY_SCALES) -> None:
        self.Z, self.signs, self.active = Z, signs, np.asarray(active)
        self.penalties = tuple(penalties)
        self.spread, self.size, self.rng, self.seed = spread, size, rng, seed
        self.working = _stratified_rows(signs > 0, _LP_ROWS, rng)
        self.gram = Z.T @ Z
        self.moment = Z.T @ (signs - signs.mean())
        self.use_programs = True
        self.importance = np.zeros(Z.shape[1])
        # supports whose 1-norm refits wait for the search (see directions)
        self.pending: list[tuple[int, ...]] = []

    def _raw(self, direction: np.ndarray) -> np.ndarray:
        full = np.zeros(self.size)
        full[self.active] = direction / self.spread[self.active]
        return full

    def _refit_local(self, columns: list[int], errors: list | None = None) -> list[np.ndarray]:
        """Unshrunk directions on a support (local column indices), in standardized units.

        When ``errors`` is a list, the 1-norm SVM's misclassified fraction is appended to it
        (the least-squares direction has no threshold of its own and is not counted).
        """
        found = []
        if self.use_programs:
            refit, missed = self._programme_refit(columns)
            if refit is not None:
                found.append(refit)
                if errors is not None:
                    errors.append((missed, refit))
        found.extend(self._least_squares_refit(columns))
        return found

    def _programme_refit(self, columns: list[int]):
        """The 1-norm SVM on a support (local column indices), in standardized units, and the
        fraction of the rows it misclassifies; (None, 1.0) when the programme fails."""
        refit, missed, _ = _l1_svm_direction(self.Z[:, columns], self.signs, self.working, 0.01)
        if refit is None:
            return None, missed
        full = np.zeros(self.Z.shape[1])
        full[columns] = refit
        return full, missed

    def _least_squares_refit(self, columns: list[int]) -> list[np.ndarray]:
        # Z is centered on these rows, so the least-squares intercept separates out and the
        # normal equations give the discriminant direction.
        try:
            coefs = np.linalg.solve(self.gram[np.ix_(columns, columns)], self.moment[columns])
        except np.linalg.LinAlgError:
            return []
        full = np.zeros(self.Z.shape[1])
        full[columns] = coefs
        return [full]

    def _path(self) -> list[tuple[np.ndarray, bool]]:
        """The sparsity paths' proposals in order, each with whether its direction is kept
        (the lasso path's entry order proposes supports only)."""
        from sklearn.exceptions import ConvergenceWarning
        from sklearn.linear_model import LogisticRegression, lars_path
        from sklearn.svm import l1_min_c

        Z, signs = self.Z, self.signs
        k = Z.shape[1]
        proposals: list[tuple[np.ndarray, bool]] = []
        # Path of L1-penalized logistic regressions, from one feature to many.
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", ConvergenceWarning)
            warnings.simplefilter("ignore", UserWarning)
            try:
                two_classes = np.unique(signs).size == 2
                smallest_c = l1_min_c(Z, signs, loss="log") if two_classes else None
            except ValueError:
                smallest_c = None
            # The path only proposes supports and rough directions; a few thousand rows do.
            path_rows = _stratified_rows(signs > 0, _PATH_ROWS, self.rng)
            Z_path, signs_path = Z[path_rows], signs[path_rows]
            if smallest_c is not None and np.isfinite(smallest_c) and smallest_c > 0:
                for factor in _PATH_FACTORS:
                    model = LogisticRegression(
                        l1_ratio=1.0,
                        solver="liblinear",
                        C=smallest_c * factor,
                        class_weight="balanced",
                        max_iter=300,
                        random_state=self.seed,
                    ).fit(Z_path, signs_path)
                    proposals.append((model.coef_[0].copy(), True))
                    if np.count_nonzero(model.coef_[0]) >= min(k, 2 * _TRUNCATION_TERMS):
                        break
            # The order in which features enter a lasso path on the labels.
            try:
                _, _, path = lars_path(
                    Z, signs - signs.mean(), method="lasso", max_iter=min(k, 3 * _TRUNCATION_TERMS)
                )
                proposals.extend((column.copy(), False) for column in path.T[1:])
            except (ValueError, np.linalg.LinAlgError):
                pass
        return proposals

    def directions(self) -> list[np.ndarray]:
        """Directions (raw units) along sparsity paths and refitted on their supports (of
        two features or more: the search tries each feature on its own anyway)."""
        Z, signs = self.Z, self.signs
        directions: list[np.ndarray] = []
        supports: list[tuple[int, ...]] = []

        def keep(direction, record_support=True, record_direction=True):
            direction = _cleaned(direction)
            if direction is None:
                return
            if record_direction:
                directions.append(direction)
            support = tuple(np.flatnonzero(direction).tolist())
            if record_support and support not in supports:
                supports.append(support)

        # the paths and the penalties' programmes are independent: run at once, kept in order
        path, *programmes = _in_order(
            lambda scale: self._path() if scale is None
            else _l1_svm_direction(Z, signs, self.working, scale),
            (None, *self.penalties),
        )
        for direction, record in path:
            keep(direction, record_direction=record)
        errors = 1.0
        for direction, missed, _ in programmes:
            keep(direction)
            errors = min(errors, missed)
        # When the classes overlap a lot, the linear programs are slow and their refits add
        # little to the least-squares ones; they earn their time on (nearly) separable rows.
        self.use_programs = errors < 0.05

        # Fits that may use every feature can lean on a feature that only helps the few rows
        # near the boundary; small supports of the most important features guard against that.
        for direction in directions:
            self.importance = np.maximum(
                self.importance, np.abs(direction) / np.abs(direction).max()
            )
        order = np.argsort(-self.importance, kind="stable")
        leading = [int(j) for j in order[:4] if self.importance[j] > 0]
        for size in (2, 3):
            for subset in itertools.combinations(sorted(leading), size):
                if subset not in supports:
                    supports.append(subset)

        # Refit each support found so far without shrinkage. A single feature rounds to the
        # same candidate whatever its weight, and the search tries every single feature on
        # its own, so a support of one is not refitted. The least-squares refits are cheap
        # and come now; the 1-norm programmes wait in ``pending`` until the search knows how
        # short an equation it has, and skips the supports that cannot beat it.
        supports.sort(key=len)
        chosen = [s for s in supports[:_MAX_SUPPORTS] if len(s) > 1]
        for support in chosen:
            for direction in self._least_squares_refit(list(support)):
                keep(direction, record_support=False)
        self.pending = chosen if self.use_programs else []
        return [self._raw(direction) for direction in directions]

    def pending_columns(self, support: Sequence[int]) -> list[int]:
        """The columns of the space (not of Z) that a pending support refits."""
        return [int(self.active[j]) for j in support]

    def programme_refits(self, supports) -> list[np.ndarray]:
        """The 1-norm SVM refitted on each of these pending supports (raw units)."""
        found = _in_order(lambda support: self._programme_refit(list(support))[0], supports)
        cleaned = [_cleaned(direction) for direction in found]
        return [self._raw(direction) for direction in cleaned if direction is not None]

    def neighbours(self, support: Sequence[int]):
        """Directions (raw units) refitted on the support with one feature added or removed.

        ``support`` holds indices into the space. Used once the best rounded equation is
        known, when it still has violations and the rows are nearly separable. Returns the
        directions, and (fraction misclassified, direction) for each 1-norm SVM among them.
        """
        local = {int(a): i for i, a in enumerate(self.active)}
        current = [local[index] for index in support if index in local]
        order = [int(j) for j in np.argsort(-self.importance, kind="stable")]
        others = [j for j in order if j not in current][:20]
        supports = [sorted([*current, j]) for j in others]
        if len(current) > 1:
            supports += [sorted(set(current) - {j}) for j in current]
        found = []
        errors: list = []

        def refit(columns):
            mine: list = []
            return self._refit_local(columns, mine), mine

        for directions, mine in _in_order(refit, supports):
            found.extend(self._raw(direction) for direction in directions)
            errors.extend(mine)
        return found, [(missed, self._raw(direction)) for missed, direction in errors]


def _cleaned(direction):
    """A fitted direction with entries below 1e-9 of its largest set to zero; None when it is
    missing, not finite or zero."""
    if direction is None or not np.all(np.isfinite(direction)):
        return None
    scale = np.max(np.abs(direction)) if direction.size else 0.0
    if scale <= 0:
        return None
    return np.where(np.abs(direction) > 1e-9 * scale, direction, 0.0)


def _in_order(work, items) -> list:
    """``work(item)`` for each item, in the order of ``items``, on every core (threads: the
    linear programmes and numpy release Python's lock). Each result depends on its item
    alone, so the numbers do not depend on the number of workers."""
    from analysis.threads import one_thread_each, refit_workers

    items = list(items)
    workers = min(refit_workers(), len(items))
    if workers <= 1:
        return [work(item) for item in items]
    from concurrent.futures import ThreadPoolExecutor

    with one_thread_each(workers), ThreadPoolExecutor(max_workers=workers) as pool:
        return list(pool.map(work, items))


# ----------------------------------------------------------------------------------------------
# Snapping directions to small integers
# ----------------------------------------------------------------------------------------------


def _primitive_rows(indices, integers: np.ndarray) -> set:
    """Each row of integer coefficients divided by its gcd, signed so most coefficients are
    positive, as ``((index, coefficient), ...)`` over its nonzero entries; rows that are all
    zero or taller than _MAX_HEIGHT after dividing are left out."""
    integers = np.asarray(integers, dtype=np.int64).reshape(-1, len(indices))
    nonzero = integers != 0
    integers = integers[nonzero.any(axis=1)]
    if not integers.size:
        return set()
    integers = integers // np.gcd.reduce(np.abs(integers), axis=1)[:, None]
    nonzero = integers != 0
    negatives = (integers < 0).sum(axis=1)
    sizes = nonzero.sum(axis=1)
    first = integers[np.arange(len(integers)), nonzero.argmax(axis=1)]
    flip = (2 * negatives > sizes) | ((2 * negatives == sizes) & (first < 0))
    integers = np.where(flip[:, None], -integers, integers)
    integers = integers[np.abs(integers).max(axis=1) <= _MAX_HEIGHT]
    # the ladder repeats most vectors: each distinct one is written out once
    integers = np.unique(integers, axis=0)
    indices = list(indices)
    return {
        tuple((index, value) for index, value in zip(indices, row) if value)
        for row in integers.tolist()
    }


def _ladder(ratios: np.ndarray, max_denominator: int) -> np.ndarray:
    """Integer vectors approximating each row of ``ratios`` for denominators 1..max_denominator,
    all stacked as rows.

    For each d two versions: one common denominator d for all coefficients, and each
    coefficient's own best approximation with denominator at most d (the continued-fraction
    convergents Fraction.limit_denominator would give), brought to a common denominator.
    """
    best_numerators = np.rint(ratios)
    best_denominators = np.ones_like(ratios)
    best_errors = np.abs(ratios - best_numerators)
    rows = []
    for denominator in range(1, max_denominator + 1):
        numerators = np.rint(ratios * denominator)
        errors = np.abs(ratios - numerators / denominator)
        better = errors < best_errors - 1e-15
        best_numerators = np.where(better, numerators, best_numerators)
        best_denominators = np.where(better, denominator, best_denominators)
        best_errors = np.where(better, errors, best_errors)
        rows.append(numerators.astype(np.int64))
        common = np.lcm.reduce(best_denominators.astype(np.int64), axis=1)
        rows.append((best_numerators * (common[:, None] // best_denominators)).astype(np.int64))
    return np.concatenate(rows)


def _snap_direction(
    direction: np.ndarray, spread: np.ndarray, max_denominator: int, max_terms: int | None
) -> set:
    """Small-integer versions of a direction: thinned, normalized, rounded over a ladder."""
    contribution = np.abs(direction) * spread
    top = contribution.max() if contribution.size else 0.0
    if not np.isfinite(top) or top <= 0:
        return set()
    nonzero = np.flatnonzero(contribution > 1e-9 * top)
    order = nonzero[np.argsort(-contribution[nonzero], kind="stable")]
    limit = len(order) if max_terms is None else min(len(order), max_terms)
    keep_sets = {
        tuple(sorted(order[:count].tolist()))
        for count in range(1, min(limit, _TRUNCATION_TERMS) + 1)
    }
    for relative in (1e-3, 1e-2, 5e-2, 0.15):
        kept = tuple(sorted(nonzero[contribution[nonzero] >= relative * top].tolist()))
        if kept and (max_terms is None or len(kept) <= max_terms):
            keep_sets.add(kept)
    found = set()
    for kept in keep_sets:
        values = direction[list(kept)]
        magnitudes = np.abs(values)
        normalizers = {float(magnitudes.min()), float(magnitudes.max())}
        if len(kept) <= 3:
            normalizers.update(float(v) for v in magnitudes)
        ratios = [values / normalizer for normalizer in normalizers]
        ratios = [r for r in ratios if np.max(np.abs(r)) * max_denominator <= _MAX_HEIGHT]
        if ratios:
            found |= _primitive_rows(kept, _ladder(np.array(ratios), max_denominator))
    return found


def _description_length(violations: int, candidate, n_rows: int, n_columns: int) -> float:
    """Bits to state the equation and name the rows that break it.

    Naming the set of v violating rows among n costs log2(C(n, v)) bits (about log2(n) per row
    while they are few, less when the classes overlap); a term costs the bits naming its
    feature, a sign and its coefficient. Ranking by this total prefers fewer violations, except
    that a term (or a large coefficient) must pay for itself by fixing rows: a 3-term equation
    with coefficients near 100 that fixes one mislabelled row loses to ``a + b + c <= 14``.
    """
    n_rows = max(n_rows, 2)
    violations = min(max(violations, 0), n_rows)
    bits = (
        math.lgamma(n_rows + 1) - math.lgamma(violations + 1) - math.lgamma(n_rows - violations + 1)
    ) / math.log(2)
    for _, coef in candidate:
        bits += math.log2(max(n_columns, 2)) + 1 + math.log2(1 + abs(coef))
    return bits


def _height(candidate) -> tuple[int, int, int]:
    coefficients = [abs(c) for _, c in candidate]
    return len(candidate), max(coefficients), sum(coefficients)


# ----------------------------------------------------------------------------------------------
# Thresholds
# ----------------------------------------------------------------------------------------------


def _sample_violations(matrix: np.ndarray, positive: np.ndarray, candidates: list) -> np.ndarray:
    """Fewest violations any constant gives, per candidate, on the sample rows (vectorized)."""
    weights = np.zeros((matrix.shape[1], len(candidates)))
    for column, candidate in enumerate(candidates):
        for index, coef in candidate:
            weights[index, column] = coef
    return _violations_for_weights(matrix, positive, weights)


def _violations_for_weights(matrix: np.ndarray, positive: np.ndarray, weights) -> np.ndarray:
    """Fewest violations any constant gives, per column of ``weights``, on these rows."""
    m = matrix.shape[0]
    count = weights.shape[1]
    result = np.empty(count, dtype=np.int64)
    chunk_size = max(1, 2_000_000 // max(m, 1))
    for start in range(0, count, chunk_size):
        scores = matrix @ weights[:, start : start + chunk_size]
        # one candidate per row from here on, so that each sort runs over contiguous memory
        scores = np.ascontiguousarray(scores.T)
        # the sorts of separate candidates are independent: split among the cores
        pieces = max(1, min(len(scores) // _SORT_PIECE_ROWS, 8))
        bounds = np.linspace(0, len(scores), pieces + 1).astype(int)
        parts = [scores[a:b] for a, b in zip(bounds[:-1], bounds[1:])]
        found = _in_order(lambda part: _fewest_violations(part, positive), parts)
        result[start : start + len(scores)] = np.concatenate(found)
    return result


# Candidates below which their sorts are not split among threads.
_SORT_PIECE_ROWS = 64


def _fewest_violations(scores: np.ndarray, positive: np.ndarray) -> np.ndarray:
    """Per row of ``scores`` (one candidate's scores on every row): the fewest violations
    any threshold between two distinct scores gives."""
    m = scores.shape[1]
    total_pos = int(positive.sum())
    total_neg = m - total_pos
    below = np.arange(1, m)
    ordered, labels = _sorted_with_labels(scores, positive)
    pos_below = np.cumsum(labels, axis=1, dtype=np.int64)[:, :-1]
    neg_below = below - pos_below
    at_least = pos_below + (total_neg - neg_below)
    at_most = neg_below + (total_pos - pos_below)
    valid = ordered[:, 1:] > ordered[:, :-1]
    return np.where(valid, np.minimum(at_least, at_most), m + 1).min(axis=1)


# Below this, twice an integer-valued score plus a 0/1 label is still an exact float.
_LABEL_KEY_LIMIT = 2.0**50


def _sorted_with_labels(scores: np.ndarray, positive: np.ndarray):
    """Each row of ``scores`` sorted, with the labels of its rows in the same order.

    The order among equal scores is left open: the counts read from the result only look at
    cuts between different scores, where every row of a score lies on one side.
    """
    if scores.size and np.abs(scores).max() < _LABEL_KEY_LIMIT and np.array_equal(
        scores, np.rint(scores)
    ):
        # Integer-valued scores: sort 2*score + label once instead of sorting indices and
        # gathering twice; both halves come back exactly.
        keys = np.sort(2.0 * scores + positive, axis=1)
        labels = keys - 2.0 * np.floor(keys / 2.0)
        return (keys - labels) / 2.0, labels.astype(np.int8)
    order = np.argsort(scores, axis=1)
    return np.take_along_axis(scores, order, axis=1), positive[order]


def score_counts(scores: np.ndarray, positive: np.ndarray):
    """Distinct score values (ascending) with the number of rows and of positive rows at each.

    Engines that score block by block count each block here and merge the counts."""
    if scores.dtype == np.int64 and scores.size:
        smallest, largest = int(scores.min()), int(scores.max())
        if largest - smallest <= 4 * scores.size + 1024:
            # Small range: counting beats sorting by an order of magnitude on a million rows.
            shifted = scores - smallest
            rows_at = np.bincount(shifted)
            positives_at = np.bincount(shifted[positive], minlength=rows_at.size)
            present = np.flatnonzero(rows_at)
            return present + smallest, rows_at[present], positives_at[present]
    order = np.argsort(scores, kind="stable")
    ordered = scores[order]
    starts = np.concatenate(
        [[0], np.flatnonzero(np.asarray(ordered[1:] != ordered[:-1], dtype=bool)) + 1]
    )
    rows_at = np.diff(np.append(starts, scores.size))
    positives_at = np.add.reduceat(positive[order].astype(np.int64), starts)
    return ordered[starts], rows_at, positives_at


def _best_cut(scores: np.ndarray, positive: np.ndarray):
    """The relation and cut between consecutive score values with fewest violations.

    Returns (violations, relation, low, high, counts): for ">=" the rows with score >= high
    are predicted positive, for "<=" the rows with score <= low; no row scores strictly
    between. ``counts`` are the per-value counts the cut was read from.
    """
    return cut_of_counts(*score_counts(scores, positive))


def cut_of_counts(values: np.ndarray, rows_at: np.ndarray, positives_at: np.ndarray):
    """The best cut from the distinct scores, the rows at each and the positive rows at each.

    Fewest violations, ">=" before "<=" on a tie, and among equally good cuts the widest gap;
    returns (violations, relation, low, high, counts) or None with fewer than two scores.
    Engines that count scores block by block call it on their merged counts.
    """
    if values.size < 2:
        return None
    total_pos = int(positives_at.sum())
    total_neg = int(rows_at.sum()) - total_pos
    pos_below = np.cumsum(positives_at)[:-1]
    neg_below = np.cumsum(rows_at)[:-1] - pos_below
    at_least = pos_below + (total_neg - neg_below)
    at_most = neg_below + (total_pos - pos_below)
    if at_least.min() <= at_most.min():
        relation, violations = ">=", at_least
    else:
        relation, violations = "<=", at_most
    fewest = int(violations.min())
    ties = np.flatnonzero(violations == fewest)
    chosen = ties[0]
    if ties.size > 1:
        # Among equally good cuts, the widest gap leaves the most room on both sides.
        widths = np.asarray(values[ties + 1] - values[ties], dtype=float)
        chosen = ties[int(np.argmax(widths))]
    low, high = _scalar(values[chosen]), _scalar(values[chosen + 1])
    return fewest, relation, low, high, (values, rows_at, positives_at)


def _violations_at(counts, relation: str, threshold: float) -> int:
    """Violations of ``score relation threshold`` from the per-value counts of score_counts."""
    values, rows_at, positives_at = counts
    total_pos = int(positives_at.sum())
    total_neg = int(rows_at.sum()) - total_pos
    side = "left" if relation == ">=" else "right"
    k = int(np.searchsorted(values, threshold, side=side))
    pos_below = int(positives_at[:k].sum())
    neg_below = int(rows_at[:k].sum()) - pos_below
    if relation == ">=":
        return pos_below + (total_neg - neg_below)
    return neg_below + (total_pos - pos_below)


def _rounded_constant(counts, relation, fewest, low, high, max_denominator=12):
    """A short constant costing at most 0.1% more violations, for dense floating-point scores.

    Real-valued scores leave a hair-thin optimal gap whose simplest rational is unreadable
    (110/19141); when the best constant already misclassifies thousands of rows, a constant
    like 0 or 1/2 that adds a tenth of a percent to them says the same thing.
    """
    allowance = fewest // 1000
    if allowance == 0:
        return None
    middle = (float(low) + float(high)) / 2
    for denominator in range(1, max_denominator + 1):
        options = {math.floor(middle * denominator), math.ceil(middle * denominator)}
        for numerator in sorted(options, key=lambda p: abs(p / denominator - middle)):
            value = Fraction(numerator, denominator)
            if _violations_at(counts, relation, float(value)) <= fewest + allowance:
                return value
    return None


def _scalar(value):
    if isinstance(value, np.generic):
        return value.item()
    return value


def choose_constant(low, high, denominator: int, relation: str, exact: bool) -> Fraction:
    """A readable constant inside the gap ``(low, high) / denominator``."""
    low_q = Fraction(low) / denominator
    high_q = Fraction(high) / denominator
    if exact:
        # Exact scores: state the bound the rows of the positive side attain, or the integer
        # nearest to it when one gives the same rows; an attained bound with a long
        # denominator (scores of decimals rounded from real numbers) gives way to the
        # simplest rational strictly inside the gap, which the gap note sets beside it.
        if relation == ">=":
            whole, attained = Fraction(math.floor(high_q)), high_q
            if whole > low_q:
                return whole
        else:
            whole, attained = Fraction(math.ceil(low_q)), low_q
            if whole < high_q:
                return whole
        if attained.denominator <= SHARP_DENOMINATOR:
            return attained
        return simplest_inside(low_q, high_q)
    # Floating-point scores: the simplest rational well inside the gap (a tenth of its width
    # kept clear on each side), so that rounding the constant to a float moves no row.
    width = high_q - low_q
    return _simplest_between(low_q + width / 10, high_q - width / 10)


@dataclass(eq=False)
class _Evaluation:
    candidate: tuple
    relation: str
    constant: Fraction
    violations: int
    wrong: np.ndarray
    exact: bool
    gap: tuple[Fraction, Fraction]
    inexact_features: list[str] = field(default_factory=list)
    rounding: str | None = None

    def key(self, n_rows: int, n_columns: int):
        constant = self.constant
        return (
            round(_description_length(self.violations, self.candidate, n_rows, n_columns), 9),
            self.violations,
            *_height(self.candidate),
            max(abs(constant.numerator), constant.denominator),
        )


def _evaluate(space: _Space, candidate: tuple, positive: np.ndarray) -> _Evaluation | None:
    """Choose the constant for ``candidate`` on every row, then verify it row by row."""
    columns = [space.exact_column(index) for index, _ in candidate]
    if all(column is not None for column in columns):
        scores, denominator = _combine(columns, [Fraction(c) for _, c in candidate])
        exact = True
    else:
        scores = np.zeros(space.n_rows)
        for index, coef in candidate:
            scores += coef * space.float_column(index)
        denominator, exact = 1, False
    cut = settle_cut(score_counts(scores, positive), denominator, exact)
    if cut is None:
        return None
    predicted = _compare(scores, denominator, cut.constant, cut.relation)
    wrong = np.flatnonzero(predicted != positive)
    inexact = [] if exact else space.inexact_features([index for index, _ in candidate])
    evaluation = _Evaluation(candidate, cut.relation, cut.constant, int(wrong.size), wrong,
                             exact, (cut.low, cut.high), inexact)
    if cut.rounded:
        evaluation.rounding = rounding_note(cut.constant, int(wrong.size), cut.fewest)
    return evaluation


def settled_constant(counts, fewest: int, relation: str, low, high, denominator: int,
                     exact: bool) -> tuple[Fraction, bool]:
    """The constant of a cut, and whether it was rounded.

    Exact scores keep choose_constant's constant; floating-point scores with many violations
    take a short constant costing at most 0.1% more of them (_rounded_constant).
    """
    rounded = None if exact else _rounded_constant(counts, relation, fewest, low, high)
    if rounded is None:
        return choose_constant(low, high, denominator, relation, exact), False
    return rounded, True


@dataclass(frozen=True)
class SettledCut:
    """An equation's relation and constant chosen from per-value score counts.

    ``fewest`` is the best cut's violations (a rounded constant may cost a few more);
    ``low`` and ``high`` are the scores either side of the cut, in the equation's units.
    """

    relation: str
    constant: Fraction
    fewest: int
    low: Fraction
    high: Fraction
    rounded: bool


def settle_cut(counts, denominator: int, exact: bool) -> SettledCut | None:
    """The cut with fewest violations (cut_of_counts) and its constant (settled_constant).

    ``counts`` are (distinct scores, rows at each, positive rows at each), from score_counts
    or merged over blocks with merge_score_counts; the scores are over ``denominator``.
    None with fewer than two distinct scores. Both engines choose an equation's constant here.
    """
    cut = cut_of_counts(*counts)
    if cut is None:
        return None
    fewest, relation, low, high, counts = cut
    constant, rounded = settled_constant(counts, fewest, relation, low, high, denominator,
                                         exact)
    return SettledCut(relation, constant, fewest, Fraction(low) / denominator,
                      Fraction(high) / denominator, rounded)


def over_denominator(values: np.ndarray, denominator: int | None, common: int | None):
    """Exact scores over ``denominator`` written over ``common``, a multiple of it (Python
    integers past int64's safe range); with ``common`` None, as floats."""
    if common is None:
        return values if denominator is None else np.asarray(values, dtype=float) / denominator
    factor = common // denominator
    if factor == 1:
        return values
    big = values.dtype == object or (
        len(values) and int(np.abs(values).max()) * factor >= _INT64_SAFE)
    return values.astype(object) * factor if big else values * factor


def merge_score_counts(a, b, max_distinct: int):
    """Two blocks' (distinct scores, rows at each, positive rows at each, denominator or
    None for float scores) as one, over the least common denominator; None when either is
    None or past ``max_distinct`` distinct scores."""
    from analysis.features import merge_value_counts

    if a is None or b is None:
        return None
    common = None if a[3] is None or b[3] is None else math.lcm(a[3], b[3])
    merged = merge_value_counts((over_denominator(a[0], a[3], common), *a[1:3]),
                                (over_denominator(b[0], b[3], common), *b[1:3]))
    return None if len(merged[0]) > max_distinct else (*merged, common)


def rounding_note(constant: Fraction, violations: int, fewest: int) -> Note:
    """What a rounded constant costs, in the words of the equation's notes."""
    return Note("constant_rounded",
                f"constant rounded to {_fraction_text(constant)}, {violations - fewest} more "
                f"violations than the best constant ({fewest}); at most 0.1% more is allowed",
                constant=constant, violations=violations, fewest=fewest)


def gap_note(low: Fraction, high: Fraction, relation: str, exact: bool) -> Note:
    """Which constants give the same rows as the one chosen (``low`` to ``high``, the ends
    the relation ``relation`` leaves open or closed), in the words of the equation's notes."""
    if not exact:
        text = f"any constant between {float(low):.6g} and {float(high):.6g} gives the same rows"
    elif relation == ">=":
        text = (f"any constant c with {_fraction_text(low)} < c <= {_fraction_text(high)} "
                "gives the same rows")
    else:
        text = (f"any constant c with {_fraction_text(low)} <= c < {_fraction_text(high)} "
                "gives the same rows")
    return Note("constant_gap", text, low=low, high=high)


# The notes of an equation or formula that say where it was searched or fitted, and which
# constants it could have had: an engine that chooses the constant on other rows replaces them.
SCOPE_NOTES = ("search_scope", "fit_scope", "constant_gap", "constant_rounded")


def sample_wording(note):
    """A note of a search run on a sample, worded for that: "on the 500 rows of the sample"
    where the search said "on all 500 rows". Notes that say nothing of their rows stay."""
    if note_code(note) == "hint_violations":
        return Note("hint_violations", f"the fitted separator before rounding makes "
                    f"{note.figures['violations']} violations on the {note.figures['rows']} "
                    "rows of the sample", **note.figures)
    return note


# ----------------------------------------------------------------------------------------------
# The search shared by linear and degree-2 equations
# ----------------------------------------------------------------------------------------------


@dataclass(eq=False)
class _SearchResult:
    best: _Evaluation
    tried: int
    finalists: int


def _shortlist(
    candidates: list, violations: np.ndarray, size: int, n_rows: int, n_columns: int
) -> list[int]:
    """Indices of the best candidates, the simplest ones as good up to sampling noise, and
    the best one of each number of terms."""

    def rank(i):
        cost = _description_length(int(violations[i]), candidates[i], n_rows, n_columns)
        return round(cost, 9), violations[i], _height(candidates[i])

    ranked = sorted(range(len(candidates)), key=rank)
    chosen = ranked[: max(1, size - 6)]
    # Counts on a sample differ from those on all rows by about their square root: the
    # simplest candidates within that band deserve the check on all rows too.
    fewest = int(violations.min())
    band = fewest + 2 * math.sqrt(fewest)
    tied = sorted(
        (i for i in range(len(candidates)) if violations[i] <= band),
        key=lambda i: (_height(candidates[i]), violations[i]),
    )
    best_by_terms: dict[int, int] = {}
    for i in ranked:
        best_by_terms.setdefault(len(candidates[i]), i)
    for i in tied[:3] + sorted(best_by_terms.values(), key=rank):
        if i not in chosen and len(chosen) < size:
            chosen.append(i)
    return chosen


def _lattice_candidates(
    matrix: np.ndarray, positive: np.ndarray, direction: np.ndarray, max_denominator: int
) -> set:
    """Small integer vectors with the signs of ``direction`` that do best near its boundary.

    Every vector with entries 1..H in absolute value (H at most ``max_denominator``, fewer
    for long supports so that at most about 20000 vectors are tried) is scored on the 400
    sample rows closest to the direction's best threshold; the ones with fewest violations
    there (ranked by size) are returned for the exact check on every row.
    """
    support = np.flatnonzero(direction)
    k = support.size
    if k == 0:
        return set()
    height = min(max_denominator, int(20000 ** (1 / k)))
    if height < 2:
        return set()
    signs = np.sign(direction[support]).astype(np.int64)
    grid = np.array(list(itertools.product(range(1, height + 1), repeat=k)), dtype=np.int64)
    grid = grid[np.gcd.reduce(grid, axis=1) == 1] * signs
    columns = matrix[:, support]
    scores = columns @ direction[support]
    cut = _best_cut(scores, positive)
    if cut is None:
        return set()
    _, _, low, high, _ = cut
    near = np.argsort(np.abs(scores - (low + high) / 2), kind="stable")[:400]
    counts = _violations_for_weights(columns[near], positive[near], grid.T.astype(float))
    fewest = counts.min()
    best = grid[counts == fewest]
    order = np.lexsort((np.abs(best).sum(axis=1), np.abs(best).max(axis=1)))
    return _primitive_rows(support.tolist(), best[order[:3]])


class _Ranking:
    """Candidates ranked on the sample and checked on every row, with each count and check
    kept, so that a search that adds candidates ranks only the new ones."""

    def __init__(self, space: _Space, positive: np.ndarray, sample: np.ndarray,
                 matrix: np.ndarray) -> None:
        self.space, self.positive, self.sample, self.matrix = space, positive, sample, matrix
        self.sample_positive = positive[sample]
        self.subsample = _stratified_rows(self.sample_positive, _RANKING_ROWS,
                                          np.random.default_rng(0))
        self.first: dict = {}
        self.second: dict = {}
        self.evaluated: dict = {}
        self.codes: dict = {}

    def _counts(self, store: dict, rows, candidates: list) -> np.ndarray:
        new = [c for c in candidates if c not in store]
        if new:
            matrix = self.matrix if rows is None else self.matrix[rows]
            labels = self.sample_positive if rows is None else self.sample_positive[rows]
            store.update(zip(new, _sample_violations(matrix, labels, new).tolist()))
        return np.array([store[c] for c in candidates], dtype=np.int64)

    def finalists(self, candidates: list) -> list:
        """The few candidates (``candidates`` in their search order) for the check on every
        row: every candidate ranked on a small subsample, the best hundred on the whole
        sample, then the best few of those."""
        space, subsample = self.space, self.subsample
        first = self._counts(self.first, subsample, candidates)
        shortlist = _shortlist(candidates, first, _SHORTLIST, subsample.size, space.size)
        if subsample.size < self.sample.size:
            kept = [candidates[i] for i in shortlist]
            second = self._counts(self.second, None, kept)
            # Past a few hundred thousand rows each exact check costs a sort of every row.
            size = _FINALISTS if space.n_rows <= 200_000 else _FINALISTS // 2 + 1
            return [kept[i] for i in _shortlist(kept, second, size, self.sample.size,
                                                space.size)]
        chosen = _shortlist(candidates, first, _FINALISTS, self.sample.size, space.size)
        return [candidates[i] for i in chosen]

    def check(self, candidates: list) -> None:
        """Each candidate's constant chosen and checked on every row (once per candidate)."""
        new = [c for c in dict.fromkeys(candidates) if c not in self.evaluated]
        # each check on every row is independent of the others: run on every core, once the
        # exact columns they share are read (in this thread)
        for candidate in new:
            for index, _ in candidate:
                self.space.exact_column(index)
        found = _in_order(lambda candidate: _evaluate(self.space, candidate, self.positive), new)
        self.evaluated.update(zip(new, found))

    def best(self, candidates: list) -> _Evaluation:
        """The best of these checked candidates."""
        evaluations = [e for e in map(self.evaluated.get, candidates) if e is not None]
        if not evaluations:
            raise StepError(
                "no equation could be formed: every candidate gives the same value on every row."
            )
        return min(evaluations, key=self.rank)

    def rank(self, evaluation: _Evaluation):
        return evaluation.key(self.space.n_rows, self.space.size), evaluation.candidate

    def checked(self) -> int:
        return sum(1 for e in self.evaluated.values() if e is not None)

    def mixed_rows(self, columns: Sequence[int]) -> int:
        """Sample rows that every inequality in these columns of the space gets wrong at
        least: among rows equal in every one of them, the smaller class (such rows have one
        score whatever the coefficients, so one side is wrong for any constant)."""
        key, size = self._codes(columns[0])
        for j in columns[1:]:
            codes, count = self._codes(j)
            if size * count >= 2**62:
                _, key = np.unique(key, return_inverse=True)
                size = int(key.max()) + 1
            key, size = key * count + codes, size * count
        if size > 4 * key.size:
            _, key = np.unique(key, return_inverse=True)
        rows_at = np.bincount(key)
        positives_at = np.bincount(key[self.sample_positive], minlength=rows_at.size)
        return int(np.minimum(positives_at, rows_at - positives_at).sum())

    def _codes(self, j: int) -> tuple[np.ndarray, int]:
        if j not in self.codes:
            values, codes = np.unique(self.matrix[:, j], return_inverse=True)
            self.codes[j] = (codes.reshape(-1).astype(np.int64), int(values.size))
        return self.codes[j]


def _candidates_of(directions, spread, max_denominator: int, max_terms: int | None) -> set:
    found: set = set()
    for direction in directions:
        found |= _snap_direction(direction, spread, max_denominator, max_terms)
    return {c for c in found if max_terms is None or len(c) <= max_terms}


def _in_search_order(candidates) -> list:
    return sorted(candidates, key=lambda c: (_height(c), c))


def _programmes_worth_solving(ranking: _Ranking, supports, columns_of, bound: float) -> list:
    """The supports whose 1-norm refit could still give an equation whose description is
    at most ``bound`` bits.

    A candidate of a refit lives on its support, and a single feature is tried on its own, so
    a new one has two terms at least, each costing at least the bits of naming a feature, a
    sign and a coefficient of 1. Rows equal on the support with both classes among them break
    any inequality on it (counted on the sample: at least as many on every row)."""
    space = ranking.space
    worth = []
    for support in supports:
        columns = columns_of(support)
        broken = ranking.mixed_rows(columns)
        cheapest = _description_length(broken, ((columns[0], 1), (columns[1], 1)),
                                       space.n_rows, space.size)
        if cheapest <= bound + 1e-6:
            worth.append(support)
    return worth


def _search(
    space: _Space,
    positive: np.ndarray,
    sample: np.ndarray,
    directions: list[np.ndarray],
    *,
    max_denominator: int,
    max_terms: int | None,
    include_single: bool,
    fitter: _DirectionFitter | None = None,
) -> _SearchResult:
    matrix = space.matrix(sample)
    spread = matrix.std(axis=0)
    candidates = _candidates_of(directions, spread, max_denominator, max_terms)
    if include_single:
        candidates |= {((index, 1),) for index in range(space.size) if spread[index] > 0}
    if not candidates:
        raise StepError(
            "no equation could be formed: every feature is constant on the rows searched. "
            "Choose features that vary."
        )
    ranking = _Ranking(space, positive, sample, matrix)
    finalists = ranking.finalists(_in_search_order(candidates))
    ranking.check(finalists)
    if fitter is not None and fitter.pending and (max_terms is None or max_terms > 1):
        candidates, finalists = _with_programme_refits(
            ranking, fitter, candidates, finalists,
            lambda directions: _candidates_of(directions, spread, max_denominator, max_terms))
    best = ranking.best(finalists)
    tried = len(candidates)
    nearly_exact = 0 < best.violations <= 10 + space.n_rows // 1000
    if nearly_exact and fitter is not None and fitter.use_programs:
        extra = _neighbour_candidates(ranking, fitter, best, spread, max_denominator, max_terms)
        extra = sorted(extra - set(ranking.evaluated))
        if extra:
            tried += len(extra)
            counts = _sample_violations(matrix, ranking.sample_positive, extra)
            finalists = finalists + [extra[i] for i in _shortlist(extra, counts, 4, sample.size,
                                                                  space.size)]
            ranking.check(finalists)
            best = ranking.best(finalists)
    return _SearchResult(best, tried, ranking.checked())


def _with_programme_refits(ranking: _Ranking, fitter: _DirectionFitter, candidates: set,
                           finalists: list, rounded) -> tuple[set, list]:
    """The candidates and finalists once the pending supports' 1-norm refits are in.

    Only the supports that can still beat the best finalist so far are refitted (see
    _programmes_worth_solving); the finalists are then chosen again from every candidate.
    Should that best finalist drop out of them, the skipped supports are refitted too, so
    that the result is the one a search refitting every support finds.
    """
    space = ranking.space
    bound = ranking.best(finalists).key(space.n_rows, space.size)[0]
    pending, fitter.pending = fitter.pending, []
    worth = _programmes_worth_solving(ranking, pending, fitter.pending_columns, bound)
    skipped = [support for support in pending if support not in worth]
    for supports in (worth, skipped):
        added = rounded(fitter.programme_refits(supports)) - candidates
        if added:
            candidates = candidates | added
            finalists = ranking.finalists(_in_search_order(candidates))
            ranking.check(finalists)
        if ranking.best(finalists).key(space.n_rows, space.size)[0] <= bound + 1e-6:
            break
    return candidates, finalists


def _neighbour_candidates(ranking: _Ranking, fitter: _DirectionFitter, best: _Evaluation,
                          spread, max_denominator: int, max_terms: int | None) -> set:
    """Candidates refitted near the best equation's support, for a handful of violations on
    nearly separable rows: a feature that matters only near the boundary may be missing (or
    one too many). Refits on the best support with one feature added or removed, rounded."""
    directions_near, separators = fitter.neighbours([index for index, _ in best.candidate])
    extra = _candidates_of(directions_near, spread, max_denominator, max_terms)
    # Rounding a separating normal can land just outside the narrow cone of exact ones;
    # small integer vectors with its signs, tried on the rows near its boundary, do not.
    fewest_missed = min((missed for missed, _ in separators), default=1.0)
    closest = sorted(
        (d for missed, d in separators if missed <= fewest_missed),
        key=lambda d: np.count_nonzero(d),
    )
    for direction in closest[:4]:
        extra |= _lattice_candidates(ranking.matrix, ranking.sample_positive, direction,
                                     max_denominator)
    return {c for c in extra if max_terms is None or len(c) <= max_terms}


def _describe_gap(evaluation: _Evaluation) -> Note:
    low, high = evaluation.gap
    return gap_note(low, high, evaluation.relation, evaluation.exact)


def _evaluation_notes(space: _Space, evaluation: _Evaluation, n: int, sample: np.ndarray):
    notes = []
    if sample.size < n:
        notes.append(Note(
            "search_scope",
            f"searched on a sample of {sample.size} of {n} rows (both classes kept); threshold "
            f"chosen and verified on all {n} rows", rows=n, sample=int(sample.size)))
    else:
        notes.append(Note("search_scope", f"searched, thresholded and verified on all {n} rows",
                          rows=n))
    if evaluation.exact:
        decimals = sorted(
            {
                (space.names[j], space.base_exact(j).decimals)
                for index, _ in evaluation.candidate
                for j in space.monomials[index]
                if space.base_exact(j) is not None and space.base_exact(j).decimals
            }
        )
        notes.append(Note("evaluated_exactly", "evaluated exactly in integer arithmetic"))
        for name, digits in decimals:
            unit = "digit" if digits == 1 else "digits"
            notes.append(Note(
                "decimal_values",
                f"values of '{name}' read as decimals with {digits} {unit} after the point",
                feature=name, digits=digits,
            ))
    else:
        features = ", ".join(f"'{name}'" for name in evaluation.inexact_features)
        notes.append(Note(
            "evaluated_in_floats",
            f"evaluated in floating point because {features} "
            f"{'is' if len(evaluation.inexact_features) == 1 else 'are'} not exact values",
            features=tuple(evaluation.inexact_features),
        ))
    notes.append(evaluation.rounding or _describe_gap(evaluation))
    return notes


def _make_equation(
    cls,
    space: _Space,
    evaluation: _Evaluation,
    *,
    positive_class,
    row_ids: np.ndarray,
    method: str,
    notes: list[str],
    **extra,
):
    terms = tuple(
        Term(space.label(index), Fraction(coef), space.factors(index))
        for index, coef in evaluation.candidate
    )
    return cls(
        terms=terms,
        relation=evaluation.relation,
        constant=evaluation.constant,
        positive_class=_scalar(positive_class),
        violations=evaluation.violations,
        violating_rows=tuple(row_ids[evaluation.wrong].tolist()),
        n_rows=space.n_rows,
        method=method,
        notes=tuple(notes),
        feature_names=tuple(space.names),
        exact=evaluation.exact,
        **extra,
    )


def _float_violations(scores: np.ndarray, positive: np.ndarray) -> int:
    return int(((scores > 0) != positive).sum())


# ----------------------------------------------------------------------------------------------
# Linear equations
# ----------------------------------------------------------------------------------------------


def find_linear_equation(
    X,
    positive,
    names: Sequence[str],
    *,
    row_ids=None,
    positive_class=True,
    hint: tuple | None = None,
    max_terms: int | None = None,
    max_denominator: int = 12,
    exact_columns: Sequence[bool] | None = None,
    sample_size: int = 20000,
    seed: int = 0,
) -> LinearEquation:
    """The sparsest linear inequality with small rational coefficients that separates best.

    Parameters
    ----------
    X : (n, p) array of feature values in the table's own units (not scaled).
    positive : (n,) boolean mask of the rows of ``positive_class``.
    names : the p feature names, used in the equation's terms.
    row_ids : (n,) row ids reported in ``violating_rows`` (default 0..n-1).
    positive_class : the label the equation predicts where it holds (reported only).
    hint : optional ``(w, b)`` of an already fitted linear separator in raw units.
    max_terms : at most this many terms (default: no limit).
    max_denominator : largest denominator tried when rounding coefficient ratios.
    exact_columns : per feature, whether its values are exact; when given, an equation using
        any other feature is evaluated in floating point. When None, integer and short-decimal
        columns are detected.
    sample_size : the search for directions uses at most this many rows (both classes kept);
        the constant is chosen and the equation verified on every row.
    seed : seed for the sample and the solvers.

    Sparse separators are fitted on standardized features (an L1-logistic path, lasso entry
    order, 1-norm support vector machines as linear programs, least-squares refits), their
    normals rounded to small integers over a ladder of denominators, and each rounded normal
    given its best constant on every row. The winner has the shortest description: each
    violating row costs log2(n) bits, each term the bits of its feature, sign and coefficient,
    so fewer violations win unless an extra term or a large coefficient fixes only a row or
    two (which is how noise gets fitted); ties go to fewer violations, fewer terms, then
    smaller coefficients and constant.

    Example: on integer columns a, b, c with labels ``2a - b >= 3`` the result's ``text`` is
    ``"2*a - b >= 3"`` with 0 violations.
    """
    X, names, row_ids = _check_matrix(X, names, row_ids)
    n, p = X.shape
    positive = _check_labels(positive, n, "positive")
    max_denominator = _check_max_denominator(max_denominator)
    if max_terms is not None and max_terms < 1:
        raise StepError(f"max_terms must be at least 1, got {max_terms}.")
    if exact_columns is not None and len(exact_columns) != p:
        raise StepError(f"got {len(exact_columns)} exact_columns flags for {p} features.")
    space = _Space(X, names, exact_columns, degree=1)
    rng = np.random.default_rng(seed)
    sample = _stratified_rows(positive, max(int(sample_size), 2), rng)
    matrix = space.matrix(sample)
    mean, spread = matrix.mean(axis=0), matrix.std(axis=0)
    active = np.flatnonzero(spread > 0)
    notes: list[str] = []
    constant_features = [names[j] for j in range(p) if spread[j] == 0]
    if constant_features:
        notes.append(Note("constant_features_left_out", "left out (constant on the rows "
                          "searched): " + ", ".join(constant_features),
                          features=tuple(constant_features)))
    directions: list[np.ndarray] = []
    hint_note = None
    if hint is not None:
        weights, hint_note = _hint_direction(hint, space, positive)
        directions.append(weights)
    fitter = None
    if active.size:
        Z = (matrix[:, active] - mean[active]) / spread[active]
        signs = np.where(positive[sample], 1.0, -1.0)
        fitter = _DirectionFitter(Z, signs, active, spread, p, rng, seed)
        directions.extend(fitter.directions())
    result = _search(
        space,
        positive,
        sample,
        directions,
        max_denominator=max_denominator,
        max_terms=max_terms,
        include_single=True,
        fitter=fitter,
    )
    notes = _evaluation_notes(space, result.best, n, sample) + notes
    if hint_note:
        notes.append(hint_note)
    notes.append(Note(
        "candidates",
        f"{result.tried} rounded candidates ranked on the sample, {result.finalists} checked on "
        "all rows", tried=result.tried, checked=result.finalists,
    ))
    method = LINEAR_METHOD.format(max_denominator=max_denominator)
    return _make_equation(LinearEquation, space, result.best, positive_class=positive_class,
                          row_ids=row_ids, method=method, notes=notes,
                          positives=int(positive.sum()))


LINEAR_METHOD = (
    "sparse linear separators (L1-logistic path, lasso order, 1-norm support vector machine "
    "as a linear program) on standardized features, normals rounded to rationals with "
    "denominators up to {max_denominator}, constant chosen exactly on all rows, "
    "shortest description (terms plus violating rows) kept"
)


def _hint_direction(hint, space, positive: np.ndarray) -> tuple[np.ndarray, str]:
    """The weights of a fitted separator given as ``(w, b)``, checked, and a note on how many
    rows it gets wrong before rounding."""
    n, p = space.Xf.shape
    try:
        weights = np.asarray(hint[0], dtype=float).reshape(-1)
        intercept = float(hint[1])
    except (TypeError, ValueError, IndexError):
        raise StepError("hint must be a pair (w, b) of a weight vector and a number.") from None
    if weights.size != p or not np.all(np.isfinite(weights)):
        raise StepError(f"hint weights must be {p} finite numbers, one per feature.")
    violations = _float_violations(space.Xf @ weights + intercept, positive)
    return weights, Note("hint_violations", f"the fitted separator before rounding makes "
                         f"{violations} violations on all {n} rows", violations=violations,
                         rows=n)


def one_vs_rest_equations(
    X, labels, names: Sequence[str], *, row_ids=None, **options
) -> dict[Any, LinearEquation]:
    """One linear equation per class, separating that class from all the others.

    ``labels`` holds one class label per row; ``options`` are passed to
    ``find_linear_equation`` (``max_terms``, ``max_denominator``, ``exact_columns``,
    ``sample_size``, ``seed``). Returns a dict from class label (sorted) to its equation.
    """
    if "positive_class" in options or "hint" in options:
        raise StepError("one_vs_rest_equations chooses positive_class itself and takes no hint.")
    labels = np.asarray(labels)
    classes = np.unique(labels)
    if classes.size < 2:
        raise StepError(
            f"the labels hold {classes.size} class; one equation per class needs at least two."
        )
    return {
        _scalar(label): find_linear_equation(
            X, labels == label, names, row_ids=row_ids, positive_class=label, **options
        )
        for label in classes
    }


# ----------------------------------------------------------------------------------------------
# Degree-2 polynomial kernel machines
# ----------------------------------------------------------------------------------------------


def _unpack_machine(svc, scaler):
    steps = getattr(svc, "steps", None)
    if steps is not None:
        estimators = [step for _, step in steps if step not in (None, "passthrough")]
        if not estimators:
            raise StepError("the pipeline holds no estimator.")
        svc = estimators[-1]
        scalers = estimators[:-1]
        if len(scalers) > 1 or (scalers and not hasattr(scalers[0], "scale_")):
            raise StepError(
                "expand_poly2 accepts a pipeline of at most one StandardScaler and an SVC."
            )
        if scalers:
            if scaler is not None:
                raise StepError("give the scaler either inside the pipeline or separately.")
            scaler = scalers[0]
    if getattr(svc, "kernel", None) != "poly" or getattr(svc, "degree", None) != 2:
        raise StepError(
            "expand_poly2 needs a fitted SVC with kernel='poly' and degree=2, got "
            f"{type(svc).__name__} with kernel={getattr(svc, 'kernel', None)!r}, "
            f"degree={getattr(svc, 'degree', None)!r}."
        )
    if not hasattr(svc, "dual_coef_"):
        raise StepError("the support vector machine has not been fitted yet.")
    if len(svc.classes_) != 2:
        raise StepError(
            f"expand_poly2 handles two classes, the machine has {len(svc.classes_)}; use one "
            "machine per class."
        )
    return svc, scaler


def expand_poly2(svc, scaler, names: Sequence[str]) -> QuadraticForm:
    """The decision function of a degree-2 polynomial kernel SVC as a polynomial in raw features.

    ``svc`` is a fitted ``SVC(kernel="poly", degree=2, gamma=g, coef0=r)`` trained on
    ``scaler.transform(X)`` (``scaler`` a fitted StandardScaler, or None for unscaled
    features), or a Pipeline(StandardScaler, SVC) with ``scaler=None``. Its decision function
    ``sum_i a_i (g <z_i, z> + r)^2 + b`` with ``z = (x - mean) / scale`` is expanded into
    ``constant + linear . x + x^T quadratic x``; ``decision(X)`` reproduces
    ``svc.decision_function`` up to rounding. Positive values mean ``svc.classes_[1]``.
    """
    svc, scaler = _unpack_machine(svc, scaler)
    support = np.asarray(svc.support_vectors_, dtype=float)
    alphas = np.asarray(svc.dual_coef_, dtype=float)[0]
    names = [str(name) for name in names]
    p = support.shape[1]
    if len(names) != p:
        raise StepError(f"got {len(names)} feature names for a machine trained on {p} features.")
    # gamma="scale"/"auto" are resolved at fit time; the number used is kept in _gamma.
    gamma = float(getattr(svc, "_gamma", svc.gamma))
    coef0 = float(svc.coef0)
    intercept = float(np.asarray(svc.intercept_)[0])
    # In scaled units z: sum_i a_i (g z_i.z + r)^2 + b = z^T A z + beta.z + c0.
    quad_z = gamma**2 * (support.T * alphas) @ support
    linear_z = 2 * gamma * coef0 * (alphas @ support)
    constant_z = coef0**2 * alphas.sum() + intercept
    mean = np.zeros(p)
    scale = np.ones(p)
    if scaler is not None:
        if getattr(scaler, "mean_", None) is not None and getattr(scaler, "with_mean", True):
            mean = np.asarray(scaler.mean_, dtype=float)
        if getattr(scaler, "scale_", None) is not None and getattr(scaler, "with_std", True):
            scale = np.asarray(scaler.scale_, dtype=float)
    # z = D (x - mean) with D = diag(1/scale).
    inverse = 1.0 / scale
    quadratic = quad_z * np.outer(inverse, inverse)
    linear_d = linear_z * inverse
    linear = -2.0 * quadratic @ mean + linear_d
    constant = constant_z + mean @ quadratic @ mean - linear_d @ mean
    quadratic = (quadratic + quadratic.T) / 2
    return QuadraticForm(tuple(names), float(constant), linear, quadratic, _scalar(svc.classes_[1]))


def _quadratic_setup(X, labels, names, row_ids, exact_columns, what):
    X, names, row_ids = _check_matrix(X, names, row_ids)
    n, p = X.shape
    labels = _check_labels(labels, n, what)
    if exact_columns is not None and len(exact_columns) != p:
        raise StepError(f"got {len(exact_columns)} exact_columns flags for {p} features.")
    return X, names, row_ids, labels, _Space(X, names, exact_columns, degree=2)


def poly2_equation(
    svc,
    scaler,
    names: Sequence[str],
    X,
    positive,
    *,
    row_ids=None,
    positive_class=None,
    max_terms: int | None = None,
    max_denominator: int = 12,
    exact_columns: Sequence[bool] | None = None,
    sample_size: int = 20000,
    seed: int = 0,
) -> PolynomialEquation:
    """A degree-2 polynomial kernel machine as a readable quadratic inequality.

    The machine is expanded exactly (``expand_poly2``); its monomial coefficients are brought
    to a common scale and rounded to small rationals, the constant is re-chosen on every row of
    ``X`` against ``positive`` and the result verified row by row. ``positive_class`` defaults
    to ``svc.classes_[1]``. The float expansion is kept in ``expansion``.
    """
    expansion = expand_poly2(svc, scaler, names)
    X, names, row_ids, positive, space = _quadratic_setup(
        X, positive, names, row_ids, exact_columns, "positive"
    )
    if X.shape[1] != len(expansion.names):
        raise StepError(
            f"X has {X.shape[1]} feature columns, the machine was trained on "
            f"{len(expansion.names)}."
        )
    max_denominator = _check_max_denominator(max_denominator)
    rng = np.random.default_rng(seed)
    sample = _stratified_rows(positive, max(int(sample_size), 2), rng)
    direction = np.array([coef for _, coef in expansion.monomials()])
    result = _search(
        space,
        positive,
        sample,
        [direction],
        max_denominator=max_denominator,
        max_terms=max_terms,
        include_single=False,
    )
    machine = _float_violations(expansion.decision(space.Xf), positive)
    notes = _evaluation_notes(space, result.best, X.shape[0], sample)
    notes.append(Note("machine_violations", "the machine's own polynomial (float "
                      f"coefficients) makes {machine} violations", violations=machine))
    method = (
        "degree-2 polynomial kernel support vector machine expanded into monomials of the raw "
        f"features, coefficients rounded to rationals with denominators up to {max_denominator}, "
        "constant chosen exactly on all rows"
    )
    if positive_class is None:
        positive_class = expansion.positive_class
    return _make_equation(
        PolynomialEquation,
        space,
        result.best,
        positive_class=positive_class,
        row_ids=row_ids,
        method=method,
        notes=notes,
        expansion=expansion,
    )


def surrogate_quadratic(
    X,
    decisions_positive,
    names: Sequence[str],
    *,
    row_ids=None,
    positive_class=True,
    max_terms: int | None = None,
    max_denominator: int = 12,
    exact_columns: Sequence[bool] | None = None,
    sample_size: int = 20000,
    seed: int = 0,
) -> PolynomialEquation:
    """A sparse quadratic inequality that mimics another machine (e.g. an RBF kernel SVM).

    ``decisions_positive`` marks the rows the machine predicts ``positive_class``. Sparse
    separators are fitted on the degree-2 monomials of the features, rounded to small rationals
    and thresholded on every row; ``violations`` and ``violating_rows`` count the rows where
    the equation and the machine disagree, and ``agreement`` is the fraction where they agree.
    """
    X, names, row_ids, labels, space = _quadratic_setup(
        X, decisions_positive, names, row_ids, exact_columns, "decisions_positive"
    )
    n = X.shape[0]
    max_denominator = _check_max_denominator(max_denominator)
    if max_terms is not None and max_terms < 1:
        raise StepError(f"max_terms must be at least 1, got {max_terms}.")
    rng = np.random.default_rng(seed)
    sample = _stratified_rows(labels, max(int(sample_size), 2), rng)
    path_rows = sample
    if sample.size > _QUADRATIC_PATH_ROWS:
        path_rows = sample[np.sort(rng.choice(sample.size, _QUADRATIC_PATH_ROWS, replace=False))]
    matrix = space.matrix(path_rows)
    mean, spread = matrix.mean(axis=0), matrix.std(axis=0)
    active = np.flatnonzero(spread > 0)
    directions = []
    fitter = None
    if active.size:
        Z = (matrix[:, active] - mean[active]) / spread[active]
        signs = np.where(labels[path_rows], 1.0, -1.0)
        if np.unique(signs).size == 2:
            fitter = _DirectionFitter(Z, signs, active, spread, space.size, rng, seed,
                                      penalties=_PENALTY_SCALES[:1])
            directions.extend(fitter.directions())
    result = _search(
        space,
        labels,
        sample,
        directions,
        max_denominator=max_denominator,
        max_terms=max_terms,
        include_single=True,
        fitter=fitter,
    )
    notes = _evaluation_notes(space, result.best, n, sample)
    notes.append(Note("surrogate_violations",
                      "violations count the rows where the equation and the machine disagree"))
    method = (
        "sparse separators on degree-2 monomials fitted to the machine's predicted labels, "
        f"coefficients rounded to rationals with denominators up to {max_denominator}, constant "
        "chosen exactly on all rows"
    )
    return _make_equation(
        PolynomialEquation,
        space,
        result.best,
        positive_class=positive_class,
        row_ids=row_ids,
        method=method,
        notes=notes,
        agreement=1.0 - result.best.violations / n,
    )


# ----------------------------------------------------------------------------------------------
# Evaluating stored terms on new data
# ----------------------------------------------------------------------------------------------


def _term_column(X, name: str, feature_names: Sequence[str]):
    if isinstance(X, Mapping) or hasattr(X, "columns"):
        try:
            return np.asarray(X[name])
        except KeyError:
            raise StepError(f"no column '{name}' among the values given.") from None
    X = np.asarray(X)
    if X.ndim != 2 or X.shape[1] != len(feature_names):
        raise StepError(
            f"expected {len(feature_names)} feature columns in the order they were given "
            f"({', '.join(feature_names)}), got shape {X.shape}."
        )
    return X[:, list(feature_names).index(name)]


def term_scores(terms: Sequence[Term], X, feature_names: Sequence[str] = ()):
    """The terms summed on every row: ``((S, D), True)``, exact integers S over a common
    denominator D, when every column is exact (integers, short decimals, values below 2**53);
    else ``(float sums, False)``. ``X`` as for :meth:`LinearEquation.holds`."""
    factor_columns = [
        [_term_column(X, name, feature_names) for name in term.factor_names()] for term in terms
    ]
    if not terms:
        n = len(next(iter(X.values()))) if isinstance(X, Mapping) else np.asarray(X).shape[0]
        return (np.zeros(n, dtype=np.int64), 1), True
    exact_columns = []
    for columns in factor_columns:
        views = [_exact_view(column) for column in columns]
        if any(view is None for view in views):
            exact_columns = None
            break
        product = views[0]
        for view in views[1:]:
            product = _product(product, view)
        exact_columns.append(product)
    if exact_columns is not None:
        return _combine(exact_columns, [term.coef for term in terms]), True
    total = np.zeros(len(factor_columns[0][0]))
    for term, columns in zip(terms, factor_columns):
        value = np.asarray(columns[0], dtype=float)
        for column in columns[1:]:
            value = value * np.asarray(column, dtype=float)
        total += float(term.coef) * value
    return total, False


# ----------------------------------------------------------------------------------------------
# Formulas for a numeric target
# ----------------------------------------------------------------------------------------------


def _snap_coefficients(coefs: np.ndarray, max_denominator: int) -> set:
    """Rational versions of regression coefficients (the target fixes the scale)."""
    found = set()
    nonzero = np.flatnonzero(coefs != 0)
    if nonzero.size == 0:
        return found
    for denominator in range(1, max_denominator + 1):
        for fractions in (
            [Fraction(float(coefs[j])).limit_denominator(denominator) for j in nonzero],
            [Fraction(int(np.rint(coefs[j] * denominator)), denominator) for j in nonzero],
        ):
            candidate = tuple((int(j), f) for j, f in zip(nonzero, fractions) if f != 0)
            if candidate and max(abs(f.numerator) for _, f in candidate) <= _MAX_HEIGHT:
                found.add(candidate)
    return found


def _formula_height(candidate) -> tuple[int, int, int]:
    return (
        len(candidate),
        max(max(abs(f.numerator), f.denominator) for _, f in candidate),
        sum(abs(f.numerator) + f.denominator for _, f in candidate),
    )


@dataclass(eq=False)
class _FormulaEvaluation:
    candidate: tuple
    constant: Fraction
    rows_off: int
    off: np.ndarray
    max_residual: float
    rms: float
    exact: bool


def _evaluate_formula(space: _Space, target: np.ndarray, target_exact, candidate, max_den: int):
    columns = [space.exact_column(index) for index, _ in candidate]
    n = space.n_rows
    if target_exact is not None and all(column is not None for column in columns):
        residual, denominator = _combine(
            [target_exact, *columns], [Fraction(1)] + [-coef for _, coef in candidate]
        )
        if residual.dtype == object:
            mode, _ = Counter(residual.tolist()).most_common(1)[0]
            constant = Fraction(mode, denominator)
            largest = float(Fraction(_max_abs(residual - mode), denominator))
        else:
            mode, constant, largest = common_residual(
                *np.unique(residual, return_counts=True), denominator)
        off = np.flatnonzero(np.asarray(residual != mode, dtype=bool))
        as_float = np.asarray(residual - mode, dtype=float) / denominator
        rms = float(np.sqrt(np.mean(as_float**2))) if n else 0.0
        return _FormulaEvaluation(candidate, constant, int(off.size), off, largest, rms, True)
    residual = target.astype(float).copy()
    for index, coef in candidate:
        residual -= float(coef) * space.float_column(index)
    constant = Fraction(float(np.median(residual))).limit_denominator(max_den)
    deviation = residual - float(constant)
    off = np.flatnonzero(off_in_floats(deviation, target.astype(float)))
    return _FormulaEvaluation(
        candidate,
        constant,
        int(off.size),
        off,
        float(np.max(np.abs(deviation))),
        float(np.sqrt(np.mean(deviation**2))),
        False,
    )


def common_residual(values: np.ndarray, rows_at: np.ndarray, denominator: int):
    """A formula's constant from its exact residuals: (the most common residual, as an
    integer over ``denominator``; it as a Fraction; the largest distance of a residual from
    it, as a float). ``values`` are the distinct residuals ascending, ``rows_at`` the rows at
    each (np.unique's counts, or counts merged over blocks); a tie goes to the smallest."""
    mode = int(_scalar(values[int(np.argmax(rows_at))]))
    largest = max(abs(int(values[0]) - mode), abs(int(values[-1]) - mode))
    return mode, Fraction(mode, denominator), float(Fraction(largest, denominator))


def off_in_floats(deviation: np.ndarray, target: np.ndarray) -> np.ndarray:
    """Rows off a formula checked in floating point: those whose residual ``deviation``
    exceeds 1e-9 of the target's size (at least 1). Both engines check formulas here."""
    return np.abs(deviation) > 1e-9 * np.maximum(1.0, np.abs(target))


def _sample_formula_scores(matrix, target, candidates):
    """(rows off, rms about the median) per candidate on the sample rows, in floating point."""
    m, q = matrix.shape
    result = []
    for start in range(0, len(candidates), 64):
        chunk = candidates[start : start + 64]
        weights = np.zeros((q, len(chunk)))
        for column, candidate in enumerate(chunk):
            for index, coef in candidate:
                weights[index, column] = float(coef)
        residuals = target[:, None] - matrix @ weights
        ordered = np.sort(residuals, axis=0)
        tolerance = 1e-9 * np.maximum(1.0, np.abs(ordered))
        same = np.abs(ordered[1:] - ordered[:-1]) <= tolerance[1:]
        for column in range(len(chunk)):
            breaks = np.flatnonzero(~same[:, column])
            edges = np.concatenate([[-1], breaks, [m - 1]])
            longest = int(np.max(np.diff(edges)))
            spread = residuals[:, column] - np.median(residuals[:, column])
            result.append((m - longest, float(np.sqrt(np.mean(spread**2)))))
    return result


def find_formula(
    X,
    y,
    names: Sequence[str],
    *,
    row_ids=None,
    target_name: str = "target",
    max_denominator: int = 12,
    max_terms: int | None = None,
    exact_columns: Sequence[bool] | None = None,
    sample_size: int = 20000,
    seed: int = 0,
) -> Formula:
    """An affine formula ``target = sum(coef * feature) + constant`` with small rationals.

    Least squares on all features and on the supports along a lasso path (plus one feature
    at a time) are fitted on at most ``sample_size`` rows; coefficients are rounded to
    rationals with denominators up to ``max_denominator`` and the constant chosen exactly on
    every row (the most common residual when values are exact). The winner has the fewest
    rows off; ties (and residuals within 1% of the best when no formula is exact) go to fewer
    terms, then smaller coefficients.

    ``y`` may be floats, or an object array of Python ints/Fractions for exact targets.
    Example: for lattice polygons, ``area = interior_points + 1/2*boundary_points - 1``.
    """
    X, names, row_ids = _check_matrix(X, names, row_ids)
    n, p = X.shape
    max_denominator = _check_max_denominator(max_denominator)
    if exact_columns is not None and len(exact_columns) != p:
        raise StepError(f"got {len(exact_columns)} exact_columns flags for {p} features.")
    target_raw, target = _formula_target(y, n, target_name, row_ids)
    target_exact = _exact_view(target_raw)
    space = _Space(X, names, exact_columns, degree=1)
    rng = np.random.default_rng(seed)
    sample = np.arange(n) if n <= sample_size else np.sort(rng.choice(n, sample_size, False))
    matrix = space.matrix(sample)
    target_sample = target[sample]
    candidates: set = set()
    for direction in _formula_directions(matrix, target_sample):
        candidates |= _snap_coefficients(direction, max_denominator)
    candidates = sorted(
        (c for c in candidates if max_terms is None or len(c) <= max_terms),
        key=lambda c: (_formula_height(c), c),
    )
    scores = _sample_formula_scores(matrix, target_sample, candidates) if candidates else []
    evaluations = [
        _evaluate_formula(space, target, target_exact, candidates[i], max_denominator)
        for i in _formula_shortlist(candidates, scores)
    ]
    evaluations.append(_evaluate_formula(space, target, target_exact, (), max_denominator))
    best = _best_formula(evaluations)
    method = (
        "least squares on all features, on each feature alone and along a lasso path, "
        f"coefficients rounded to rationals with denominators up to {max_denominator}, "
        "checked on every row"
    )
    return Formula(
        target=str(target_name),
        terms=tuple(Term(names[index], coef) for index, coef in best.candidate),
        constant=best.constant,
        max_residual=best.max_residual,
        rows_off=best.rows_off,
        off_rows=tuple(row_ids[best.off].tolist()),
        n_rows=n,
        method=method,
        notes=_formula_notes(best, sample.size, n),
        feature_names=tuple(names),
        exact=best.exact,
    )


def _formula_target(y, n: int, target_name: str, row_ids) -> tuple[np.ndarray, np.ndarray]:
    """The target as given and as floats, checked: one finite number per row."""
    target_raw = np.asarray(y)
    if target_raw.shape != (n,):
        raise StepError(f"target '{target_name}': got {target_raw.size} values for {n} rows.")
    try:
        target = np.asarray(target_raw, dtype=float)
    except (TypeError, ValueError):
        raise StepError(f"target '{target_name}' must hold numbers.") from None
    if not np.all(np.isfinite(target)):
        row = int(np.flatnonzero(~np.isfinite(target))[0])
        raise StepError(
            f"target '{target_name}', row {_plain(row_ids[row])}: value is not a finite number. "
            "Drop rows with a missing target first."
        )
    return target_raw, target


def _formula_directions(matrix: np.ndarray, target: np.ndarray) -> list[np.ndarray]:
    """Least-squares coefficient vectors: on every varying feature, on each alone, and on the
    supports along a least-angle (lasso) path."""
    from sklearn.linear_model import lars_path

    p = matrix.shape[1]
    mean, spread = matrix.mean(axis=0), matrix.std(axis=0)
    active = np.flatnonzero(spread > 0)
    ones = np.ones((len(target), 1))
    directions: list[np.ndarray] = []

    def least_squares(columns):
        coefs, *_ = np.linalg.lstsq(np.hstack([matrix[:, columns], ones]), target, rcond=None)
        full = np.zeros(p)
        full[columns] = coefs[:-1]
        directions.append(full)

    if not active.size:
        return directions
    least_squares(list(active))
    for j in active:
        least_squares([j])
    supports: list[tuple[int, ...]] = []
    Z = (matrix[:, active] - mean[active]) / spread[active]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        try:
            _, _, path = lars_path(Z, target - target.mean(), method="lar",
                                   max_iter=min(active.size, 40))
            for column in path.T[1:]:
                support = tuple(active[np.flatnonzero(column)])
                if support and support not in supports:
                    supports.append(support)
        except (ValueError, np.linalg.LinAlgError):
            pass
    for support in supports[:_MAX_SUPPORTS]:
        least_squares(list(support))
    return directions


def _formula_shortlist(candidates: list, scores: list) -> list[int]:
    """The candidates worth checking on every row: the best eight on the sample, the best of
    each number of terms, and the three simplest of those with the fewest rows off."""
    ranked = sorted(
        range(len(candidates)), key=lambda i: (scores[i], _formula_height(candidates[i]))
    )
    chosen = ranked[:8]
    by_terms: dict[int, int] = {}
    for i in ranked:
        by_terms.setdefault(len(candidates[i]), i)
    chosen += [i for i in by_terms.values() if i not in chosen]
    fewest_off = min((scores[i][0] for i in ranked), default=0)
    sparsest = sorted((i for i in ranked if scores[i][0] == fewest_off),
                      key=lambda i: _formula_height(candidates[i]))
    chosen += [i for i in sparsest[:3] if i not in chosen]
    return chosen


def _best_formula(evaluations: list):
    """Fewest rows off; then within 1% of the best residual, the simplest formula."""
    fewest = min(e.rows_off for e in evaluations)
    eligible = [e for e in evaluations if e.rows_off == fewest]
    best_rms = min(e.rms for e in eligible)
    eligible = [e for e in eligible if e.rms <= 1.01 * best_rms + 1e-12 * (1 + abs(best_rms))]
    return min(
        eligible,
        key=lambda e: (_formula_height(e.candidate) if e.candidate else (0, 0, 0), e.rms),
    )


def _formula_notes(best, sampled: int, n: int) -> tuple[str, ...]:
    notes = []
    if sampled < n:
        notes.append(Note("fit_scope", f"fitted on a sample of {sampled} of {n} rows; verified "
                          f"on all {n} rows", rows=n, sample=sampled))
    else:
        notes.append(Note("fit_scope", f"fitted and verified on all {n} rows", rows=n))
    if best.exact:
        notes.append(Note("verified_exactly", "verified exactly in rational arithmetic"))
    else:
        notes.append(Note(
            "verified_in_floats",
            "verified in floating point (a row is off when its residual exceeds 1e-9 of the "
            "target's size) because the target or a feature is not an exact value"
        ))
    if best.rows_off and best.exact:
        notes.append(Note("common_residual", "the constant is the most common exact residual; "
                          f"{best.rows_off} rows differ", rows_off=best.rows_off))
    return tuple(notes)


def latex_statement(terms: Sequence[tuple[str, Fraction]], relation: str, constant) -> str:
    """LaTeX for ``sum(coef * name) relation constant`` with ``relation`` one of =, <=, >=
    (the form of a relation or bound), written the way equations are."""
    symbols = {"=": "=", "<=": r"\leq", ">=": r"\geq"}
    body = _latex_sum([Term(feature=name, coef=Fraction(coef)) for name, coef in terms])
    return f"{body} {symbols[relation]} {_latex_number(Fraction(constant))}"
