"""Exact linear relations and sharp linear bounds among the invariants of a table.

Two layers:

* a numeric core on plain data (:func:`find_relations`, :func:`integer_kernel`,
  :func:`lll_reduce`): columns given as lists or arrays of exact integers and fractions (or
  floats for real-valued columns), row ids, settings;
* :class:`RelationsStep`, the step a study runs, which reads the columns of a
  :class:`analysis.table.Table` and calls the core.

Relations are integer vectors ``c`` with ``sum c_i * column_i = c_0`` on the rows. The
relation lattice is computed exactly (integer arithmetic throughout, no floating point in
the decision), on a few rows chosen so that it stays fast, then verified on every row; its
basis is LLL-reduced and then traded against itself for fewer terms, so that the reported
relations are short and readable. A constant column or a copy of another is reported once,
as trivial, and left out of the rest. Columns with missing values are searched on the rows
where they are present. Robust mode also finds relations that all but a few rows obey, by
solving on random subsets of rows and checking on all. Real-valued columns get approximate
relations, to a stated relative tolerance, labelled as such.

Bounds ``a*x + b*y <= c`` (and in three columns where cheap) are read off the faces of the
convex hull of the data points, computed exactly, and kept when their coefficients are
small and they do not follow from the columns' ranges and the exact relations.

Everything found is a conjecture that the table supports, not a theorem; the result says so.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, replace
from fractions import Fraction
from itertools import combinations
from numbers import Integral
from typing import ClassVar

import numpy as np

from analysis.errors import StepError
from analysis.notes import Note, note_code
from analysis.plain import plain
from analysis.progress import quiet
from analysis.settings import SEED, Setting, named
from analysis.settings import bound as bound_settings

__all__ = [
    "CAVEAT",
    "Bound",
    "Relation",
    "RelationsResult",
    "RelationsStep",
    "bound_rank",
    "find_relations",
    "integer_kernel",
    "lll_reduce",
    "relation_reasons",
]

CAVEAT = (
    "Every relation and bound here was found on this table and checked on its rows: each is a "
    "conjecture that the table supports, not a theorem."
)

# Caps that keep a 20-column, million-row table within seconds; the result notes each cut.
SETTINGS = (
    Setting("columns", label="Columns to search", option="--columns", metavar="A,B,...",
            help="Integer, rational and flag columns are searched exactly; real columns for "
                 "relations that hold to a tolerance.",
            option_help="columns to search (default: every integer invariant)"),
    Setting("robust", label="Also relations a few rows break"),
    Setting("bounds", label="Sharp bounds in pairs"),
    Setting("triples", label="and in triples"),
    Setting("max_breakers", page_minimum=0.0, page_maximum=1e6, page_step=0.01,
            label="Rows allowed to break (share, or a count)"),
    Setting("max_coefficient", minimum=1, page_maximum=100, spoken="relations: max_coefficient",
            label="Largest coefficient in a bound"),
    SEED,
)
MAX_RELATION_COLUMNS = 40
MAX_APPROXIMATE_COLUMNS = 20
MAX_BOUND_COLUMNS = 20
MAX_TRIPLE_COLUMNS = 8
MAX_BOUNDS = 30
# Bounds that all but a few rows obey, reported at most, after those that hold on every row.
MAX_NEAR_BOUNDS = 15
MAX_LISTED_ROWS = 1000
# A relation or bound broken by at most this many rows makes each breaker an object to look
# at; one broken by more is a tendency, and its breakers are listed but not flagged.
FEW_BREAKERS = 5
# Pairs of columns with missing values searched together for relations among them, when
# the rows where all of them are present are too few (see _relations_among_partial).
MAX_PARTIAL_PAIRS = 45
# Fraction of the spread of a bound's left side within which a row "comes close" to it.
NEAR_FRACTION = Fraction(1, 20)
# The left side's range past which its middle half's spread is used instead (near_margin).
HEAVY_TAIL = 100
# What "close" means, for the page's and the report's readers.
NEAR_MEANING = ("objects that miss equality by at most 1/20 of the spread of the bound's left "
                "side (of its middle half when a few values are far larger); at least 1 for "
                "integers")
# Bounds that all but a few rows obey are also searched along every direction of two integer
# columns with coefficients up to this size (besides the corners peeled off the hull).
DIRECTION_COEFFICIENT = 3
# A bound is ranked by its support less this much per unit of its size (see bound_rank).
RANK_SIZE_WEIGHT = 0.25

_FLOAT_EXACT = 2**53  # integers below this are exact in float64, and so are their sums
_INT64_SAFE = 2**62  # int64 sums that stay below this cannot overflow


# --------------------------------------------------------------------------------------------
# Results
# --------------------------------------------------------------------------------------------


def _number_text(value: Fraction) -> str:
    value = Fraction(value)
    if value.denominator <= 10**6:
        return str(value)
    # An approximate coefficient with a huge denominator reads better as a decimal.
    return f"{float(value):.12g}"


def _equation_text(terms: Sequence[tuple[str, Fraction]], relation: str, constant) -> str:
    parts = []
    for position, (name, coef) in enumerate(terms):
        size = abs(coef)
        body = name if size == 1 else f"{_number_text(size)}*{name}"
        if position == 0:
            parts.append(body if coef > 0 else f"-{body}")
        else:
            parts.append(f"{'+' if coef > 0 else '-'} {body}")
    return f"{' '.join(parts) or '0'} {relation} {_number_text(constant)}"


def _plain(value):
    """A row id as a plain Python value (JSON-ready)."""
    return value.item() if isinstance(value, np.generic) else value


@dataclass(frozen=True)
class Relation:
    """A linear relation ``sum(coef * column) = constant`` found on the table.

    ``holds_on`` counts the rows that obey it; ``violations`` are the ids of the rows that
    break it (empty for a relation that holds on every row). ``exact`` is True when the
    relation was checked in exact arithmetic and False for an approximate relation among
    real-valued columns, which holds to within ``tolerance`` (relative to the size of the
    terms). ``trivial`` marks a constant column or two equal columns (or nearly so).
    Rows with a missing value in one of the relation's columns count neither way.
    """

    terms: tuple[tuple[str, Fraction], ...]
    constant: Fraction
    holds_on: int
    violations: tuple = ()
    exact: bool = True
    trivial: bool = False
    note: str = ""
    tolerance: float | None = None
    consistent_with: tuple = ()   # ids of rows known by an interval that some value obeys

    @property
    def text(self) -> str:
        """The relation as one line, e.g. ``vertices - edges + faces = 2``."""
        text = _equation_text(self.terms, "=", self.constant)
        if not self.exact:
            text += f" (approximately: to within {self.tolerance:g} relative)"
        return text

    def to_json(self) -> dict:
        """The relation in the JSON shape of the design's ``relations`` list."""
        data = {
            "terms": [{"column": name, "coef": str(coef)} for name, coef in self.terms],
            "relation": "=",
            "constant": str(self.constant),
            "text": self.text,
            "holds_on": self.holds_on,
            "violations": [_plain(v) for v in self.violations],
            "exact": self.exact,
            "trivial": self.trivial,
            "note": self.note,
            "consistent_with": [_plain(v) for v in self.consistent_with],
        }
        if not self.exact:
            data["tolerance"] = self.tolerance
        return data


@dataclass(frozen=True)
class Bound:
    """A linear bound ``sum(coef * column) <= constant`` (or ``>=``) that the rows obey.

    ``attained_by`` holds the ids of the rows on which equality holds (the extremal objects;
    at most ``MAX_LISTED_ROWS`` of them, ``attained_count`` is the full number); ``near``
    counts the other rows within ``near_margin`` of the bound; ``violations`` are the ids of
    rows that break it (empty unless the bound was found in robust mode).
    """

    terms: tuple[tuple[str, Fraction], ...]
    relation: str
    constant: Fraction
    attained_by: tuple
    attained_count: int
    near: int
    near_margin: Fraction
    holds_on: int
    violations: tuple = ()
    note: str = ""
    consistent_with: tuple = ()   # ids of rows known by an interval that some value obeys

    @property
    def text(self) -> str:
        """The bound as one line, e.g. ``vertices - boundary_points <= 0``."""
        return _equation_text(self.terms, self.relation, self.constant)

    def to_json(self) -> dict:
        """The bound in the JSON shape of the design's ``bounds`` list."""
        return {
            "terms": [{"column": name, "coef": str(coef)} for name, coef in self.terms],
            "relation": self.relation,
            "constant": str(self.constant),
            "text": self.text,
            "attained_by": [_plain(v) for v in self.attained_by],
            "violations": [_plain(v) for v in self.violations],
            "attained_count": self.attained_count,
            "near": self.near,
            "near_margin": str(self.near_margin),
            "holds_on": self.holds_on,
            "note": self.note,
            "consistent_with": [_plain(v) for v in self.consistent_with],
        }


@dataclass(frozen=True)
class RelationsResult:
    """What the relations step found.

    ``relations``: exact relations (a basis of those holding on every row, then those holding
    on all but a few rows, then trivial ones); ``approximate``: relations among real-valued
    columns that hold to a stated tolerance; ``bounds``: sharp bounds, best first; ``notes``:
    what was left out or capped, in words; ``columns``: the columns looked at.
    """

    relations: tuple[Relation, ...]
    bounds: tuple[Bound, ...]
    approximate: tuple[Relation, ...]
    notes: tuple[str, ...]
    n_rows: int
    columns: tuple[str, ...]
    caveat: str = CAVEAT
    congruences: tuple = ()   # analysis.congruences.Congruence, simplest first
    kind: ClassVar[str] = "relations"

    def _repr_html_(self) -> str:
        from analysis.notebook import result_html

        return result_html(self)

    def to_frame(self):
        """The result as a pandas frame (see analysis.frames.relations_frame)."""
        from analysis.frames import relations_frame

        return relations_frame(self)

    def to_json(self) -> dict:
        """Plain JSON data: ``relations``, ``bounds`` as in the design, plus ``caveat``."""
        return plain({
            "rows": self.n_rows,
            "columns": list(self.columns),
            "relations": [relation.to_json() for relation in self.relations],
            "approximate_relations": [relation.to_json() for relation in self.approximate],
            "bounds": [bound.to_json() for bound in self.bounds],
            "congruences": [congruence.to_json() for congruence in self.congruences],
            "notes": list(self.notes),
            "caveat": self.caveat,
        })

    def summary(self) -> str:
        """A short human summary for the command line."""
        lines = [f"relations among {len(self.columns)} columns over {self.n_rows} rows"]
        exact = [r for r in self.relations if not r.trivial]
        trivial = [r for r in self.relations if r.trivial]
        if exact:
            for relation in exact:
                broken = (f"  (broken by {len(relation.violations)} rows)"
                          if relation.violations else "")
                lines.append(f"  {relation.text}{broken}{_consistent_text(relation)}")
        else:
            lines.append("  no exact relation")
        for relation in self.approximate:
            lines.append(f"  {relation.text}")
        if trivial:
            lines.append(f"  trivial: {'; '.join(r.text for r in trivial[:6])}"
                         + (" ..." if len(trivial) > 6 else ""))
        if self.bounds:
            lines.append(f"bounds (best {min(len(self.bounds), 10)} of {len(self.bounds)}):")
            for bound in self.bounds[:10]:
                broken = f", broken by {len(bound.violations)}" if bound.violations else ""
                lines.append(f"  {bound.text}  (attained by {bound.attained_count}, "
                             f"{bound.near} close{broken}){_consistent_text(bound)}")
        if self.congruences:
            lines.append(f"congruences ({len(self.congruences)}):")
            for congruence in self.congruences[:10]:
                broken = (f"  (broken by {congruence.violation_count} rows)"
                          if congruence.violation_count else "")
                present = (f"  (on the {congruence.holds_on} rows where its columns are "
                           "present)" if congruence.holds_on < self.n_rows else "")
                lines.append(f"  {congruence.text}{broken}{present}")
        broken = [s for s in (*self.relations, *self.bounds) if s.violations]
        if broken:
            lines.append(f"  to ask what sets the breakers of a statement apart: separate "
                         f"TABLE --breaks '{broken[0].text}'")
        lines.extend(f"  note: {note}" for note in self.notes)
        lines.append(self.caveat)
        return "\n".join(lines)


def _consistent_text(statement) -> str:
    count = len(statement.consistent_with)
    return (f"  (consistent with {count} row{'s' if count != 1 else ''} known only by an "
            "interval)") if count else ""


def relation_reasons(result: RelationsResult) -> dict:
    """Why each row is worth a look, in words, for the objects-to-look-at list.

    Returns ``{row_id: [reason, ...]}``: "breaks <relation>" for rows that break a relation
    or a bound that every other row obeys, "attains <bound>" for the extremal rows of a bound,
    "is off <relation>" for rows outside the tolerance of an approximate relation. A statement
    broken by more than ``FEW_BREAKERS`` rows is a tendency, not a law, and breaking it is no
    reason to look at a row.
    """
    reasons: dict = {}

    def add(row, text):
        reasons.setdefault(_plain(row), []).append(text)

    def broken(statement, verb="breaks"):
        count = len(statement.violations)
        if count > FEW_BREAKERS:
            return
        others = "" if count == 1 else f" (one of the {count} objects that do)"
        for row in statement.violations:
            add(row, Note("statement_broken", f"{verb} {statement.text}, which every other "
                          f"object obeys{others}", statement=statement.text, breaking=count))

    for relation in result.relations:
        broken(relation)
    for relation in result.approximate:
        for row in relation.violations:
            add(row, Note("relation_off", f"is off {relation.text}", statement=relation.text))
    for bound in result.bounds:
        broken(bound)
        for row in bound.attained_by:
            add(row, Note("bound_attained", f"attains {bound.text}", statement=bound.text))
    for congruence in result.congruences:
        broken(congruence)
    return reasons


# --------------------------------------------------------------------------------------------
# Exact lattice arithmetic
# --------------------------------------------------------------------------------------------


def _dot(u, v) -> int:
    return sum(a * b for a, b in zip(u, v))


def _nearest_integer(value: Fraction) -> int:
    # Halves round up, the usual convention for LLL's size reduction.
    return math.floor(value + Fraction(1, 2))


