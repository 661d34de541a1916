"""Targets derived from a finding: "breaks this statement", a flag per object.

A relation, bound, congruence or closest formula that a few objects break raises the next
question: are the breakers special in a way the other invariants show? A
:class:`Statement` is the finding written on the table's own columns; :func:`with_breaks_flag`
adds to a table a flag column that is true on the rows breaking it, so that a separator can
be asked whether the breakers can be told apart, and by which equation. A study stores the
statement itself (its JSON), so the derived target is made again on re-running.

Statements are checked in exact arithmetic on the columns' exact values. A row with a
missing value in one of the statement's columns is missing in the flag.
"""

from __future__ import annotations

import dataclasses
import re
from collections.abc import Mapping
from dataclasses import dataclass
from fractions import Fraction

import pandas as pd

from analysis.errors import StepError
from analysis.notes import Note
from analysis.plain import fraction_text

__all__ = ["RELATIONS", "Statement", "breaking_rows", "breaks_flag_info", "with_breaks_flag"]

RELATIONS = ("=", "<=", ">=", "mod")
# The flag column's name starts with this; the rest is the statement's text.
FLAG_PREFIX = "breaks: "


@dataclass(frozen=True)
class Statement:
    """``sum(coef * column) relation constant``, or ``≡ constant (mod modulus)``."""

    terms: tuple[tuple[str, Fraction], ...]
    relation: str
    constant: Fraction
    modulus: int | None = None

    @property
    def text(self) -> str:
        """The statement as one line, e.g. ``h11 - num_factors >= 0``."""
        parts = []
        for name, coef in self.terms:
            sign = "-" if coef < 0 else "+"
            size = abs(coef)
            written = name if size == 1 else f"{fraction_text(size)}*{name}"
            parts.append(f"{sign} {written}")
        left = " ".join(parts)
        left = left[2:] if left.startswith("+ ") else "-" + left[2:]
        if self.relation == "mod":
            return f"{left} ≡ {fraction_text(self.constant)} (mod {self.modulus})"
        return f"{left} {self.relation} {fraction_text(self.constant)}"

    @property
    def flag_name(self) -> str:
        """Name of the derived flag column."""
        return FLAG_PREFIX + self.text

    def to_json(self) -> dict:
        data = {"terms": [{"column": n, "coef": fraction_text(c)} for n, c in self.terms],
                "relation": self.relation, "constant": fraction_text(self.constant)}
        if self.modulus is not None:
            data["modulus"] = self.modulus
        return data

    @classmethod
    def parse(cls, text: str) -> Statement:
        """A statement written as the program writes them: ``h11 - num_factors >= 0``,
        ``2*a + b = 3``, ``x + y ≡ 1 (mod 4)`` (also ``==``, ``=<``, ``mod`` without the sign).

        >>> Statement.parse("2*a - b/2 <= 3").terms
        (('a', Fraction(2, 1)), ('b', Fraction(-1, 2)))
        """
        found = _STATEMENT.fullmatch(text.strip())
        if not found:
            raise StepError(f"cannot read the statement {text!r}: write it as a sum of "
                            "coefficient*column terms, a relation (=, <=, >=, or ≡ r (mod m)) "
                            "and a number, e.g. 'h11 - num_factors >= 0'.")
        left, relation, constant, modulus = found.group("left", "relation", "constant",
                                                        "modulus")
        terms = []
        for sign, body in _TERM.findall("+" + left.strip() if left.strip()[0] not in "+-"
                                        else left.strip()):
            coef, name = _split_term(body.strip())
            terms.append((name, -coef if sign == "-" else coef))
        relation = {"==": "=", "=<": "<=", "=>": ">=", "≡": "mod"}.get(relation, relation)
        if modulus is not None:
            relation = "mod"
        return cls.from_json({"terms": [{"column": n, "coef": str(c)} for n, c in terms],
                              "relation": relation, "constant": constant,
                              **({"modulus": int(modulus)} if modulus else {})})

    @classmethod
    def from_json(cls, data: Mapping) -> Statement:
        """A statement from a relation, bound, congruence or formula record of a result's
        JSON (or a study file); StepError saying what is wrong otherwise."""
        if not isinstance(data, Mapping):
            raise StepError(f"a statement must be a JSON object; got {data!r}.")
        try:
            terms = tuple((str(t["column"] if "column" in t else t["feature"]),
                           Fraction(str(t["coef"]))) for t in data["terms"])
            modulus = data.get("modulus")
            relation = "mod" if modulus is not None else str(data.get("relation", "="))
            constant = Fraction(str(data.get("residue", data.get("constant", 0))))
        except (KeyError, TypeError, ValueError, ZeroDivisionError) as exc:
            raise StepError(f"a statement needs terms (each with a column and a coefficient) "
                            f"and a constant; this one is not readable ({exc!r}).") from None
        if relation not in RELATIONS:
            raise StepError(f"a statement's relation must be one of {', '.join(RELATIONS)}; "
                            f"got {relation!r}.")
        if not terms:
            raise StepError("a statement needs at least one term.")
        if modulus is not None and (not isinstance(modulus, int) or modulus < 2):
            raise StepError(f"a congruence's modulus must be a whole number of at least 2; "
                            f"got {modulus!r}.")
        return cls(terms=terms, relation=relation, constant=constant, modulus=modulus)

    def breaks(self, columns: Mapping[str, list]) -> list[bool | None]:
        """Per row: True where the statement is broken, False where it holds, None where a
        column is missing. ``columns`` maps each term's column to its exact values."""
        values = [columns[name] for name, _ in self.terms]
        flags: list[bool | None] = []
        for row in zip(*values):
            if any(v is None for v in row):
                flags.append(None)
                continue
            total = sum((Fraction(coef) * Fraction(v) for (_, coef), v in zip(self.terms, row)),
                        Fraction(0))
            flags.append(not self._holds(total))
        return flags

    def _holds(self, total: Fraction) -> bool:
        if self.relation == "=":
            return total == self.constant
        if self.relation == "<=":
            return total <= self.constant
        if self.relation == ">=":
            return total >= self.constant
        difference = total - self.constant
        return difference.denominator == 1 and difference.numerator % self.modulus == 0


