"""What rows known only by an interval say about a relation or a bound.

A table may give an invariant as an interval ``[low, high]`` where its exact value is open.
Such a cell is missing for the search itself; afterwards each statement found is held against
the interval rows: a row breaks the statement only when every value in its intervals breaks
it, and is *consistent with* it otherwise (some value in the intervals obeys it). The other
terms of the statement must be known on the row; a row missing one of them says nothing.

For ``sum(c * x) = k``, ``<= k`` or ``>= k``, the values the left side takes over the box of
intervals form the range ``[sum of the smallest terms, sum of the largest terms]`` (a term
``c * x`` is smallest at ``x = low`` when ``c > 0`` and at ``x = high`` otherwise). An
interval of a whole-number column holds the whole numbers in it; an equality with one
interval term in such a column asks that the value it needs be a whole number in the
interval. With two or more interval terms an equality is judged over the real values of the
box, which can call a row consistent that has no whole-number solution; the docstring of
``judge`` says so where it is used.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from fractions import Fraction

WHOLE_DTYPES = ("integer", "big integer")


@dataclass(frozen=True)
class Verdict:
    """The interval rows a statement meets: ids of those breaking it and those consistent."""

    breaking: tuple = ()
    consistent: tuple = ()


class IntervalRows:
    """The interval cells of a table's columns, read once and held against many statements."""

    def __init__(self, table, columns) -> None:
        self._table = table
        self._spans: dict[str, dict[int, tuple]] = {}
        self._exact: dict[str, list] = {}
        for name in columns:
            marks = table.intervals(name)
            if not len(marks):
                continue
            whole = table.column(name).dtype in WHOLE_DTYPES
            spans = {}
            for position, low, high in zip(marks.positions, marks.exact("low"),
                                           marks.exact("high")):
                if whole:
                    low, high = math.ceil(low), math.floor(high)
                if low <= high:
                    spans[int(position)] = (Fraction(low), Fraction(high), whole)
            self._spans[name] = spans

    def __bool__(self) -> bool:
        return any(self._spans.values())

    def _known(self, name: str) -> list:
        if name not in self._exact:
            self._exact[name] = self._table.exact(name)
        return self._exact[name]

    def judge(self, terms, relation: str, constant) -> Verdict:
        """The interval rows of ``sum(coef * column) relation constant`` (relation "=", "<="
        or ">="): those every value of whose intervals breaks it, and those consistent."""
        columns = [name for name, _ in terms]
        positions = sorted({p for name in columns for p in self._spans.get(name, {})})
        breaking, consistent = [], []
        for position in positions:
            obeys = self._obeys(position, terms, relation, Fraction(constant))
            if obeys is None:
                continue
            (consistent if obeys else breaking).append(self._table.row_ids[position])
        return Verdict(breaking=tuple(breaking), consistent=tuple(consistent))

    def _obeys(self, position: int, terms, relation: str, constant: Fraction) -> bool | None:
        low = high = Fraction(0)
        open_terms = []
        for name, coef in terms:
            coef = Fraction(coef)
            span = self._spans.get(name, {}).get(position)
            if span is None:
                value = self._known(name)[position]
                if value is None:
                    return None
                low += coef * value
                high += coef * value
                continue
            open_terms.append((coef, span))
            a, b = coef * span[0], coef * span[1]
            low += min(a, b)
            high += max(a, b)
        if relation == "<=":
            return low <= constant
        if relation == ">=":
            return high >= constant
        if not low <= constant <= high:
            return False
        if len(open_terms) == 1 and open_terms[0][1][2]:
            coef, (start, _, _) = open_terms[0]
            # the rest of the sum is fixed: the one open value must be a whole number
            needed = (constant - (low - min(coef * start, coef * open_terms[0][1][1]))) / coef
            return needed.denominator == 1
        return True