def lll_reduce(basis: Sequence[Sequence[int]], delta: Fraction = Fraction(3, 4)) -> list[list[int]]:
    """LLL-reduce a basis of linearly independent integer vectors, exactly.

    Parameters: ``basis``, the vectors (rows) of a lattice basis; ``delta`` in (1/4, 1], the
    Lovasz constant. Returns a basis of the same lattice whose Gram-Schmidt coefficients are
    at most 1/2 in size and which meets the Lovasz condition with ``delta``.

    >>> lll_reduce([[1, 1, 1], [-1, 0, 2], [3, 5, 6]])
    [[0, 1, 0], [1, 0, 1], [-1, 0, 2]]
    """
    vectors = [[int(x) for x in v] for v in basis]
    count = len(vectors)
    if count == 0:
        return []
    if len({len(v) for v in vectors}) != 1:
        raise ValueError("lll_reduce: the basis vectors have different lengths")
    delta = Fraction(delta)
    if not Fraction(1, 4) < delta <= 1:
        raise ValueError(f"lll_reduce: delta must lie in (1/4, 1], got {delta}")

    # Gram-Schmidt coefficients mu[i][j] and squared lengths norm[i] of the orthogonalised
    # vectors, from the Gram matrix, so that no rational vectors are ever formed.
    mu = [[Fraction(0)] * count for _ in range(count)]
    norm: list[Fraction] = []
    for i in range(count):
        inner = [Fraction(_dot(vectors[i], vectors[j])) for j in range(i + 1)]
        for j in range(i):
            value = inner[j] - sum(mu[j][k] * mu[i][k] * norm[k] for k in range(j))
            mu[i][j] = value / norm[j]
        length = inner[i] - sum(mu[i][k] ** 2 * norm[k] for k in range(i))
        if length == 0:
            raise ValueError("lll_reduce: the basis vectors are linearly dependent")
        norm.append(length)

    def size_reduce(k: int, j: int) -> None:
        if abs(mu[k][j]) <= Fraction(1, 2):
            return
        q = _nearest_integer(mu[k][j])
        vectors[k] = [a - q * b for a, b in zip(vectors[k], vectors[j])]
        for i in range(j):
            mu[k][i] -= q * mu[j][i]
        mu[k][j] -= q

    k = 1
    while k < count:
        size_reduce(k, k - 1)
        if norm[k] >= (delta - mu[k][k - 1] ** 2) * norm[k - 1]:
            for j in range(k - 2, -1, -1):
                size_reduce(k, j)
            k += 1
            continue
        # Exchange b_k and b_(k-1) and update the Gram-Schmidt data in place.
        m = mu[k][k - 1]
        merged = norm[k] + m * m * norm[k - 1]
        mu[k][k - 1] = m * norm[k - 1] / merged
        norm[k] = norm[k - 1] * norm[k] / merged
        norm[k - 1] = merged
        vectors[k], vectors[k - 1] = vectors[k - 1], vectors[k]
        for j in range(k - 1):
            mu[k][j], mu[k - 1][j] = mu[k - 1][j], mu[k][j]
        for i in range(k + 1, count):
            t = mu[i][k]
            mu[i][k] = mu[i][k - 1] - m * t
            mu[i][k - 1] = t + mu[k][k - 1] * mu[i][k]
        k = max(k - 1, 1)
    return vectors


def _restrict(basis: list[list[int]], row: Sequence[int]) -> list[list[int]]:
    """A basis of the vectors v of the lattice spanned by ``basis`` with ``row . v = 0``.

    Unimodular steps only (a Euclidean algorithm on the values row . b), so the result spans
    exactly the sublattice: no relation with integer coefficients is lost.
    """
    kept = []
    active = []
    for vector in basis:
        value = _dot(row, vector)
        if value == 0:
            kept.append(vector)
        else:
            active.append((value, vector))
    while len(active) > 1:
        active.sort(key=lambda item: abs(item[0]))
        pivot_value, pivot = active[0]
        survivors = [active[0]]
        for value, vector in active[1:]:
            q = _nearest_integer(Fraction(value, pivot_value))
            value -= q * pivot_value
            vector = [a - q * b for a, b in zip(vector, pivot)]
            if value == 0:
                kept.append(vector)
            else:
                survivors.append((value, vector))
        active = survivors
    return kept


def _identity(size: int) -> list[list[int]]:
    return [[int(i == j) for j in range(size)] for i in range(size)]


def _readability(vector: list[int]) -> tuple[int, int, int]:
    """Fewer terms first, then smaller coefficients, then a smaller constant."""
    return (sum(1 for x in vector[:-1] if x), sum(abs(x) for x in vector[:-1]), abs(vector[-1]))


def _sparsify(basis: list[list[int]]) -> list[list[int]]:
    """Trade basis vectors against each other while that removes a term or shrinks them.

    LLL makes vectors short in length, which can spread a coefficient over two related
    columns; a mathematician reads fewer terms more easily. Every step adds an integer
    multiple of one basis vector to another, so the lattice stays the same.
    """
    basis = [list(v) for v in basis]
    for _round in range(4 * len(basis) + 4):
        improved = False
        for i, j in ((i, j) for i in range(len(basis)) for j in range(len(basis)) if i != j):
            vector, other = basis[i], basis[j]
            for k in range(len(vector) - 1):
                if other[k] == 0 or vector[k] == 0 or vector[k] % other[k]:
                    continue
                q = vector[k] // other[k]
                candidate = [a - q * b for a, b in zip(vector, other)]
                if _readability(candidate) < _readability(vector):
                    basis[i] = vector = candidate
                    improved = True
        if not improved:
            break
    return basis