_NAME = r"[A-Za-z_][\w.()\[\],]*"
_STATEMENT = re.compile(
    r"(?P<left>.+?)\s*(?P<relation>==|<=|>=|=<|=>|=|≡)\s*(?P<constant>[+-]?\d+(?:/\d+)?)"
    r"\s*(?:\(\s*mod\s+(?P<modulus>\d+)\s*\))?")
_TERM = re.compile(r"([+-])\s*([^+-]+)")


def _split_term(body: str) -> tuple[Fraction, str]:
    """``2*a``, ``a``, ``1/2*a``, ``a/2`` -> (coefficient, column)."""
    match = re.fullmatch(rf"(?:(\d+(?:/\d+)?)\s*\*\s*)?({_NAME})(?:\s*/\s*(\d+))?", body)
    if not match:
        raise StepError(f"cannot read the term {body!r} of a statement: write it as "
                        "coefficient*column.")
    coef = Fraction(match.group(1) or 1)
    if match.group(3):
        coef /= int(match.group(3))
    return coef, match.group(2)


def breaking_rows(table, statement: Statement) -> list[bool | None]:
    """Per row of ``table``: True where it breaks ``statement``, False where it obeys it,
    None where one of its columns is missing. StepError when a column is missing from the
    table or has no exact values."""
    from analysis.errors import TableError

    try:
        columns = {name: table.exact(name) for name, _ in statement.terms}
    except TableError as exc:
        raise StepError(f"the statement {statement.text!r} cannot be checked: {exc}") from None
    return statement.breaks(columns)


def breaks_flag_info(table_name: str, statement: Statement, broken: int, missing: int,
                     rows: int):
    """The description of the flag "breaks: <statement>" on a table of ``rows`` rows, of which
    ``broken`` break the statement and ``missing`` cannot be checked. StepError when no
    checked row breaks it, or every one does (a separator needs both classes)."""
    from analysis.table import ColumnInfo

    if broken == 0 or broken == rows - missing:
        raise StepError(f"{table_name}: every checked row {'obeys' if broken == 0 else 'breaks'}"
                        f" {statement.text!r}, so there is nothing to tell apart.")
    return ColumnInfo(name=statement.flag_name, role="flag", dtype="boolean", missing=missing,
                      distinct=2, detected_role="flag",
                      note=Note("derived_flag", f"derived: true on the {broken} rows that "
                                f"break {statement.text}", rows=broken,
                                statement=statement.text))


def with_breaks_flag(table, statement: Statement):
    """``table`` with one more flag column, true on the rows that break ``statement``.

    Returns ``(new_table, column_name)``. The table's bytes and digest are those of the file;
    the new column is derived, and its note says from what. StepError when a column is
    missing from the table or has no exact values, or when no row breaks the statement (a
    separator needs both classes).
    """
    flags = breaking_rows(table, statement)
    info = breaks_flag_info(table.name, statement, sum(1 for f in flags if f),
                            sum(1 for f in flags if f is None), len(flags))
    name = statement.flag_name
    if name in table.frame.columns:
        return table, name
    frame = table.frame.copy(deep=False)
    frame[name] = pd.array(flags, dtype="boolean")
    return dataclasses.replace(table, frame=frame, columns=table.columns + (info,)), name