def _tidy(basis: list[list[int]]) -> list[list[int]]:
    """Reduce (LLL, then fewer terms), make each vector primitive with a positive leading
    coefficient, and sort."""
    if not basis:
        return []
    tidy = []
    for vector in _sparsify(lll_reduce(basis)):
        g = math.gcd(*vector)
        vector = [x // g for x in vector]
        lead = next(x for x in vector if x != 0)
        if lead < 0:
            vector = [-x for x in vector]
        tidy.append(vector)
    tidy.sort(key=lambda v: (_readability(v), v))
    return tidy


def integer_kernel(rows: Sequence[Sequence]) -> list[list[int]]:
    """A reduced basis of the integer vectors ``v`` with ``row . v = 0`` for every row.

    ``rows`` hold integers or fractions. The basis spans every integer solution (not just a
    finite-index part of them) and is LLL-reduced.

    >>> integer_kernel([[1, 1, 2], [0, 1, 1]])
    [[1, 1, -1]]
    """
    rows = [list(r) for r in rows]
    if not rows:
        raise ValueError("integer_kernel: no rows given")
    basis = _identity(len(rows[0]))
    for row in rows:
        scale = math.lcm(*(Fraction(x).denominator for x in row))
        basis = _restrict(basis, [int(Fraction(x) * scale) for x in row])
        if not basis:
            return []
    return _tidy(basis)


class RankTracker:
    """Keeps rational row-echelon vectors to tell whether a new vector adds to the span."""

    def __init__(self) -> None:
        self._rows: list[tuple[int, list[Fraction]]] = []

    def add(self, vector: Sequence) -> bool:
        """Add ``vector``; return False (and add nothing) when it lies in the current span."""
        v = [Fraction(x) for x in vector]
        for pivot, row in self._rows:
            if v[pivot]:
                factor = v[pivot] / row[pivot]
                v = [a - factor * b for a, b in zip(v, row)]
        pivot = next((i for i, x in enumerate(v) if x), None)
        if pivot is None:
            return False
        self._rows.append((pivot, v))
        return True


# --------------------------------------------------------------------------------------------
# Reading columns
# --------------------------------------------------------------------------------------------


def exact_column(name: str, values) -> tuple[np.ndarray, np.ndarray]:
    """(values, missing) of an exact column (ints, fractions, None for missing; or an integer
    numpy array): int64 when every value fits, else an object array of int/Fraction; a
    missing cell holds 0. StepError names a cell that is not exact."""
    if isinstance(values, np.ndarray) and values.dtype.kind in "iub":
        return values.astype(np.int64), np.zeros(len(values), dtype=bool)
    items = list(values)
    missing = np.zeros(len(items), dtype=bool)
    clean = []
    fits = True
    for position, value in enumerate(items):
        if value is None or (isinstance(value, float) and math.isnan(value)):
            missing[position] = True
            clean.append(0)
            continue
        if isinstance(value, Integral):
            value = int(value)
        elif isinstance(value, Fraction):
            value = value.numerator if value.denominator == 1 else value
        elif isinstance(value, float) and value.is_integer():
            value = int(value)
        else:
            raise StepError(
                f"relations: column '{name}', row {position}: expected an exact integer or "
                f"fraction, got {value!r}. Mark the column as real-valued or fix the cell."
            )
        if not isinstance(value, int) or abs(value) >= _INT64_SAFE:
            fits = False
        clean.append(value)
    if fits:
        return np.array(clean, dtype=np.int64), missing
    array = np.empty(len(clean), dtype=object)
    array[:] = clean
    return array, missing


class RelationMatrix:
    """Exact rows, one integer column per invariant plus a last column for the constant
    (``RelationMatrix(columns, rows)``: the columns as :func:`exact_column` gives them, the
    positions of the rows to keep, sorted).

    A row holding fractions is multiplied by the least common multiple of its denominators:
    that changes no relation, and keeps all arithmetic in integers.
    """

    def __init__(self, columns: list[np.ndarray], rows: np.ndarray) -> None:
        size = len(rows)
        every = size == len(columns[0])  # rows are sorted and distinct, so this means all
        picked = [column if every else column[rows] for column in columns]
        if all(c.dtype != object for c in picked):
            integers = picked + [np.ones(size, dtype=np.int64)]
        else:
            integers = _scaled_rows(picked)
        if all(c.dtype != object for c in integers):
            # Column-major: each invariant is one contiguous stretch of memory.
            values = np.empty((size, len(integers)), dtype=np.int64, order="F")
        else:
            values = np.empty((size, len(integers)), dtype=object)
        for j, column in enumerate(integers):
            values[:, j] = column
        self.values = values
        self.size = size
        if values.dtype == object:
            self.col_max = [max((abs(int(x)) for x in values[:, j]), default=0)
                            for j in range(values.shape[1])]
        elif size:
            self.col_max = [int(max(-c.min(), c.max())) for c in values.T]
        else:
            self.col_max = [0] * values.shape[1]
        self.as_float = (
            values.astype(np.float64, order="F")
            if values.dtype != object and max(self.col_max) < _FLOAT_EXACT
            else None
        )

    def row(self, position: int) -> list[int]:
        return [int(x) for x in self.values[position]]

    def broken(self, vectors: list[list[int]], rows: np.ndarray | None = None) -> np.ndarray:
        """Boolean (rows x vectors): True where the row does not satisfy the relation."""
        count = self.size if rows is None else len(rows)
        if not vectors:
            return np.zeros((count, 0), dtype=bool)
        bound = max(sum(m * abs(c) for m, c in zip(self.col_max, v)) for v in vectors)
        if self.as_float is not None and bound < _FLOAT_EXACT:
            # Every partial sum is an integer below 2**53, so float64 is exact here. Multiplying
            # every row and then picking is cheaper than copying the picked rows first.
            product = (np.array(vectors, dtype=np.float64) @ self.as_float.T).T
            return (product if rows is None else product[rows]) != 0
        return self.products(vectors, rows, bound) != 0

    def products(self, vectors: list[list[int]], rows: np.ndarray | None = None,
                 bound: int | None = None) -> np.ndarray:
        """Exact (rows x vectors) products of the rows with ``vectors`` (an invariant's
        coefficients, the constant's last): int64 when no sum can overflow, else Python
        integers. A row scaled for its fractions gives its value times its scale, so it is
        zero exactly where the row obeys the relation. ``bound`` is a known bound on every
        product's size."""
        if not vectors:
            return np.zeros((self.size if rows is None else len(rows), 0), dtype=np.int64)
        if bound is None:
            bound = max(sum(m * abs(c) for m, c in zip(self.col_max, v)) for v in vectors)
        if self.values.dtype != object and bound < _INT64_SAFE:
            product = (np.array(vectors, dtype=np.int64) @ self.values.T).T
            return product if rows is None else product[rows]
        data = self.values if rows is None else self.values[rows]
        coefficients = np.empty((len(vectors[0]), len(vectors)), dtype=object)
        coefficients[:, :] = np.array(vectors, dtype=object).T
        return data.astype(object).dot(coefficients)


# --------------------------------------------------------------------------------------------
# Exact relations
# --------------------------------------------------------------------------------------------


def _scaled_rows(columns: list[np.ndarray]) -> list[np.ndarray]:
    """Columns of ints and fractions as integer columns, each row multiplied by the least
    common multiple of its denominators, plus that multiple as the constant's column.

    int64 wherever the numbers fit, so that a table of small fractions stays fast.
    """
    size = len(columns[0])
    numerators, denominators = [], []
    for column in columns:
        if column.dtype != object:
            numerators.append(column)
            denominators.append(None)
            continue
        items = column.tolist()
        numerators.append(_compact([v.numerator if isinstance(v, Fraction) else int(v)
                                    for v in items]))
        denominators.append(_compact([v.denominator if isinstance(v, Fraction) else 1
                                      for v in items]))
    present = [d for d in denominators if d is not None]
    small = all(d.dtype != object for d in present) and (
        np.prod([d.astype(np.float64) for d in present], axis=0).max(initial=1) < _INT64_SAFE)
    if small:
        # The product of a row's denominators fits, so their lcm (a divisor of it) does too.
        scale = np.lcm.reduce(np.column_stack(present), axis=1) if present else np.ones(
            size, dtype=np.int64)
    else:
        scale = np.empty(size, dtype=object)
        scale[:] = [math.lcm(*(int(d[i]) for d in present)) for i in range(size)]
    result = []
    for numerator, denominator in zip(numerators, denominators):
        factor = scale if denominator is None else scale // denominator
        result.append(_product(numerator, factor))
    return result + [scale]


def _compact(values: list[int]) -> np.ndarray:
    """int64 when every value fits, else an object array of Python ints."""
    if all(abs(v) < _INT64_SAFE for v in values):
        return np.array(values, dtype=np.int64)
    array = np.empty(len(values), dtype=object)
    array[:] = values
    return array


def _product(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """a * b exactly: int64 when it cannot overflow, else Python integers."""
    if a.dtype != object and b.dtype != object and len(a):
        largest = float(np.abs(a).max()) * float(np.abs(b).max())
        if largest < _INT64_SAFE / 2:
            return a * b
    result = np.empty(len(a), dtype=object)
    result[:] = [int(x) * int(y) for x, y in zip(a.tolist(), b.tolist())]
    return result


def _kernel_on(matrix: RelationMatrix, rows: np.ndarray,
               rng: np.random.Generator) -> list[list[int]]:
    """Reduced basis of the integer relations that hold on every row in ``rows``.

    Solved on a random handful of rows, then checked on all of them; a row that breaks a
    candidate joins the system. Each round lowers the dimension, so this ends after at most
    one round per column.
    """
    width = matrix.values.shape[1]
    basis = _identity(width)
    if len(rows) == 0:
        return basis
    sample_size = min(len(rows), 3 * width + 10)
    sample = np.sort(rng.choice(rows, size=sample_size, replace=False))
    for position in sample:
        basis = _restrict(basis, matrix.row(position))
        if not basis:
            return []
    basis = lll_reduce(basis)
    while basis:
        bad = np.flatnonzero(matrix.broken(basis, rows).any(axis=1))
        if len(bad) == 0:
            break
        basis = _restrict(basis, matrix.row(rows[bad[0]]))
        basis = lll_reduce(basis) if basis else basis
    return _tidy(basis)


def _distinct_count(matrix: RelationMatrix, rows: np.ndarray, support: list[int],
                    enough: int) -> int:
    """Distinct rows over ``support`` columns among ``rows``, counted up to ``enough``."""
    data = matrix.values[rows[: 50 * enough]][:, support]
    if data.dtype == object:
        return len({tuple(r) for r in data.tolist()})
    return len(np.unique(data, axis=0))


def _trials_needed(breakers: int, size: int, sample_size: int) -> int:
    """Random subsets to draw so that one misses every breaker with probability 0.999."""
    clean = (1 - breakers / size) ** sample_size if size else 1.0
    if clean >= 0.999:
        return 2
    if clean <= 1e-6:
        return 60
    return int(min(60, max(3, math.ceil(math.log(1e-3) / math.log(1 - clean)))))


def _robust_kernels(matrix, rows, base_dim, breakers, rng) -> list[frozenset]:
    """Sets of rows whose removal leaves new relations, found by solving on random subsets."""
    width = matrix.values.shape[1]
    # Small subsets miss the breakers more often; when one is too small to pin the relations
    # down, the loop below adds rows to it.
    sample_size = min(len(rows), width + 3)
    hypotheses: list[frozenset] = []
    for _ in range(_trials_needed(breakers, len(rows), sample_size)):
        sample = rng.choice(rows, size=sample_size, replace=False)
        basis = _identity(width)
        for position in sample:
            basis = _restrict(basis, matrix.row(position))
        # Both lattices are saturated and this one contains the table's, so equal dimension
        # means equal lattices: nothing new on this subset.
        for _step in range(width + 1):
            if len(basis) <= base_dim:
                break
            basis = lll_reduce(basis)
            broken = matrix.broken(basis, rows)
            counts = broken.sum(axis=0)
            fitting = [j for j, c in enumerate(counts) if 0 < c <= breakers]
            if fitting:
                for j in fitting:
                    hypotheses.append(frozenset(rows[broken[:, j]].tolist()))
                break
            # The subset was too small to pin the relations down: add a row that breaks the
            # candidate broken least often (most likely a row that is not a breaker).
            j = min((j for j, c in enumerate(counts) if c), key=lambda j: counts[j])
            extra = rows[rng.choice(np.flatnonzero(broken[:, j]))]
            basis = _restrict(basis, matrix.row(extra))
    unique = sorted(set(hypotheses), key=lambda h: (len(h), sorted(h)))
    return unique[:20]


def _relation_from_vector(vector, names, holds_on, violations, note="", trivial=False):
    terms = tuple((names[j], Fraction(c)) for j, c in enumerate(vector[:-1]) if c)
    return Relation(
        terms=terms,
        constant=Fraction(-vector[-1]),
        holds_on=holds_on,
        violations=tuple(violations),
        exact=True,
        trivial=trivial,
        note=note,
    )


def relation_vector(relation: Relation, names: Sequence[str]) -> list[int]:
    """The exact relation as an integer vector over ``names`` (every column it has) and a
    last entry for the constant, as the search writes relations (the inverse of reading a
    vector as a relation, up to a positive factor)."""
    index = {n: j for j, n in enumerate(names)}
    scale = math.lcm(*(Fraction(c).denominator for _, c in relation.terms),
                     Fraction(relation.constant).denominator)
    vector = [0] * (len(names) + 1)
    for name, coef in relation.terms:
        vector[index[name]] = int(Fraction(coef) * scale)
    vector[-1] = -int(Fraction(relation.constant) * scale)
    return vector


def with_breakers(relation: Relation, holds_on: int, violations) -> Relation:
    """The exact ``relation`` as reported when the rows ``violations`` (their ids) break it
    and ``holds_on`` rows obey it, with the note of :func:`robust_note`."""
    violations = tuple(violations)
    return replace(relation, holds_on=holds_on, violations=violations,
                   note=robust_note([name for name, _ in relation.terms], len(violations),
                                    relation.trivial))


def breakers_allowed(max_breakers, size: int) -> int:
    if isinstance(max_breakers, Integral) or (
        isinstance(max_breakers, float) and max_breakers >= 1
    ):
        return int(max_breakers)
    return int(math.floor(float(max_breakers) * size))


def _repeat(columns, name, rows, earlier, where=""):
    """A trivial relation when column ``name`` is constant on ``rows`` or equals an earlier
    column there; None otherwise."""
    values = columns[name][0][rows]
    first = values[0]
    if bool(np.all(values == first)):
        return Relation(
            terms=((name, Fraction(1)),), constant=Fraction(first), holds_on=len(rows),
            trivial=True, note=Note("trivial_constant", f"trivial: column '{name}' is "
                                    f"constant{where}", columns=(name,)),
        )
    # Comparing the first values rules most pairs out without a pass over every row.
    twin = next(
        (other for other in earlier
         if np.array_equal(columns[other][0][rows[:256]], values[:256])
         and np.array_equal(columns[other][0][rows], values)),
        None,
    )
    if twin is None:
        return None
    return Relation(
        terms=((twin, Fraction(1)), (name, Fraction(-1))), constant=Fraction(0),
        holds_on=len(rows), trivial=True,
        note=Note("trivial_equal", f"trivial: columns '{twin}' and '{name}' are "
                  f"equal{where or ' on every row'}", columns=(twin, name)),
    )


def _as_equality(relation: Relation) -> tuple[dict, Fraction]:
    return dict(relation.terms), relation.constant


def _robust_relations(matrix, core, base, row_ids, used, breakers, rng) -> list[Relation]:
    """Relations that all but at most ``breakers`` rows obey, beyond those in ``base``."""
    size = matrix.size
    every_row = np.arange(size)
    candidates = []
    for hypothesis in _robust_kernels(matrix, every_row, len(base), breakers, rng):
        keep = np.ones(size, dtype=bool)
        keep[list(hypothesis)] = False
        keep = np.flatnonzero(keep)
        if len(keep) == 0:
            continue
        lattice = _kernel_on(matrix, keep, rng)
        if len(lattice) <= len(base):
            continue
        broken = matrix.broken(lattice)
        for j, vector in enumerate(lattice):
            bad = np.flatnonzero(broken[:, j])
            if 0 < len(bad) <= breakers:
                candidates.append((vector, len(bad), bad))

    def varied(candidate) -> bool:
        vector, _, bad = candidate
        support = [j for j, c in enumerate(vector[:-1]) if c]
        # A relation in t columns is pinned down by t rows; ask for a few more than that so
        # that a relation through a handful of points is not mistaken for a pattern.
        needed = len(support) + 3
        return _distinct_count(matrix, np.delete(every_row, bad), support, needed) >= needed

    found = []
    for vector, _, bad in robust_choice(candidates, base, varied):
        support = [j for j, c in enumerate(vector[:-1]) if c]
        terms = [(core[j], vector[j]) for j in support]
        trivial = len(terms) == 1 or (
            len(terms) == 2 and vector[-1] == 0 and terms[0][1] == -terms[1][1]
        )
        found.append(with_breakers(_relation_from_vector(vector, core, 0, (), trivial=trivial),
                                   size - len(bad), row_ids[used[bad]].tolist()))
    return found


def robust_choice(candidates: list, base: list, usable) -> list:
    """The relations broken by a few rows that are reported: of ``candidates`` (tuples of an
    integer vector, the rows breaking it, then anything), in :func:`robust_rank` order, those
    that ``usable`` accepts whose vector adds to the span of ``base`` and of those before."""
    tracker = RankTracker()
    for vector in base:
        tracker.add(vector)
    return [c for c in sorted(candidates, key=lambda c: robust_rank(c[1], c[0]))
            if usable(c) and tracker.add(c[0])]


def robust_rank(breaking: int, vector: Sequence[int]) -> tuple:
    """Sort key of a relation (integer vector, constant last) that ``breaking`` rows break:
    fewer breaking rows, then fewer columns, then smaller coefficients first."""
    return breaking, sum(1 for x in vector[:-1] if x), sum(x * x for x in vector)


def robust_note(names: Sequence[str], breaking: int, trivial: bool) -> Note:
    """The note of an exact relation over ``names`` that ``breaking`` rows break."""
    if trivial and len(names) == 1:
        return Note("trivial_constant", f"trivial: column '{names[0]}' is constant on all but "
                    f"{breaking} rows", columns=tuple(names), breaking=breaking)
    if trivial and len(names) == 2:
        return Note("trivial_equal", f"trivial: columns '{names[0]}' and '{names[1]}' are "
                    f"equal on all but {breaking} rows", columns=tuple(names), breaking=breaking)
    return _breakers_note(breaking)


def _breakers_note(breaking: int) -> Note:
    return Note("breakers", f"holds on all but {breaking} rows", breaking=breaking)


def joined_note(*notes) -> Note | str:
    """The notes of one relation or bound said as one, in order (``a; b``); empty ones are
    left out. The parts stay records: ``figures["parts"]`` of a note coded ``several``."""
    parts = [part for note in notes for part in _note_parts(note)]
    if len(parts) < 2:
        return parts[0] if parts else ""
    return Note("several", "; ".join(parts), parts=tuple(parts))


def _note_parts(note) -> tuple:
    if not note:
        return ()
    return note.figures["parts"] if note_code(note) == "several" else (note,)


def approximate_note(breaking: int, terms: tuple = (), trivial: bool = False) -> Note:
    """The note of an approximate relation that ``breaking`` rows are off; a trivial one
    (one column constant, or two ``terms`` equal) says so."""
    note = joined_note(Note("approximate", "approximate: the columns hold floating point "
                            "values"), _breakers_note(breaking) if breaking else "")
    if not trivial:
        return note
    return Note("trivial_constant" if len(terms) == 1 else "trivial_equal",
                ("trivial: a constant column" if len(terms) == 1
                 else "trivial: two equal columns") + f" ({note})",
                columns=tuple(name for name, _ in terms), breaking=breaking)


def _exact_relations(columns, names, row_ids, *, robust, max_breakers, rng, notes):
    """Trivial relations, a basis of the relations on every row, and robust relations.

    Columns with no missing value are searched together on every row. Each column with some
    missing values is then searched with them on the rows where it is present, for the
    relations that involve it (dropping those rows everywhere would make other columns look
    constant when they are not).

    Returns (relations, equalities, repeated): equalities are (coefs by name, constant) of
    the relations that hold on every row, for the bound step's implication test; repeated
    names the columns that are constant or copies of another.
    """
    n = len(row_ids)
    share = {name: float(columns[name][1].mean()) for name in names}
    dropped = [name for name in names if share[name] > 0.5]
    if dropped:
        notes.append(Note(
            "relation_columns_left_out",
            "left out of the relation search (missing in more than half of the rows): "
            + ", ".join(dropped), columns=tuple(dropped),
        ))
    names = [name for name in names if name not in dropped]
    if len(names) > MAX_RELATION_COLUMNS:
        notes.append(Note(
            "relation_columns_limited",
            f"relation search limited to the first {MAX_RELATION_COLUMNS} of {len(names)} "
            "exact columns; name columns to search others",
            searched=MAX_RELATION_COLUMNS, columns=len(names),
        ))
        names = names[:MAX_RELATION_COLUMNS]
    complete = [name for name in names if share[name] == 0]
    partial = [name for name in names if share[name] > 0]

    every_row = np.arange(n)
    trivial: list[Relation] = []
    core: list[str] = []
    for name in complete:
        repeat = _repeat(columns, name, every_row, core)
        if repeat is None:
            core.append(name)
        else:
            trivial.append(repeat)
    equalities = [_as_equality(r) for r in trivial]
    repeated = {r.terms[-1][0] for r in trivial}

    found: list[Relation] = []
    robust_found: list[Relation] = []
    if core:
        matrix = RelationMatrix([columns[name][0] for name in core], every_row)
        base = _kernel_on(matrix, every_row, rng)
        width = len(core) + 1
        distinct = _distinct_count(matrix, every_row, list(range(len(core))), 2 * width)
        for vector in base:
            note = ""
            if distinct <= width:
                note = Note("few_distinct_rows", f"only {distinct} distinct rows for "
                            f"{len(core)} columns: relations like this one are forced by the "
                            "small number of rows", distinct=distinct, columns=len(core))
            found.append(_relation_from_vector(vector, core, n, (), note))
        equalities += [_as_equality(r) for r in found]
        breakers = breakers_allowed(max_breakers, n) if robust else 0
        if breakers > 0 and n > width:
            robust_found = _robust_relations(matrix, core, base, row_ids, every_row, breakers,
                                             rng)

    partial_found: list[Relation] = []
    for name in partial:
        rows = np.flatnonzero(~columns[name][1])
        where = f" on the {len(rows)} rows where '{name}' is present"
        repeat = _repeat(columns, name, rows, core)
        if repeat is not None:
            trivial.append(repeat)
            continue
        matrix = RelationMatrix([columns[c][0] for c in core + [name]], rows)
        lattice = _kernel_on(matrix, np.arange(len(rows)), rng)
        # Relations among the other columns alone (on these rows) are not news about this one.
        unit = [0] * len(core) + [1, 0]
        tracker = RankTracker()
        for vector in _restrict([list(v) for v in lattice], unit):
            tracker.add(vector)
        for vector in lattice:
            if vector[len(core)] and tracker.add(vector):
                partial_found.append(_relation_from_vector(
                    vector, core + [name], len(rows), (),
                    Note("holds_where_present", f"holds{where}", rows=len(rows))))
    partial_found += _relations_among_partial(columns, core, partial, rng.spawn(1)[0])
    if partial:
        notes.append(Note(
            "searched_where_present",
            "columns with missing values were searched on the rows where they are present: "
            + ", ".join(partial), columns=tuple(partial),
        ))
    return ordered_relations(found + partial_found + trivial, robust_found), equalities, repeated


def _relations_among_partial(columns, core: list[str], partial: list[str], rng) -> list:
    """Relations tying two or more columns with missing values together.

    Searched on the rows where all of them are present when those rows are varied enough
    (at least twice as many distinct rows as unknowns), else pair by pair (the first
    MAX_PARTIAL_PAIRS pairs). A relation found there is kept only when it holds on every row
    where its own columns are present, and says on how many.
    """
    if len(partial) < 2:
        return []
    found = []
    for group, rows in _partial_groups(columns, core, partial):
        names = core + group
        lattice = _kernel_on(RelationMatrix([columns[c][0] for c in names], rows),
                             np.arange(len(rows)), rng)
        # relations with at most one of the group's columns were searched column by column
        tracker = RankTracker()
        for keep in range(len(group)):
            single = [list(v) for v in lattice]
            for other in range(len(group)):
                if other != keep:
                    single = _restrict(single, _unit(len(names) + 1, len(core) + other))
            for vector in single:
                tracker.add(vector)
        for vector in lattice:
            involved = [c for k, c in enumerate(group) if vector[len(core) + k]]
            if len(involved) >= 2 and tracker.add(vector):
                relation = _held_where_present(columns, names, vector, involved)
                if relation is not None:
                    found.append(relation)
    return found


def _unit(width: int, position: int) -> list[int]:
    return [1 if j == position else 0 for j in range(width)]


def _partial_groups(columns, core: list[str], partial: list[str]) -> list:
    """(columns, rows where they are all present) to search for relations among them."""
    missing = np.column_stack([columns[name][1] for name in partial])
    rows = np.flatnonzero(~missing.any(axis=1))
    width = len(core) + len(partial) + 1
    if len(rows) >= 2 * width:
        matrix = RelationMatrix([columns[c][0] for c in core + partial], rows)
        if _distinct_count(matrix, np.arange(len(rows)), list(range(width - 1)),
                           2 * width) >= 2 * width:
            return [(partial, rows)]
    groups = []
    for a, b in list(combinations(range(len(partial)), 2))[:MAX_PARTIAL_PAIRS]:
        pair = np.flatnonzero(~(missing[:, a] | missing[:, b]))
        if len(pair) >= 2 * (len(core) + 3):
            groups.append(([partial[a], partial[b]], pair))
    return groups


def _held_where_present(columns, names: list[str], vector, involved: list[str]):
    """The relation of ``vector`` when it holds on every row where ``involved`` (the columns
    with missing values it uses) are present; None when one of those rows breaks it."""
    products, counted = relation_products(columns, names, [list(vector)])
    if products.any():
        return None
    rows = int(counted.sum())
    shown = " and ".join(f"'{name}'" for name in involved)
    return _relation_from_vector(
        vector, names, rows, (),
        Note("holds_where_present", f"holds on the {rows} rows where {shown} are present",
             rows=rows))


def relation_products(columns: Mapping, names: Sequence[str], vectors: list) -> tuple:
    """(rows x relations, exactly; rows x relations, whether the row counts for it) of a block
    of rows: each row times each relation (an integer vector over the columns ``names``, as
    :func:`exact_column` gives them, and a last entry for the constant). A relation counts
    only the rows where every column it uses is present; its product is zero on the others.
    Nonzero exactly where a row breaks a relation."""
    size = len(columns[names[0]][0]) if names else 0
    counted = np.ones((size, len(vectors)), dtype=bool)
    if not vectors:
        return np.zeros((size, 0), dtype=np.int64), counted
    for j, vector in enumerate(vectors):
        gone = [columns[n][1] for n, c in zip(names, vector) if c]
        counted[:, j] = ~np.any(gone, axis=0) if gone else True
    products = RelationMatrix([columns[n][0] for n in names], np.arange(size)).products(vectors)
    products[~counted] = 0
    return products, counted


def ordered_relations(every: list, robust: list) -> list:
    """Relations in the order they are reported: those of every row, then those broken by a
    few rows, the trivial ones (constant or repeated columns) of each after all the others."""
    return ([r for r in every if not r.trivial] + [r for r in robust if not r.trivial]
            + [r for r in every if r.trivial] + [r for r in robust if r.trivial])


def settle_relations(every: list, candidates: list, counts: list, allowed: int,
                     names: Sequence[str]) -> list:
    """The exact relations reported from counts over every row, for an engine that searches
    some rows and counts on all, kept as the search keeps them: of ``every`` (relations that
    no row searched breaks) those no row breaks; of ``candidates`` ((relation, its
    :func:`relation_vector` over ``names``), relations that a few rows break) those at most
    ``allowed`` rows break, chosen by :func:`robust_choice`; in the reported order.
    ``counts`` hold (rows counted, rows breaking, the first breaking rows' ids) of each of
    ``every``, then of each candidate."""
    first = counts[: len(every)]
    settled = [replace(r, holds_on=present)
               for r, (present, count, _) in zip(every, first) if not count]
    chosen = robust_choice(
        [(vector, count, relation, present, ids) for (relation, vector), (present, count, ids)
         in zip(candidates, counts[len(every):])],
        [relation_vector(r, names) for r in every], lambda c: 0 < c[1] <= allowed)
    robust = [with_breakers(relation, present - count, ids[: allowed + 1].tolist())
              for _, count, relation, present, ids in chosen]
    return ordered_relations(settled, robust)


def settle_approximate(relations: list, counts: list, allowed: int) -> list:
    """The approximate relations reported from counts over every row: each of ``relations``
    with its counts (rows counted, rows off, the first off rows' ids), kept when at most
    ``allowed`` rows are off."""
    return [replace(r, holds_on=present - off, violations=tuple(ids[: allowed + 1].tolist()),
                    note=approximate_note(off, r.terms, r.trivial))
            for r, (present, off, ids) in zip(relations, counts) if off <= allowed]


# --------------------------------------------------------------------------------------------
# Approximate relations among real-valued columns
# --------------------------------------------------------------------------------------------


def _snap(value: float, tolerance: float) -> Fraction:
    """A simple fraction for ``value`` when one lies within the tolerance, else its decimal."""
    simple = Fraction(value).limit_denominator(1000)
    if abs(float(simple) - value) <= tolerance * max(1.0, abs(value)):
        return simple
    return Fraction(f"{value:.12g}")


def _null_relations(scaled: np.ndarray, scale: np.ndarray, sample: np.ndarray, names: list,
                    real_names: set, tolerance: float) -> list[np.ndarray]:
    """Relations (in table units) that the sampled rows of ``scaled`` nearly obey, in
    echelon form."""
    width = scaled.shape[1]
    _, singular, right = np.linalg.svd(scaled[sample], full_matrices=False)
    limit = singular[0] * tolerance * math.sqrt(len(sample))
    null = right[singular <= limit]
    if len(null) == 0:
        return []
    # Echelon form with pivots on real-valued columns first, so each relation names one
    # real column in terms of the others.
    null = null.copy()
    order = [j for j in range(width - 1) if names[j] in real_names] + [
        j for j in range(width - 1) if names[j] not in real_names
    ]
    pivots = []
    for row in range(len(null)):
        choices = [j for j in order if j not in pivots]
        if not choices:
            break
        sizes = {j: float(abs(null[row:, j]).max()) for j in choices}
        largest = max(sizes.values())
        if largest == 0:
            break
        best = next(j for j in choices if sizes[j] >= 0.1 * largest)
        swap = row + int(np.argmax(abs(null[row:, best])))
        null[[row, swap]] = null[[swap, row]]
        null[row] /= null[row, best]
        for other in range(len(null)):
            if other != row:
                null[other] -= null[other, best] * null[row]
        pivots.append(best)
    return [vector / scale for vector in null[: len(pivots)]]


def approximately_off(values: np.ndarray, coefs: np.ndarray, tolerance: float) -> np.ndarray:
    """Which rows of ``values`` (a last column of ones for the constant) are off the
    approximate relation ``values @ coefs = 0``, beyond ``tolerance`` relative to its terms."""
    residual = np.abs(values @ coefs)
    size_of_terms = np.abs(values) @ np.abs(coefs)
    return ~(residual <= tolerance * np.maximum(size_of_terms, 1e-300))


def _known_vectors(known: list[tuple[dict, Fraction]], names: list, scale: np.ndarray) -> list:
    """The exact relations among ``names`` as scaled float vectors (constant last)."""
    tracker_rows: list[np.ndarray] = []
    for coefs, constant in known:
        if set(coefs) <= set(names):
            vector = np.zeros(len(names) + 1)
            for name, coef in coefs.items():
                vector[names.index(name)] = float(coef)
            vector[-1] = -float(constant)
            tracker_rows.append(vector * scale)
    return tracker_rows


def _approximate_relations(
    data: dict, real_names: set, row_ids, *, tolerance, breakers_setting, robust, rng,
    known: list[tuple[dict, Fraction]], notes,
) -> list[Relation]:
    names = list(data)
    matrix = np.column_stack([data[name] for name in names] + [np.ones(len(row_ids))])
    finite = np.isfinite(matrix).all(axis=1)
    used = np.flatnonzero(finite)
    if len(used) < len(row_ids):
        notes.append(Note(
            "approximate_rows_left_out",
            f"{len(row_ids) - len(used)} rows with a missing or infinite value were left out "
            "of the approximate relation search", rows=len(row_ids) - len(used),
        ))
    values = matrix[used]
    size, width = values.shape
    if size < width + 2:
        notes.append(Note("approximate_too_few_rows",
                          "too few rows for an approximate relation search"))
        return []
    breakers = breakers_allowed(breakers_setting, size) if robust else 0
    scale = np.sqrt(np.mean(values**2, axis=0))
    scale[scale == 0] = 1.0
    scaled = values / scale

    samples = [np.sort(rng.choice(size, size=min(size, 20_000), replace=False))]
    if breakers:
        small = min(size, 2 * width + 10)
        samples += [np.sort(rng.choice(size, size=small, replace=False))
                    for _ in range(_trials_needed(breakers, size, small))]

    tracker_rows = _known_vectors(known, names, scale)

    def independent(vector: np.ndarray) -> bool:
        stacked = np.vstack(tracker_rows + [vector * scale])
        stacked = stacked / np.linalg.norm(stacked, axis=1, keepdims=True)
        return np.linalg.matrix_rank(stacked, tol=1e-6) == len(stacked)

    found: list[tuple[int, Relation]] = []
    for sample in samples:
        for vector in _null_relations(scaled, scale, sample, names, real_names, tolerance):
            lead = max(range(width - 1), key=lambda j: abs(vector[j]) * scale[j])
            vector = vector / vector[lead]
            sizes = np.abs(vector) * scale
            vector[sizes <= tolerance * sizes.max()] = 0.0
            if not any(vector[j] and names[j] in real_names for j in range(width - 1)):
                continue  # among exact columns only: the exact search covers it
            snapped = [_snap(float(x), tolerance) for x in vector]
            coefs = np.array([float(x) for x in snapped])
            bad = np.flatnonzero(approximately_off(values, coefs, tolerance))
            if len(bad) > breakers or not independent(coefs):
                continue
            tracker_rows.append(coefs * scale)
            terms = tuple((names[j], snapped[j]) for j in range(width - 1) if snapped[j])
            trivial = len(terms) == 1 or (
                len(terms) == 2 and terms[0][1] == -terms[1][1] and snapped[-1] == 0)
            note = approximate_note(len(bad), terms, trivial)
            found.append((len(bad), Relation(
                terms=terms, constant=-snapped[-1], holds_on=size - len(bad),
                violations=tuple(row_ids[used[bad]].tolist()), exact=False, trivial=trivial,
                note=note, tolerance=tolerance,
            )))
    found.sort(key=lambda item: (item[1].trivial, item[0], len(item[1].terms)))
    return [relation for _, relation in found]


# --------------------------------------------------------------------------------------------
# Sharp bounds
# --------------------------------------------------------------------------------------------

# Columns whose value ranges multiply to at most this many cells are counted on a grid, in
# one pass over the rows; wider ones are sorted.
GRID_LIMIT = 4_000_000
MAX_TRIPLE_POINTS = 200_000


def hull_2d(points) -> list[tuple]:
    """Vertices of the convex hull, counterclockwise, exact, without points mid-edge."""
    points = sorted(set(points))
    if len(points) < 3:
        return points

    def chain(sequence):
        # _cross written out: this loop runs millions of times on a large table
        kept: list = []
        for p in sequence:
            px, py = p
            while len(kept) >= 2:
                (ox, oy), (ax, ay) = kept[-2], kept[-1]
                if (ax - ox) * (py - oy) - (ay - oy) * (px - ox) > 0:
                    break
                kept.pop()
            kept.append(p)
        return kept

    lower = chain(points)
    upper = chain(reversed(points))
    return lower[:-1] + upper[:-1]


def _edges(hull: list[tuple]) -> list[tuple[int, int, Fraction]]:
    """Each hull edge as (a, b, c) with a*x + b*y <= c on the whole set, (a, b) primitive
    (c an int on integer points, else a Fraction)."""
    if len(hull) < 3:
        return []
    return [_edge(p, q) for p, q in zip(hull, hull[1:] + hull[:1])]


def _edge(p: tuple, q: tuple) -> tuple[int, int, Fraction]:
    """The edge from ``p`` to ``q`` of a counterclockwise hull, as in :func:`_edges`."""
    dx, dy = q[0] - p[0], q[1] - p[1]
    # Clear denominators (rational columns) before making the normal primitive.
    scale = 1 if type(dx) is int and type(dy) is int else math.lcm(
        Fraction(dx).denominator, Fraction(dy).denominator)
    a, b = int(dy * scale), int(-dx * scale)
    g = math.gcd(a, b)
    a, b = a // g, b // g
    value = a * p[0] + b * p[1]
    return a, b, value if type(value) is int else Fraction(value)


class BoundColumn:
    """One column for the bound search: its range, its number of values, its grid codes.

    A column of fractions is multiplied by the least common multiple of its denominators
    (``scale``) so that hulls are computed in integers; bounds are turned back into the
    table's units before anyone sees them.
    """

    def __init__(self, name, values, missing):
        self.name = name
        self.missing = missing
        self.scale = 1
        self.integer = values.dtype != object or all(
            isinstance(v, int) for v in values[~missing].tolist())
        if values.dtype == object:
            present = values[~missing].tolist()
            scale = math.lcm(*(Fraction(v).denominator for v in present)) if present else 1
            scaled = [int(v * scale) for v in values.tolist()]
            if all(abs(v) < _INT64_SAFE for v in scaled):
                values = np.array(scaled, dtype=np.int64)
                self.scale = scale
        self.values = values
        self.exact_int = values.dtype != object
        self.codes = None
        self.levels = self.ranks = None
        present = values[~missing]
        if len(present) == 0:
            self.low = self.high = 0
            self.distinct = 0
        elif self.exact_int:
            self.low, self.high = int(present.min()), int(present.max())
            if self.high - self.low < GRID_LIMIT:
                self.codes = values - self.low
                self.distinct = int(np.count_nonzero(np.bincount(present - self.low)))
            else:
                # a wide column: its values numbered in increasing order, once, so that the
                # distinct points of a pair or triple are found by sorting one integer key
                self.levels, self.ranks = np.unique(values, return_inverse=True)
                self.ranks = self.ranks.ravel()
                self.distinct = len(np.unique(present))
        else:
            listed = present.tolist()
            self.low, self.high = min(listed), max(listed)
            self.distinct = len(set(listed))
        self.range = (Fraction(self.low) / self.scale, Fraction(self.high) / self.scale)


class _Points:
    """The distinct points of a few columns (sorted), each with the number of rows on it.

    Bounds are judged on the distinct points weighted by their rows; the rows themselves are
    visited again only to name the rows sitting on some of the points.
    """

    def __init__(self, coords, weights, rows, *, inverse=None, key=None, point_keys=None,
                 cells=0):
        self.coords = coords
        self.weights = weights
        self._rows = rows
        self._inverse = inverse
        self._key = key
        self._point_keys = point_keys
        self._cells = cells

    def __len__(self) -> int:
        return len(self.weights)

    def rows_at(self, mask: np.ndarray) -> np.ndarray:
        """Positions in the table of the rows on the points where ``mask`` is True."""
        if not mask.any():
            return np.zeros(0, dtype=np.int64)
        if self._key is not None:
            lookup = np.zeros(self._cells, dtype=bool)
            lookup[self._point_keys[mask]] = True
            hit = lookup[self._key]
        else:
            hit = mask[self._inverse]
        found = np.flatnonzero(hit)
        return found if self._rows is None else self._rows[found]


def _grid_cells(columns) -> int | None:
    if any(c.codes is None for c in columns):
        return None
    return grid_cells([(c.low, c.high) for c in columns])


def grid_cells(ranges) -> int | None:
    """The cells of a grid over integer columns whose values span the (low, high) ``ranges``,
    or None when they are more than GRID_LIMIT (the columns are sorted, not counted)."""
    cells = math.prod(high - low + 1 for low, high in ranges)
    return cells if cells <= GRID_LIMIT else None


def crowded_triple(cells: int | None = 0, rows: int = 0, points: int = 0) -> bool:
    """Whether the bound search leaves a triple of columns out as too costly: its values fit
    no grid (``cells`` None) on a table of more than MAX_TRIPLE_POINTS ``rows``, or it has
    more than MAX_TRIPLE_POINTS distinct ``points``."""
    return (cells is None and rows > MAX_TRIPLE_POINTS) or points > MAX_TRIPLE_POINTS


def distinct_points(columns: list[BoundColumn]) -> _Points:
    """Distinct points of the columns over the rows where none is missing."""
    absent = np.zeros(len(columns[0].values), dtype=bool)
    for column in columns:
        absent |= column.missing
    rows = np.flatnonzero(~absent) if absent.any() else None

    def picked(array):
        return array if rows is None else array[rows]

    cells = _grid_cells(columns)
    if cells is not None:
        key = picked(columns[0].codes)
        for column in columns[1:]:
            key = key * (column.high - column.low + 1) + picked(column.codes)
        inverse = None
        if cells <= 8 * len(key):
            counts = np.bincount(key, minlength=cells)
            point_keys = np.flatnonzero(counts)
            counts = counts[point_keys]
        else:
            # far more cells than rows: sorting the keys is cheaper than counting every cell
            point_keys, inverse, counts = np.unique(key, return_inverse=True,
                                                    return_counts=True)
            inverse = inverse.ravel()
        coords = []
        rest = point_keys
        for column in reversed(columns):
            size = column.high - column.low + 1
            coords.append(rest % size + column.low)
            rest = rest // size
        if inverse is not None:
            return _Points(coords[::-1], counts, rows, inverse=inverse)
        return _Points(coords[::-1], counts, rows, key=key, point_keys=point_keys, cells=cells)
    ranked = _ranked_points(columns, rows)
    if ranked is not None:
        return ranked
    if all(c.exact_int for c in columns):
        stacked = np.column_stack([picked(c.values) for c in columns])
        unique, inverse, counts = np.unique(stacked, axis=0, return_inverse=True,
                                            return_counts=True)
        return _Points([unique[:, i] for i in range(len(columns))], counts, rows,
                       inverse=inverse.ravel())
    tuples = list(zip(*[picked(c.values).tolist() for c in columns]))
    index: dict = {}
    inverse = np.fromiter((index.setdefault(t, len(index)) for t in tuples), dtype=np.int64,
                          count=len(tuples))
    ordered = sorted(index)
    renumber = np.empty(len(ordered), dtype=np.int64)
    for new, point in enumerate(ordered):
        renumber[index[point]] = new
    inverse = renumber[inverse]
    coords = []
    for i in range(len(columns)):
        coordinate = np.empty(len(ordered), dtype=object)
        coordinate[:] = [point[i] for point in ordered]
        coords.append(coordinate)
    return _Points(coords, np.bincount(inverse, minlength=len(ordered)), rows, inverse=inverse)


def _ranked_points(columns: list[BoundColumn], rows) -> _Points | None:
    """The distinct points of integer columns, some of them wide, through one integer key.

    Each column is numbered in increasing order (grid codes, or the ranks of a wide column's
    values), the numbers joined into one key per row, and the keys sorted: the same points in
    the same (lexicographic) order as sorting the rows themselves, at a fraction of the cost.
    None when some column is not an integer column or the key would not fit in 62 bits.
    """
    if any(c.codes is None and c.ranks is None for c in columns):
        return None
    sizes = [c.high - c.low + 1 if c.codes is not None else len(c.levels) for c in columns]
    if math.prod(sizes) >= 2**62:
        return None
    key = np.zeros(len(columns[0].values) if rows is None else len(rows), dtype=np.int64)
    for column, size in zip(columns, sizes):
        codes = column.codes if column.codes is not None else column.ranks
        key = key * size + (codes if rows is None else codes[rows])
    point_keys, inverse, counts = np.unique(key, return_inverse=True, return_counts=True)
    # the type the rows' own values would have when stacked side by side
    dtype = np.result_type(*[c.values.dtype for c in columns])
    coords = []
    rest = point_keys
    for column, size in zip(reversed(columns), reversed(sizes)):
        code = rest % size
        value = code + column.low if column.codes is not None else column.levels[code]
        coords.append(value.astype(dtype, copy=False))
        rest = rest // size
    return _Points(coords[::-1], counts, rows, inverse=inverse.ravel())


def _extreme_positions(x: np.ndarray) -> np.ndarray:
    """Of points sorted by (x, y): where the least and greatest y at each x sit, the only
    points that can be corners of the hull."""
    starts = np.flatnonzero(np.r_[True, x[1:] != x[:-1]])
    ends = np.r_[starts[1:], len(x)] - 1
    return np.unique(np.r_[starts, ends])


def extremes(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Of points sorted by (x, y): the least and greatest y at each x."""
    picked = _extreme_positions(x)
    return np.column_stack([x[picked], y[picked]])


def combine(coefs, arrays):
    """sum(coef * array), exact: int64 when it cannot overflow, else Python numbers."""
    if all(a.dtype != object for a in arrays):
        bound = sum(abs(int(c)) * max(abs(int(a.min())), abs(int(a.max())))
                    for c, a in zip(coefs, arrays) if len(a))
        if bound < _INT64_SAFE:
            total = np.zeros(len(arrays[0]), dtype=np.int64)
            for c, a in zip(coefs, arrays):
                total += int(c) * a
            return total
    total = np.zeros(len(arrays[0]), dtype=object)
    for c, a in zip(coefs, arrays):
        total = total + a.astype(object) * int(c)
    return total


def exact_hull(candidates: np.ndarray) -> list[tuple]:
    """Exact hull of many points: a floating point hull picks candidates, exact checks decide."""
    if candidates.dtype == object or len(candidates) <= 4000:
        return hull_2d([tuple(p) for p in candidates.tolist()])
    from scipy.spatial import ConvexHull, QhullError

    as_float = candidates.astype(np.float64)
    try:
        equations = ConvexHull(as_float).equations
    except QhullError:
        return hull_2d([tuple(p) for p in candidates.tolist()])
    margin = 1e-9 * (1.0 + float(np.abs(as_float).max()))
    keep = (as_float @ equations[:, :2].T + equations[:, 2]).max(axis=1) >= -margin
    while True:
        hull = hull_2d([tuple(p) for p in candidates[keep].tolist()])
        outside = np.zeros(len(candidates), dtype=bool)
        for a, b, c in _edges(hull):
            outside |= combine((a, b), (candidates[:, 0], candidates[:, 1])) > c
        if not outside.any():
            return hull
        keep |= outside


def _weighted_quantile(values: np.ndarray, weights: np.ndarray, q: Fraction) -> Fraction:
    """The smallest value whose cumulative weight reaches ``q`` of the total (the inverted
    empirical distribution function), exact for integer and object values."""
    order = np.argsort(values, kind="stable")
    cumulative = np.cumsum(weights[order])
    value = values[order][int(np.searchsorted(cumulative, math.ceil(q * int(cumulative[-1]))))]
    return Fraction(value.item() if isinstance(value, np.generic) else value)


def near_margin(values: np.ndarray, weights: np.ndarray, constant: Fraction,
                integer: bool) -> Fraction:
    """How far from a bound a row may be and still come close to it (see NEAR_MEANING).

    ``values`` are the bound's left side on the distinct rows, ``weights`` their row counts.
    The spread is the whole range of the left side, or, when that range is more than
    HEAVY_TAIL times the middle half's (a few huge values, say integers past 2**64 among
    small ones), the middle half's: else nearly every row would be "close".
    """
    lowest = values.min()
    spread = constant - Fraction(lowest.item() if isinstance(lowest, np.generic) else lowest)
    if len(values) > 1:
        middle = (_weighted_quantile(values, weights, Fraction(3, 4))
                  - _weighted_quantile(values, weights, Fraction(1, 4)))
        if middle > 0 and spread > HEAVY_TAIL * middle:
            spread = middle
    margin = spread * NEAR_FRACTION
    return max(margin, Fraction(1)) if integer else margin


def _oriented(terms: list[tuple[str, int]], constant) -> tuple[list, str, Fraction]:
    """Write ``sum <= constant`` so that the first coefficient is positive."""
    if terms[0][1] > 0:
        return [(n, Fraction(c)) for n, c in terms], "<=", Fraction(constant)
    return [(n, Fraction(-c)) for n, c in terms], ">=", Fraction(-constant)


# Past this many vertices of the dual programme, an implication is left to HiGHS alone.
MAX_DUAL_VERTICES = 2000
# A bound is found not to follow without HiGHS only when some point of the region lies beyond
# it by this much (relative), ten times the tolerance HiGHS's answer is judged with.
_CLEAR = Fraction(1, 10**6)


class _EdgeFacts:
    """Known bounds in two columns (hull edges of pairs), kept in the order found and looked
    up by their pair of columns, so that those within a few columns are found at once."""

    def __init__(self, edges: list[tuple[dict, Fraction]]) -> None:
        self.edges = edges
        self.by_pair: dict = {}
        self._rows: dict = {}
        for position, (terms, _) in enumerate(edges):
            self.by_pair.setdefault(frozenset(terms), []).append(position)

    def __len__(self) -> int:
        return len(self.edges)

    def within(self, allowed: set) -> list[tuple[dict, Fraction]]:
        """The edges whose columns all lie in ``allowed``, in the order found."""
        positions = [p for key, found in self.by_pair.items() if key <= allowed for p in found]
        return [self.edges[p] for p in sorted(positions)]

    def rows_in(self, names: list) -> list[tuple[tuple, int, int]]:
        """The edges within ``names`` (in the order found) as the positions among ``names``
        with the coefficients, and the constant's numerator and denominator; worked out once
        for each list of names (the edges are all known when they are asked for)."""
        key = (tuple(names), len(self.edges))
        if key not in self._rows:
            index = {name: j for j, name in enumerate(names)}
            self._rows[key] = [
                (tuple((index[n], int(c)) for n, c in terms.items()),
                 Fraction(bound).numerator, Fraction(bound).denominator)
                for terms, bound in self.within(set(names))]
        return self._rows[key]


def _solve(matrix: list[list[Fraction]], rhs: list[Fraction]) -> list[Fraction] | None:
    """The exact solution of a small square system, or None when it is singular."""
    size = len(rhs)
    rows = [list(row) + [value] for row, value in zip(matrix, rhs)]
    for col in range(size):
        pivot = next((r for r in range(col, size) if rows[r][col]), None)
        if pivot is None:
            return None
        rows[col], rows[pivot] = rows[pivot], rows[col]
        for r in range(size):
            if r != col and rows[r][col]:
                factor = rows[r][col] / rows[col][col]
                rows[r] = [a - factor * b for a, b in zip(rows[r], rows[col])]
    return [rows[r][size] / rows[r][r] for r in range(size)]


def _dual_parts(matrix, rhs, low, high) -> tuple | None:
    """What :func:`_dual_vertex` needs of the box and the equalities, in floating point, found
    once for every objective over them: None when there are too many vertices to try or no
    regular one."""
    k, n = len(matrix), len(low)
    if math.comb(n, k) > MAX_DUAL_VERTICES:
        return None
    equations = np.array(matrix, dtype=np.float64)
    subsets = np.array(list(combinations(range(n), k)), dtype=np.int64)
    blocks = equations[:, subsets].transpose(1, 2, 0)
    size = np.prod(np.linalg.norm(blocks, axis=2), axis=1)
    regular = np.abs(np.linalg.det(blocks)) > 1e-9 * size
    if not regular.any():
        return None
    return (equations, subsets[regular], blocks[regular], np.array(rhs, dtype=np.float64),
            np.array(low, dtype=np.float64), np.array(high, dtype=np.float64))


def _dual_vertex(objective, parts) -> np.ndarray | None:
    """Columns of the vertex of the dual programme where its value is least, found in
    floating point: the dual of max objective.x over the box [low, high] cut by matrix.x =
    rhs is min over y of y.rhs + sum_j max(low_j s_j, high_j s_j), s = objective - y.matrix,
    a convex piecewise linear function least at a point where s_j = 0 for k columns j.
    ``parts`` are the box and equalities as :func:`_dual_parts` gives them."""
    if parts is None:
        return None
    equations, subsets, blocks, rhs, lows, highs = parts
    target = np.array(objective, dtype=np.float64)
    duals = np.linalg.solve(blocks, target[subsets][..., None])[..., 0]
    slack = target - duals @ equations
    values = duals @ rhs + np.maximum(slack * lows, slack * highs).sum(axis=1)
    return subsets[int(np.argmin(values))]


def _reaches(matrix, rhs, slack, low, high, vertex: list[int]) -> bool:
    """Whether some point of the box meets the equalities with every column of nonzero slack
    at the end its slack points to (so that the left side takes the dual's value there).

    Columns of zero slack may take any value in their range. When each of them appears in
    one equality at most, the equalities are met exactly when each one's remainder lies in
    the range its free columns can reach; otherwise the free columns other than the vertex's
    are set to their lower ends and the vertex's solved for.
    """
    free = [j for j, s in enumerate(slack) if s == 0]
    point = [hi if s > 0 else lo for s, lo, hi in zip(slack, low, high)]
    fixed = [j for j, s in enumerate(slack) if s != 0]
    remainders = [r - sum(row[j] * point[j] for j in fixed) for row, r in zip(matrix, rhs)]
    if all(sum(1 for row in matrix if row[j]) <= 1 for j in free):
        for row, remainder in zip(matrix, remainders):
            terms = [(row[j] * low[j], row[j] * high[j]) for j in free if row[j]]
            if not sum(min(t) for t in terms) <= remainder <= sum(max(t) for t in terms):
                return False
        return True
    rest = [j for j in free if j not in vertex]
    solved = _solve([[row[j] for j in vertex] for row in matrix],
                    [r - sum(row[j] * low[j] for j in rest)
                     for row, r in zip(matrix, remainders)])
    return solved is not None and all(low[j] <= v <= high[j] for j, v in zip(vertex, solved))


def _equality_verdict(coefs: dict, constant, names: list, equalities, ranges,
                      systems: dict) -> bool | None:
    """Whether ``sum coefs <= constant`` follows from the ranges and the equalities, decided
    in exact arithmetic when the answer is clear of the linear programme's tolerance; None
    leaves it to the programme.

    At a vertex of the dual (see :func:`_dual_vertex`) the dual's value bounds the largest
    value of the left side from above; the point of the box that the vertex names (each
    other column at the end its slack points to, the vertex's own columns solved from the
    equalities) reaches that value when it lies in the box, which proves it the largest.
    ``equalities`` are those within ``names``; ``systems`` keeps them and the box, exact and
    as :func:`_dual_parts` gives them, for each list of names.
    """
    if tuple(names) not in systems:
        matrix = [[Fraction(eq.get(name, 0)) for name in names] for eq, _ in equalities]
        rhs = [Fraction(c) for _, c in equalities]
        low = [Fraction(ranges[name][0]) for name in names]
        high = [Fraction(ranges[name][1]) for name in names]
        systems[tuple(names)] = matrix, rhs, low, high, _dual_parts(matrix, rhs, low, high)
    matrix, rhs, low, high, parts = systems[tuple(names)]
    objective = [Fraction(coefs.get(name, 0)) for name in names]
    vertex = _dual_vertex(objective, parts)
    if vertex is None:
        return None
    vertex = vertex.tolist()
    dual = _solve([[row[j] for row in matrix] for j in vertex], [objective[j] for j in vertex])
    if dual is None:
        return None
    slack = [c - sum(y * row[j] for y, row in zip(dual, matrix))
             for j, c in enumerate(objective)]
    upper = sum(y * r for y, r in zip(dual, rhs)) + sum(
        max(s * lo, s * hi) for s, lo, hi in zip(slack, low, high))
    limit = Fraction(constant)
    if upper <= limit:
        return True
    if not _reaches(matrix, rhs, slack, low, high, vertex):
        return None
    # the point lies in the box and meets the equalities: ``upper`` is the largest value
    if upper > limit + _CLEAR * (1 + abs(limit)):
        return False
    return None


def _centroid(columns: Mapping, rows: np.ndarray, names) -> dict | None:
    """The mean of the given rows in the named columns, exact (None without rows)."""
    if not len(rows):
        return None
    mean = {}
    for name in names:
        values = columns[name][0][rows]
        if values.dtype != object and len(values) * max(
                abs(int(values.min())), abs(int(values.max()))) < _INT64_SAFE:
            total = int(values.sum())
        else:
            total = sum(values.tolist())
        mean[name] = Fraction(total) / len(rows)
    return mean


def _integral(vector: list[Fraction]) -> tuple[list[int], int]:
    """``vector`` times the least common multiple of its denominators, and that multiple."""
    scale = math.lcm(*(Fraction(v).denominator for v in vector))
    return [int(v * scale) for v in vector], scale


def _beyond(coefs: dict, constant, names: list, equalities, inequalities, ranges,
            start: dict | None) -> bool:
    """Whether the region holds a point clearly beyond ``sum coefs <= constant``: from
    ``start``, a point of the region on the bound, along the bound's normal (projected so as
    to keep the equalities) as far as the ranges and the given bounds allow (``inequalities``,
    as :meth:`_EdgeFacts.rows_in` lists them)."""
    if start is None:
        return False
    normal = [Fraction(coefs.get(name, 0)) for name in names]
    matrix = [[Fraction(eq.get(name, 0)) for name in names] for eq, _ in equalities]
    direction = normal
    if matrix:
        gram = [[sum(a * b for a, b in zip(r, s)) for s in matrix] for r in matrix]
        weights = _solve(gram, [sum(a * b for a, b in zip(r, normal)) for r in matrix])
        if weights is None:
            return False
        direction = [c - sum(w * row[j] for w, row in zip(weights, matrix))
                     for j, c in enumerate(normal)]
    if all(d == 0 for d in direction):
        return False
    step, _ = _integral(direction)
    point, denominator = _integral([start[name] for name in names])
    limits = []   # room along the direction (in steps) for each fact it runs into, as p/q
    for j, name in enumerate(names):
        low, high = ranges[name]
        if step[j]:
            end = Fraction(high if step[j] > 0 else low)
            limits.append((end.numerator * denominator - point[j] * end.denominator,
                           end.denominator * denominator * step[j]))
    for terms, top, bottom in inequalities:
        rise = 0
        for j, c in terms:
            rise += c * step[j]
        if rise > 0:
            used = 0
            for j, c in terms:
                used += c * point[j]
            limits.append((top * denominator - used * bottom, bottom * denominator * rise))
    if not limits:
        return False
    # the least room, exact: among the few that floating point puts near the least
    rough = [top / bottom for top, bottom in limits]
    least = min(rough)
    cutoff = least + 1e-9 * (1 + abs(least))
    room = min(Fraction(top, bottom) for (top, bottom), value in zip(limits, rough)
               if value <= cutoff)
    if room <= 0:
        return False
    gain = room * sum(c * s for c, s in zip(normal, step))
    return gain > _CLEAR * (1 + abs(Fraction(constant)))


def _implied(coefs: dict, constant: Fraction, facts, start=None) -> bool:
    """Whether ``sum coefs <= constant`` follows from the ranges, relations and given bounds.

    A linear programme: the largest value of the left side over the region the known facts
    cut out. The bound adds nothing when that largest value does not exceed its constant.
    Without given bounds the programme's answer is first sought exactly through its dual;
    with them, ``start`` (a callable naming a point of the region on the bound, given the
    programme's columns) lets a point clearly beyond the bound answer first.
    """
    ranges, equalities, inequalities, judged, systems = facts
    names = set(coefs)
    touching = [eq for eq, _ in equalities if names & set(eq)]
    if not touching and not inequalities:
        # Over a box alone, an edge with two nonzero coefficients is never implied: the box's
        # corner beyond the edge would have to be a data point on it.
        return False
    for eq in touching:
        names |= set(eq)
    names = sorted(names)
    if any(name not in judged for name in names):
        return False  # no range, or one too large for a floating point programme to judge
    # the facts in these columns only (a set built once: the bounds found so far grow long)
    allowed = set(names)
    within = [(eq, c) for eq, c in equalities if eq.keys() <= allowed]
    given = inequalities.within(allowed) if inequalities else []
    if not given:
        verdict = _equality_verdict(coefs, constant, names, within, ranges, systems)
        if verdict is not None:
            return verdict
    elif start is not None and _beyond(coefs, constant, names, within,
                                       inequalities.rows_in(names), ranges, start(names)):
        return False
    from scipy.optimize import linprog

    index = {name: i for i, name in enumerate(names)}

    def row(terms):
        vector = np.zeros(len(names))
        for name, coef in terms.items():
            vector[index[name]] = float(coef)
        return vector

    eqs = [(row(eq), float(c)) for eq, c in within]
    ineqs = [(row(iq), float(c)) for iq, c in given]
    result = linprog(
        -row(coefs),
        A_ub=np.array([r for r, _ in ineqs]) if ineqs else None,
        b_ub=np.array([c for _, c in ineqs]) if ineqs else None,
        A_eq=np.array([r for r, _ in eqs]) if eqs else None,
        b_eq=np.array([c for _, c in eqs]) if eqs else None,
        bounds=[tuple(float(v) for v in ranges[name]) for name in names],
        method="highs",
    )
    if result.status != 0:
        return False
    return -result.fun <= float(constant) + 1e-7 * (1 + abs(float(constant)))


def _judged(ranges: Mapping) -> set:
    """The columns whose range a floating point programme judges reliably (at most 1e12 in
    size), found once for every implication checked."""
    return {name for name, (low, high) in ranges.items() if abs(low) <= 1e12 and abs(high) <= 1e12}


def _in_table_units(coefs, constant, scales) -> tuple[list[int], Fraction]:
    """A bound on scaled columns, written on the table's own columns (coefficients coprime)."""
    shown, divisor = _unscaled(coefs, scales)
    return shown, Fraction(constant) / divisor


def scaled_bound(bound: Bound, scales: Mapping) -> tuple:
    """(coefficients, columns, constant, margin) of ``bound`` as the search judged it:
    ``sum(coef * column) <= constant`` with each column times its scale in ``scales`` (1
    when absent; a rational column times a common multiple of its denominators), primitive
    integer coefficients, and the margin of rows close to it in those units: the bound
    before :func:`_in_table_units` wrote it on the table's own columns."""
    sign = 1 if bound.relation == "<=" else -1
    on_scaled = [sign * Fraction(c) / scales.get(name, 1) for name, c in bound.terms]
    common = math.lcm(*(c.denominator for c in on_scaled))
    factor = Fraction(common, math.gcd(*(int(c * common) for c in on_scaled)))
    return ([int(c * factor) for c in on_scaled], [name for name, _ in bound.terms],
            sign * Fraction(bound.constant) * factor, Fraction(bound.near_margin) * factor)


def _unscaled(coefs, scales) -> tuple[list[int], int]:
    shown = [int(c) * s for c, s in zip(coefs, scales)]
    divisor = math.gcd(*shown)
    return [c // divisor for c in shown], divisor


def _listed_phrase(attaining: int) -> Note:
    return Note("rows_listed", f"the first {MAX_LISTED_ROWS} of {attaining} attaining rows are "
                "listed", listed=MAX_LISTED_ROWS, attaining=attaining)


def listed_note(note: str, attaining: int) -> str:
    """``note``, saying that only the first ``MAX_LISTED_ROWS`` attaining rows are listed when
    ``attaining`` rows attain the bound."""
    if attaining <= MAX_LISTED_ROWS:
        return note
    return joined_note(note, _listed_phrase(attaining))


def recounted_note(bound: Bound, attaining: int) -> str:
    """The note of ``bound`` as it reads when ``attaining`` rows attain it (not the
    ``bound.attained_count`` it was found with): what it said before saying how many
    attaining rows are listed, and that count again."""
    parts = list(_note_parts(bound.note))
    codes = [note_code(part) for part in parts]
    if "rows_listed" in codes:
        parts = parts[:codes.index("rows_listed")]
    return listed_note(joined_note(*parts), attaining)


def bound_counts(combined: np.ndarray, constant, margin, weights: np.ndarray | None = None):
    """(attained, broken, near) of the bound ``sum <= constant`` on the values ``combined`` of
    its left side: where it is attained and where broken (boolean arrays), and how many rows
    (``weights`` per value, 1 if None) come close to it, below it by at most ``margin``
    (rounded down where the values and the constant are integers)."""
    constant = Fraction(constant)
    if combined.dtype != object and constant.denominator == 1:
        # Compare integers with integers: a Fraction would turn the arrays into objects.
        constant, limit = int(constant), math.floor(margin)
    else:
        limit = margin
    slack = constant - combined
    close = np.asarray((slack > 0) & (slack <= limit), dtype=bool)
    near = int(np.count_nonzero(close) if weights is None else weights[close].sum())
    return (np.asarray(combined == constant, dtype=bool),
            np.asarray(combined > constant, dtype=bool), near)


def _make_bound(names, coefs, constant, points: _Points, row_ids, integer, scales, note=""):
    """Bound sum(coefs*columns) <= constant, judged on the distinct points.

    ``coefs`` and ``constant`` are in the points' (scaled) units; ``scales`` turn them back.
    """
    combined = combine(coefs, points.coords)
    constant = Fraction(constant)
    shown_coefs, divisor = _unscaled(coefs, scales)
    shown_constant = constant / divisor
    margin = near_margin(combined, points.weights, constant, integer)
    attained, broken, near = bound_counts(combined, constant, margin, points.weights)
    attaining_rows = points.rows_at(attained)
    breaking_rows = points.rows_at(broken)
    terms, relation, shown = _oriented(list(zip(names, shown_coefs)), shown_constant)
    note = listed_note(note, len(attaining_rows))
    return Bound(
        terms=tuple(terms),
        relation=relation,
        constant=shown,
        attained_by=tuple(row_ids[attaining_rows[:MAX_LISTED_ROWS]].tolist()),
        attained_count=int(len(attaining_rows)),
        near=near,
        near_margin=margin / divisor,
        holds_on=int(points.weights.sum() - points.weights[broken].sum()),
        violations=tuple(row_ids[breaking_rows].tolist()),
        note=note,
    )


def _pair_bounds(cx, cy, row_ids, facts, *, max_coefficient, breakers, edges_out):
    points = distinct_points([cx, cy])
    if len(points) < 3:
        return []
    integer = cx.integer and cy.integer
    names, scales = (cx.name, cy.name), (cx.scale, cy.scale)
    x, y = points.coords
    hull = exact_hull(extremes(x, y))
    edges = _edges(hull)
    found = []
    for a, b, c in edges:
        shown, constant = _in_table_units((a, b), c, scales)
        edges_out.append((dict(zip(names, shown)), constant))
        if a == 0 or b == 0 or max(abs(v) for v in shown) > max_coefficient:
            continue
        if _implied(dict(zip(names, shown)), constant, facts):
            continue
        found.append(_make_bound(names, (a, b), c, points, row_ids, integer, scales))
    if breakers > 0 and edges:
        found += _peeled_bounds(names, scales, points, row_ids, hull, edges, facts,
                                max_coefficient=max_coefficient, breakers=breakers,
                                integer=integer)
        if cx.exact_int and cy.exact_int:
            found += _direction_bounds(names, scales, points, row_ids, facts,
                                       max_coefficient=max_coefficient, breakers=breakers,
                                       integer=integer)
    return found


def _directions(largest: int) -> list[tuple[int, int]]:
    """Primitive integer directions (a, b), both nonzero, up to ``largest``, each once per
    orientation (a > 0 for an upper bound, the negated pair for a lower one)."""
    found = []
    for a in range(1, largest + 1):
        for b in range(-largest, largest + 1):
            if b and math.gcd(a, abs(b)) == 1:
                found += [(a, b), (-a, -b)]
    return found


def _value_weights(values: np.ndarray, weights: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The distinct integers among ``values``, increasing, and the weight on each: counted on
    a grid when their range is narrow, else sorted."""
    low, high = int(values.min()), int(values.max())
    if high - low <= 4 * len(values):
        per_value = np.bincount(values - low, weights=weights)
        present = np.flatnonzero(per_value)  # every weight is at least 1
        return present + low, per_value[present].astype(np.int64)
    distinct, inverse = np.unique(values, return_inverse=True)
    return distinct, np.bincount(inverse.ravel(), weights=weights).astype(np.int64)


def _direction_bounds(names, scales, points, row_ids, facts, *, max_coefficient, breakers,
                      integer):
    """Bounds in two integer columns that all but a few rows obey, along small directions.

    Along each direction (a, b) the left side a*x + b*y is evaluated on the distinct points;
    the constant is the value, among those reached with at most ``breakers`` rows beyond it,
    that the most rows attain. It is kept when rows beyond it are few (at most ``breakers``,
    and at most a third of the rows attaining it). The hull's corners cannot find such a
    bound when its breakers sit on several corners far apart; this search does.
    """
    found = []
    largest = min(DIRECTION_COEFFICIENT, max_coefficient)
    weights = points.weights
    x, y = points.coords
    if x.dtype == object or y.dtype == object or not len(x):
        return found
    sizes = [max(abs(int(v.min())), abs(int(v.max()))) for v in (x, y)]
    x, y = x.astype(np.int64, copy=False), y.astype(np.int64, copy=False)
    top = breakers + 1
    opposite = None   # (a, b, values, least cut) of the direction just before
    for a, b in _directions(largest):
        shown, _ = _unscaled((a, b), scales)
        if max(map(abs, shown)) > max_coefficient:
            continue
        if abs(a) * sizes[0] + abs(b) * sizes[1] >= _INT64_SAFE:
            continue  # the exact values would need Python integers
        if opposite is not None and opposite[:2] == (-a, -b):
            # the opposite direction's values, negated, and its cut from below
            combined, cut = -opposite[2], -opposite[3]
        else:
            combined, cut = a * x + b * y, None
            if len(combined) > 4 * top:
                n = len(combined)
                low_cut, cut = np.partition(combined, [top - 1, n - top])[[top - 1, n - top]]
                opposite = (a, b, combined, low_cut)
        weighed = weights
        if cut is not None:
            # a constant has at most ``breakers`` rows beyond it, so it is one of the values
            # of the ``breakers + 1`` highest points: only those and their equals are counted
            kept = combined >= cut
            combined, weighed = combined[kept], weights[kept]
        values, per_value = _value_weights(combined, weighed)
        beyond = np.cumsum(per_value[::-1])[::-1] - per_value   # rows above each value
        usable = (beyond > 0) & (beyond <= breakers) & (per_value >= 3 * beyond)
        if not usable.any():
            continue
        best = int(np.flatnonzero(usable)[np.argmax(per_value[usable])])
        constant = int(values[best])
        shown, shown_constant = _in_table_units((a, b), constant, scales)
        if _implied(dict(zip(names, shown)), shown_constant, facts):
            continue
        bound = _make_bound(names, (a, b), constant, points, row_ids, integer, scales)
        found.append(replace(bound, note=joined_note(bound.note,
                                                    _breakers_note(len(bound.violations)))))
    return found


class _PeeledHull:
    """The hull of the candidate points while corners are peeled off one at a time.

    The candidates start as the least and greatest point of every column of points (the
    only ones that can be corners). Taking a corner ``v`` away, with ``p`` and ``n`` its
    neighbours on the hull, leaves every other candidate either inside the hull of the other
    corners or inside the triangle (p, v, n); so the new hull is the hull of the other
    corners and the candidates in that triangle: the same hull as from all candidates, at
    the cost of a few points.
    """

    def __init__(self, x, y, start_positions, hull) -> None:
        self.x, self.y = x, y
        self.alive = np.ones(len(x), dtype=bool)
        self.member = np.zeros(len(x), dtype=bool)
        self.member[start_positions] = True
        self.positions = start_positions
        self.hull = hull

    def _present(self) -> np.ndarray:
        kept = self.positions[self.member[self.positions]]
        self.positions = kept
        return kept

    def peel(self, corner, where: int, start: int, stop: int) -> list[tuple]:
        """Take the candidate ``corner`` (at ``where`` among the points, its column of points
        from ``start`` to ``stop``) away and return the hull of those left."""
        self.alive[where] = False
        self.member[where] = False
        # The corner's column may hold other points: its new least and greatest join.
        left = np.flatnonzero(self.alive[start:stop]) + start
        if len(left):
            added = [p for p in dict.fromkeys((int(left[0]), int(left[-1])))
                     if not self.member[p]]
            if added:
                self.member[added] = True
                self.positions = np.concatenate((self.positions,
                                                 np.array(added, dtype=np.int64)))
        hull = self.hull
        i = hull.index(corner)
        (px, py), (vx, vy), (nx, ny) = hull[i - 1], corner, hull[(i + 1) % len(hull)]
        present = self._present()
        qx, qy = self.x[present], self.y[present]
        inside = (((vx - px) * (qy - py) - (vy - py) * (qx - px)) >= 0) & (
            ((nx - vx) * (qy - vy) - (ny - vy) * (qx - vx)) >= 0) & (
            ((px - nx) * (qy - ny) - (py - ny) * (qx - nx)) >= 0)
        picked = present[inside]
        inner = list(zip(self.x[picked].tolist(), self.y[picked].tolist()))
        if len(hull) < 4:
            self.hull = hull_2d(hull[:i] + hull[i + 1:] + inner)
        else:
            self.hull = _spliced(hull, i, inner)
        return self.hull

    def on_line(self, a, b, c) -> int:
        """How many candidates lie on the line a*x + b*y = c."""
        present = self._present()
        c = int(c) if Fraction(c).denominator == 1 else c
        return int(np.count_nonzero(a * self.x[present] + b * self.y[present] == c))


def _spliced(hull: list[tuple], i: int, inner: list[tuple]) -> list[tuple]:
    """What :func:`hull_2d` gives for the corners of ``hull`` but the ``i``-th and the points
    ``inner`` of the triangle that corner makes with its neighbours, from a hull of that
    triangle alone. Every other corner stays a corner (a corner of a larger convex set
    that lies in the smaller one), so only the path between the neighbours is new: the
    small hull's path from one neighbour to the other, the way that avoids the segment
    between them. ``hull`` has four corners or more, so the result has three or more."""
    before, after = hull[i - 1], hull[(i + 1) % len(hull)]
    small = hull_2d([before, after] + inner)
    start = small.index(before)
    path = []
    for k in range(1, len(small)):
        point = small[(start + k) % len(small)]
        if point == after:
            break
        path.append(point)
    joined = hull[:i] + path + hull[i + 1:]
    first = joined.index(min(joined))
    return joined[first:] + joined[:first]


def _few_breakers(points: _Points, coefs, constant, breakers: int) -> bool:
    """Whether rows break ``sum coefs <= constant``, at most ``breakers`` of them, and at
    least three times as many reach it: else it is just a ragged edge of the points."""
    combined = combine(coefs, points.coords)
    broken = int(points.weights[combined > constant].sum())
    attained = int(points.weights[combined == constant].sum())
    return 0 < broken <= breakers and attained >= 3 * broken


def _overflow_safe(x: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The coordinates as int64 when every turn test and edge sum on them fits in 64 bits
    (all values below 2**30 in size), else as Python numbers."""
    if x.dtype != object and y.dtype != object and len(x) and max(
            abs(int(x.min())), abs(int(x.max())), abs(int(y.min())), abs(int(y.max()))) < 2**30:
        return x.astype(np.int64, copy=False), y.astype(np.int64, copy=False)
    return x.astype(object), y.astype(object)


def _peeled_bounds(names, scales, points, row_ids, hull, edges, facts, *, max_coefficient,
                   breakers, integer):
    """Bounds that all but a few rows obey: peel off thinly populated hull corners.

    Each corner held by at most ``breakers`` rows is set aside in turn and the hull of the
    rest taken again (and, within the same budget of rows, corners that this uncovers). A new
    edge through at least three distinct points, broken only by the rows set aside and
    reached by at least three times as many rows as break it, is kept as a bound with the
    breaking rows as its violations.
    """
    x, y = points.coords
    located: dict = {}

    def locate(vertex) -> tuple[int, int, int]:
        if vertex not in located:
            start = int(np.searchsorted(x, vertex[0], side="left"))
            stop = int(np.searchsorted(x, vertex[0], side="right"))
            where = start + int(np.searchsorted(y[start:stop], vertex[1]))
            located[vertex] = where, start, stop
        return located[vertex]

    weights: dict = {}

    def weight(vertex) -> int:
        if vertex not in weights:
            weights[vertex] = int(points.weights[locate(vertex)[0]])
        return weights[vertex]

    sides: dict = {}   # the edge between two corners, once per pair

    def edges_of(current) -> list[tuple]:
        listed = []
        for pair in zip(current, current[1:] + current[:1]):
            if pair not in sides:
                sides[pair] = _edge(*pair)
            listed.append(sides[pair])
        return listed

    light = sorted((weight(v), v) for v in hull if weight(v) <= breakers)
    if not light:
        return []
    extremes = _extreme_positions(x)
    safe_x, safe_y = _overflow_safe(x, y)
    known = {(a, b, c) for a, b, c in edges}
    original = set(hull)
    found = []
    hulls_left = 40  # keeps a table with a long, ragged hull cheap
    for first_weight, first in light:
        peeled = _PeeledHull(safe_x, safe_y, extremes, hull)
        corner, used = first, first_weight
        for _step in range(5):
            current = peeled.peel(corner, *locate(corner))
            hulls_left -= 1
            if len(current) < 3:
                break
            for a, b, c in edges_of(current):
                if (a, b, c) in known or a == 0 or b == 0:
                    continue
                shown, divisor = _unscaled((a, b), scales)
                if max(map(abs, shown)) > max_coefficient:
                    continue
                constant = Fraction(c) / divisor   # as _in_table_units gives it
                known.add((a, b, c))
                if peeled.on_line(a, b, c) < 3 or not _few_breakers(
                        points, (a, b), c, breakers) or _implied(
                        dict(zip(names, shown)), constant, facts):
                    continue
                bound = _make_bound(names, (a, b), c, points, row_ids, integer, scales)
                found.append(replace(bound, note=joined_note(
                    bound.note, _breakers_note(len(bound.violations)))))
            uncovered = sorted((weight(v), v) for v in current if v not in original)
            if hulls_left <= 0 or not uncovered or used + uncovered[0][0] > breakers:
                break
            used += uncovered[0][0]
            corner = uncovered[0][1]
        if hulls_left <= 0:
            break
    return found


def triple_candidates(data: np.ndarray) -> np.ndarray:
    """Of distinct points in three columns sorted by (x, y, z) (rows of ``data``): the least
    and greatest z over each (x, y), the only points that can be corners of their hull."""
    change = np.r_[True, (data[1:, :2] != data[:-1, :2]).any(axis=1)]
    starts = np.flatnonzero(change)
    ends = np.r_[starts[1:], len(data)] - 1
    return data[np.unique(np.r_[starts, ends])]


def triple_hull(points: np.ndarray):
    """The floating point hull (scipy's ConvexHull) of distinct points in three columns,
    None when they lie in a plane: that plane is an exact relation, reported as such, and
    gives no bound in three columns."""
    from scipy.spatial import ConvexHull, QhullError

    try:
        return ConvexHull(points.astype(np.float64))
    except QhullError:
        return None


def hull_corners(points: np.ndarray) -> np.ndarray:
    """Of points in one, two or three columns (rows of ``points``, exact): those that can be
    corners of their hull, the least and greatest of one column, the vertices of two or
    three (none when three columns' points lie in a plane, see :func:`triple_hull`)."""
    if not len(points):
        return points
    if points.shape[1] == 1:
        return points[[np.argmin(points[:, 0]), np.argmax(points[:, 0])]]
    if points.shape[1] == 2:
        return np.array(exact_hull(points)).reshape(-1, 2)
    unique = np.unique(points, axis=0)
    if len(unique) < 5:
        return unique
    hull = triple_hull(unique)
    return unique[:0] if hull is None else unique[np.sort(hull.vertices)]


def _triple_bounds(columns, row_ids, facts, *, max_coefficient,
                  table_columns) -> list[Bound] | None:
    names = [c.name for c in columns]
    scales = [c.scale for c in columns]
    integer = all(c.integer for c in columns)
    points = distinct_points(columns)
    if crowded_triple(points=len(points)):
        return None  # too many distinct points for a hull in three columns to be cheap
    if len(points) < 4:
        return []
    data = np.column_stack(points.coords)
    if np.abs(data).max() >= 2**20:
        return []  # keeps the cross products below in int64; wide columns are not cheap here
    corners = triple_candidates(data)
    hull = triple_hull(corners)
    if hull is None:
        return []
    origin = corners[hull.simplices[:, 0]]
    normals = np.cross(corners[hull.simplices[:, 1]] - origin,
                       corners[hull.simplices[:, 2]] - origin)
    divisor = np.gcd.reduce(np.abs(normals), axis=1)
    keep = divisor > 0
    normals, origin, equations = normals[keep], origin[keep], hull.equations[keep]
    normals //= divisor[keep][:, None]
    outward = (normals * equations[:, :3]).sum(axis=1) >= 0
    normals[~outward] *= -1
    # A zero coefficient means a bound in two columns (or a range), found with the pairs.
    small = (normals != 0).all(axis=1) & (
        np.abs(normals * np.array(scales)).max(axis=1) <= max_coefficient)
    faces = np.column_stack([normals[small], (normals[small] * origin[small]).sum(axis=1)])
    found = []
    for face in np.unique(faces, axis=0).tolist():
        normal, constant = face[:3], face[3]
        shown, shown_constant = _in_table_units(normal, constant, scales)
        if max(map(abs, shown)) > max_coefficient:
            continue
        combined = combine(normal, points.coords)
        if (combined > constant).any():
            continue  # a floating point facet that is not exact
        on_face = points.rows_at(combined == constant)
        if _implied(dict(zip(names, shown)), shown_constant, facts,
                    start=lambda wanted, rows=on_face: _centroid(table_columns, rows, wanted)):
            continue
        found.append(_make_bound(names, tuple(normal), constant, points, row_ids, integer,
                                 scales))
    return found


class _Reducer:
    """Reduces a bound modulo the exact relations, so that two bounds which say the same thing
    once the relations are used (through a copied column, say) compare equal."""

    def __init__(self, names: list[str], equalities) -> None:
        self.index = {name: i for i, name in enumerate(names)}
        self.rows: list[tuple[int, list[Fraction]]] = []
        for coefs, constant in equalities:
            if not set(coefs) <= set(self.index):
                continue
            vector = self._vector(coefs, constant)
            vector = self._reduce(vector)
            pivot = next((i for i, x in enumerate(vector[:-1]) if x), None)
            if pivot is None:
                continue
            vector = [x / vector[pivot] for x in vector]
            self.rows = [(p, [a - r[pivot] * b for a, b in zip(r, vector)]) for p, r in self.rows]
            self.rows.append((pivot, vector))

    def _vector(self, coefs: dict, constant) -> list[Fraction]:
        vector = [Fraction(0)] * (len(self.index) + 1)
        for name, coef in coefs.items():
            vector[self.index[name]] = Fraction(coef)
        vector[-1] = -Fraction(constant)
        return vector

    def _reduce(self, vector: list[Fraction]) -> list[Fraction]:
        for pivot, row in self.rows:
            if vector[pivot]:
                factor = vector[pivot]
                vector = [a - factor * b if b else a for a, b in zip(vector, row)]
        return vector

    def key(self, bound: Bound) -> tuple:
        sign = 1 if bound.relation == "<=" else -1
        vector = self._reduce(self._vector({n: sign * c for n, c in bound.terms},
                                           sign * bound.constant))
        # Only a positive factor keeps the direction of an inequality. The nonzero entries
        # with their positions: equal exactly when the whole scaled vectors are.
        nonzero = [(i, x) for i, x in enumerate(vector) if x]
        size = max((abs(x) for _, x in nonzero), default=1)
        return tuple((i, x / size) for i, x in nonzero)


def bound_rank(bound: Bound) -> tuple:
    """Sort key of bounds, the one a mathematician would read first coming first.

    Few terms and small coefficients make a bound readable; many objects attaining it and
    few breaking it make it worth reading. The score weighs the support (attaining rows
    against three times the breaking rows, on a log scale) against the size of the
    statement (terms plus the sizes of the coefficients), so that a two-term bound with
    coefficients 1 and -1 attained by thousands and broken by a handful comes before a
    three-term bound attained by five.
    """
    size = len(bound.terms) + sum(abs(c) for _, c in bound.terms)
    support = math.log10(1 + bound.attained_count) - math.log10(1 + 3 * len(bound.violations))
    return (-(support - RANK_SIZE_WEIGHT * float(size)), len(bound.violations), bound.text)


def _sharp_bounds(columns, names, row_ids, equalities, *, max_coefficient, robust,
                  max_breakers, triples, notes, max_bounds, progress=None) -> list[Bound]:
    progress = quiet(progress)
    bound_columns: dict = {}
    wider = 0
    for name in names:
        column = BoundColumn(name, *columns[name])
        # Two-valued columns (flags) give bounds that only restate their two values.
        if column.distinct < 3:
            continue
        if len(bound_columns) == MAX_BOUND_COLUMNS:
            wider += 1
            continue
        bound_columns[name] = column
    if wider:
        notes.append(Note(
            "bound_columns_limited",
            f"bounds searched among the first {MAX_BOUND_COLUMNS} columns with three or more "
            f"values; {wider} more were not searched (name columns to search others)",
            searched=MAX_BOUND_COLUMNS, left_out=wider,
        ))
    usable = list(bound_columns)
    if len(usable) < 2:
        return []
    ranges = {name: c.range for name, c in bound_columns.items()}
    for name, (values, missing) in columns.items():
        if name not in ranges and (~missing).any():
            present = values[~missing].tolist()
            ranges[name] = (min(present), max(present))
    # the ranges, relations, known bounds, the columns a programme can judge, and the linear
    # systems worked out so far (see _equality_verdict)
    facts = (ranges, equalities, [], _judged(ranges), {})
    n = len(row_ids)
    breakers = breakers_allowed(max_breakers, n) if robust else 0
    pair_edges: list = []
    found: list[Bound] = []
    pairs = list(combinations(usable, 2))
    progress.phase("bounds in pairs of columns", total=len(pairs))
    for k, (first, second) in enumerate(pairs):
        if k:
            progress.advance()
        found += _pair_bounds(bound_columns[first], bound_columns[second], row_ids, facts,
                              max_coefficient=max_coefficient, breakers=breakers,
                              edges_out=pair_edges)
    if triples:
        eligible = [name for name in usable if bound_columns[name].exact_int]
        if len(eligible) > MAX_TRIPLE_COLUMNS:
            notes.append(Note(
                "triple_columns_limited",
                f"bounds in three columns searched among the first {MAX_TRIPLE_COLUMNS} "
                f"of {len(eligible)} integer columns",
                searched=MAX_TRIPLE_COLUMNS, columns=len(eligible),
            ))
            eligible = eligible[:MAX_TRIPLE_COLUMNS]
        triple_facts = (ranges, equalities, _EdgeFacts(pair_edges), *facts[3:])
        skipped = 0
        triples_of = list(combinations(eligible, 3))
        progress.phase("bounds in triples of columns", total=len(triples_of))
        for k, triple in enumerate(triples_of):
            if k:
                progress.advance()
            chosen = [bound_columns[name] for name in triple]
            # Cheap when the values fit a grid (one counting pass) or the table is small.
            if crowded_triple(_grid_cells(chosen), n):
                skipped += 1
                continue
            triple = _triple_bounds(chosen, row_ids, triple_facts,
                                    max_coefficient=max_coefficient, table_columns=columns)
            if triple is None:
                skipped += 1
            else:
                found += triple
        if skipped:
            notes.append(Note(
                "triples_skipped",
                f"{skipped} triples of columns with wide value ranges or too many distinct "
                "points were not searched for bounds (too costly on a table this size)",
                triples=skipped,
            ))
    found.sort(key=bound_rank)
    reducer = _Reducer(list(columns), equalities)
    seen: set = set()
    distinct = []
    for bound in found:
        key = reducer.key(bound)
        if key not in seen:
            seen.add(key)
            distinct.append(bound)
    if max_bounds is None:
        return [b for b in distinct if not b.violations] + [b for b in distinct if b.violations]
    return reported_bounds(distinct, max_bounds, notes)


def settle_bounds(bounds: list, counts: list, allowed: int, notes: list,
                  left_out=frozenset()) -> list:
    """The bounds reported from counts over every row, for an engine that searches some rows
    and counts on all, ranked and cut as the search does (:func:`reported_bounds`): each of
    ``bounds`` with its counts (rows counted, rows attaining, their first ids, rows close,
    rows breaking, their first ids), kept when no row breaks it (at most ``allowed`` rows,
    for one found broken by a few) unless its columns are a triple in ``left_out``."""
    kept = []
    for bound, (present, attained, ids, near, broken, breaking) in zip(bounds, counts):
        if broken > (allowed if bound.violations else 0) or (
                len(bound.terms) == 3 and frozenset(n for n, _ in bound.terms) in left_out):
            continue
        kept.append(replace(
            bound, attained_by=tuple(ids[:MAX_LISTED_ROWS].tolist()), attained_count=attained,
            near=near, holds_on=present - broken,
            violations=tuple(breaking[: allowed + 1].tolist()),
            note=recounted_note(bound, attained)))
    return reported_bounds(sorted(kept, key=bound_rank), MAX_BOUNDS, notes)


def reported_bounds(ranked: list[Bound], max_bounds: int, notes: list[str]) -> list[Bound]:
    """The bounds reported, from bounds in rank order: the best ``max_bounds`` that hold on
    every row, then the best MAX_NEAR_BOUNDS that a few rows break (never mixed), with a note
    for each list cut short."""
    exact = [b for b in ranked if not b.violations]
    near = [b for b in ranked if b.violations]
    if len(exact) > max_bounds:
        notes.append(Note("bounds_cut", f"the best {max_bounds} of {len(exact)} bounds are "
                          "reported", reported=max_bounds, found=len(exact), breaking=False))
    if len(near) > MAX_NEAR_BOUNDS:
        notes.append(Note("bounds_cut", f"the best {MAX_NEAR_BOUNDS} of {len(near)} bounds "
                          "that all but a few rows obey are reported", reported=MAX_NEAR_BOUNDS,
                          found=len(near), breaking=True))
    return exact[:max_bounds] + near[:MAX_NEAR_BOUNDS]


# --------------------------------------------------------------------------------------------
# The core entry point and the step
# --------------------------------------------------------------------------------------------


def check_settings(*, max_breakers, max_coefficient, tolerance, seed) -> None:
    if isinstance(max_breakers, bool) or not isinstance(max_breakers, (int, float)):
        raise StepError(
            f"relations: max_breakers must be a fraction of the rows (below 1) or a count of "
            f"rows, got {max_breakers!r}"
        )
    if max_breakers < 0 or (max_breakers >= 1 and float(max_breakers) != int(max_breakers)):
        raise StepError(
            f"relations: max_breakers must be a fraction in [0, 1) or a whole number of rows, "
            f"got {max_breakers!r}"
        )
    named(bound_settings(RelationsStep))["max_coefficient"].check(max_coefficient)
    if not isinstance(tolerance, (int, float)) or not 0 < tolerance < 1:
        raise StepError(
            f"relations: tolerance must lie strictly between 0 and 1, got {tolerance!r}"
        )
    if isinstance(seed, bool) or not isinstance(seed, Integral):
        raise StepError(f"relations: seed must be a whole number, got {seed!r}")


def _approximate_columns(real_columns: Mapping, columns: dict, notes: list[str]) -> dict:
    """The columns of the approximate search: the real ones, then exact ones as floats."""
    data = {name: np.asarray(values, dtype=np.float64) for name, values in real_columns.items()}
    # Exact columns join to relate the real ones to them; one with missing values would
    # take those rows out of the whole search, so it stays out.
    extra = [name for name in columns if name not in data and not columns[name][1].any()]
    room = MAX_APPROXIMATE_COLUMNS - len(data)
    if room < len(extra):
        notes.append(Note(
            "approximate_columns_limited",
            f"approximate relations searched with {max(room, 0)} of the {len(extra)} exact "
            "columns besides the real-valued ones", searched=max(room, 0), columns=len(extra),
        ))
    for name in extra[: max(room, 0)]:
        data[name] = float_column(*columns[name])
    return data


def float_column(values: np.ndarray, missing: np.ndarray) -> np.ndarray:
    """An exact column (as :func:`exact_column` gives it) as float64, NaN where missing."""
    as_float = np.array([float(v) for v in values.tolist()], dtype=np.float64)
    as_float[missing] = np.nan
    return as_float


def find_relations(
    exact_columns: Mapping[str, Sequence],
    real_columns: Mapping[str, Sequence[float]] | None = None,
    row_ids: Sequence | None = None,
    *,
    robust: bool = True,
    max_breakers: float = 0.01,
    max_coefficient: int = 6,
    bounds: bool = True,
    triples: bool = True,
    tolerance: float = 1e-9,
    seed: int = 0,
    max_bounds: int | None = MAX_BOUNDS,
    progress=None,
) -> RelationsResult:
    """Relations and bounds among columns given as plain data.

    Parameters:
        exact_columns: name -> values (ints, fractions, None for missing; or an integer
            numpy array). Searched for exact relations and bounds.
        real_columns: name -> floats (NaN for missing). Searched, together with the exact
            columns, for approximate relations that involve at least one of them.
        row_ids: one id per row (default 0..n-1); results name rows by these.
        robust: also find relations that hold on all but ``max_breakers`` rows.
        max_breakers: a fraction of the rows (below 1) or a count of rows.
        max_coefficient: largest coefficient size allowed in a bound.
        bounds, triples: search bounds in pairs of columns, and in triples where cheap.
        tolerance: relative tolerance of approximate relations.
        seed: seed of the random subsets of rows.
        max_bounds: how many bounds to report at most (None: every one found).
        progress: a callable or :class:`analysis.progress.Reporter` told of each phase (and
            each pair and triple of the bound search); it may stop the search by raising
            :class:`analysis.progress.StepStopped`.

    >>> r = find_relations({"v": [4, 8, 6], "e": [6, 12, 12], "f": [4, 6, 8]}, bounds=False)
    >>> r.relations[0].text
    'v - e + f = 2'
    """
    check_settings(max_breakers=max_breakers, max_coefficient=max_coefficient,
                    tolerance=tolerance, seed=seed)
    real_columns = dict(real_columns or {})
    lengths = {len(v) for v in exact_columns.values()} | {len(v) for v in real_columns.values()}
    if len(lengths) > 1:
        raise StepError(f"relations: the columns have different lengths {sorted(lengths)}")
    n = lengths.pop() if lengths else 0
    row_ids = np.arange(n) if row_ids is None else np.asarray(row_ids)
    if len(row_ids) != n:
        raise StepError(f"relations: {len(row_ids)} row ids for {n} rows")
    rng = np.random.default_rng(seed)
    notes: list[str] = []
    columns = {name: exact_column(name, values) for name, values in exact_columns.items()}
    names = list(columns)
    progress = quiet(progress)
    progress.phase("exact relations")

    relations, equalities, repeated = [], [], set()
    if names and n:
        relations, equalities, repeated = _exact_relations(
            columns, names, row_ids, robust=robust, max_breakers=max_breakers, rng=rng,
            notes=notes)

    approximate: list[Relation] = []
    if real_columns and n:
        data = _approximate_columns(real_columns, columns, notes)
        progress.phase("approximate relations among real columns")
        approximate = _approximate_relations(
            data, set(real_columns), row_ids, tolerance=float(tolerance),
            breakers_setting=max_breakers, robust=robust, rng=rng, known=equalities,
            notes=notes)

    found_bounds: list[Bound] = []
    if bounds and n:
        # A constant column, a copy of another or a multiple of one (plus a constant) would
        # only repeat bounds.
        for coefs, _ in equalities:
            if len(coefs) == 2:
                repeated.add(max(coefs, key=names.index))
        found_bounds = _sharp_bounds(
            columns, [name for name in names if name not in repeated], row_ids, equalities,
            max_coefficient=int(max_coefficient),
            robust=robust, max_breakers=max_breakers, triples=triples, notes=notes,
            max_bounds=max_bounds, progress=progress)

    return RelationsResult(
        relations=tuple(relations),
        bounds=tuple(found_bounds),
        approximate=tuple(approximate),
        notes=tuple(notes),
        n_rows=n,
        columns=tuple(names) + tuple(name for name in real_columns if name not in columns),
    )


def read_columns(table, names: Sequence[str]) -> tuple[dict, dict]:
    """(exact, real): the columns ``names`` of ``table`` as :func:`find_relations` takes
    them. Integer, big integer, rational and boolean columns are exact (an integer numpy
    array where every value is present and small, else exact Python values with None for a
    missing cell); real columns are float64 with NaN for a missing cell."""
    exact: dict = {}
    real: dict = {}
    for name in names:
        dtype = table.column(name).dtype
        if dtype == "real":
            real[name] = np.asarray(table.numeric(name), dtype=np.float64)
        elif dtype == "integer":
            values = np.asarray(table.numeric(name), dtype=np.float64)
            if np.isfinite(values).all() and np.abs(values).max(initial=0) < _FLOAT_EXACT:
                exact[name] = values.astype(np.int64)
            else:
                exact[name] = table.exact(name)
        elif dtype == "boolean" and table.frame[name].dtype.kind == "b":
            # a flag with no missing cell: its bools are read as 0 and 1 at once, the
            # same values table.exact gives one row at a time
            exact[name] = table.frame[name].to_numpy()
        else:
            exact[name] = table.exact(name)
    return exact, real


_EXACT_DTYPES = ("integer", "big integer", "rational", "boolean")
_NUMERIC_ROLES = ("invariant", "flag")


@dataclass(frozen=True, kw_only=True)
class RelationsStep:
    """Exact relations, near relations and sharp bounds among a table's numeric invariants.

    Settings (keyword-only):
        columns: names of the columns to search; default every integer, big integer,
            rational and boolean invariant or flag (exact search) and every real-valued
            invariant (approximate search).
        robust: also report relations that hold on all but a few rows, with those rows.
        max_breakers: how many rows may break a robust relation: a fraction of the rows
            (below 1, default 0.01) or a count.
        max_coefficient: largest coefficient size in a reported bound.
        bounds: search sharp bounds in pairs of columns; triples: and in triples, where cheap.
        tolerance: relative tolerance of approximate relations among real-valued columns.
        congruences: also search congruences sum(c*x) ≡ r (mod m) on the integer columns.
        seed: seed of the random subsets of rows.

    ``run(table)`` returns a :class:`RelationsResult`.

    >>> RelationsStep(columns=["vertices", "edges", "faces"], bounds=False).kind
    'relations'
    """

    columns: tuple[str, ...] | list[str] | None = None
    robust: bool = True
    max_breakers: float = 0.01
    max_coefficient: int = 6
    bounds: bool = True
    triples: bool = True
    tolerance: float = 1e-9
    congruences: bool = True
    seed: int = 0
    kind: ClassVar[str] = "relations"

    def chosen_columns(self, table) -> list[str]:
        all_names = [info.name for info in table.columns]
        if self.columns is None:
            return [
                name for name in table.names_with_role(*_NUMERIC_ROLES)
                if table.column(name).dtype in _EXACT_DTYPES + ("real",)
            ]
        if isinstance(self.columns, str) or not all(isinstance(c, str) for c in self.columns):
            raise StepError(
                f"relations: columns must be a list of column names, got {self.columns!r}"
            )
        if not self.columns:
            raise StepError(
                "relations: the list of columns is empty; name at least one numeric column, "
                "or leave it unset to search them all"
            )
        for name in self.columns:
            if name not in all_names:
                raise StepError(
                    f"relations: table '{table.name}' has no column '{name}'; its columns are "
                    + ", ".join(all_names)
                )
            info = table.column(name)
            if info.role not in _NUMERIC_ROLES or info.dtype not in _EXACT_DTYPES + ("real",):
                raise StepError(
                    f"relations: column '{name}' of table '{table.name}' has role {info.role} "
                    f"and holds {info.dtype} values; choose numeric invariant or flag columns"
                )
        return list(dict.fromkeys(self.columns))

    def check(self) -> None:
        """Check the settings alone (no table needed); StepError names a bad one."""
        check_settings(max_breakers=self.max_breakers, max_coefficient=self.max_coefficient,
                        tolerance=self.tolerance, seed=self.seed)

    def searched_columns(self, table) -> list[str]:
        """The settings checked, the columns searched (:meth:`chosen_columns`); StepError
        when there are none."""
        self.check()
        names = self.chosen_columns(table)
        if not names:
            raise StepError(
                f"relations: table '{table.name}' has no numeric invariant columns to search; "
                "mark some columns as invariants"
            )
        return names

    def run(self, table, *, max_bounds: int | None = MAX_BOUNDS,
            progress=None) -> RelationsResult:
        """Search the table; see the class docstring for the settings.

        ``max_bounds`` caps the bounds reported (None keeps every one found, for an engine
        that ranks them again on more rows). ``progress``: a callable (or
        :class:`analysis.progress.Reporter`) told of each phase; it may stop the step by
        raising :class:`analysis.progress.StepStopped`."""
        progress = quiet(progress)
        names = self.searched_columns(table)
        exact, real = read_columns(table, names)
        found = find_relations(
            exact, real, table.row_ids, robust=self.robust, max_breakers=self.max_breakers,
            max_coefficient=self.max_coefficient, bounds=self.bounds, triples=self.triples,
            tolerance=self.tolerance, seed=self.seed, max_bounds=max_bounds, progress=progress,
        )
        found = _with_interval_rows(table, names, found)
        if not self.congruences:
            return found
        from analysis.congruences import find_congruences

        progress.phase("congruences")
        integers = {name: exact[name] for name in congruence_columns(table, exact)}
        laws = [r for r in found.relations if not r.violations]
        congruences = find_congruences(integers, table.row_ids, relations=laws) \
            if integers else []
        return replace(found, congruences=tuple(congruences))


def congruence_columns(table, names) -> list[str]:
    """The columns among ``names`` that congruences are searched on: the integer ones."""
    return [name for name in names if table.column(name).dtype in ("integer", "big integer")]


def _with_interval_rows(table, names: list[str], found: RelationsResult) -> RelationsResult:
    """Hold each exact relation and bound against the rows known only by an interval in one
    of its columns (see analysis.interval_rows): rows every value of whose intervals breaks
    it join its violations; the others are listed as consistent with it."""
    from analysis.interval_rows import IntervalRows

    rows = IntervalRows(table, names)
    if not rows:
        return found

    def judged(statement, relation):
        verdict = rows.judge(statement.terms, relation, statement.constant)
        if not verdict.breaking and not verdict.consistent:
            return statement
        return replace(statement, violations=tuple(statement.violations) + verdict.breaking,
                       consistent_with=verdict.consistent)

    relations = tuple(judged(r, "=") for r in found.relations)
    bounds = tuple(judged(b, b.relation) for b in found.bounds)
    counted = sum(len(s.violations) - len(o.violations) for s, o in
                  zip((*relations, *bounds), (*found.relations, *found.bounds)))
    note = Note("interval_rows_held", "rows known only by an interval were held against each "
                "relation and bound: a row breaks one only when every value of its intervals "
                f"does (listed with the breakers; {counted} such break"
                f"{'' if counted == 1 else 's'}), and is consistent with it otherwise.",
                breaks=counted)
    return replace(found, relations=relations, bounds=bounds, notes=(*found.notes, note))
