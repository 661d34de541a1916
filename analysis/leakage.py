"""Does the target follow from the feature columns? Then predicting it proves nothing new.

When the target is an exact function of some features (Euler number, h11 and h21 of a
Calabi-Yau threefold, say), a separator "beats chance" trivially. Before the protocol runs,
the separator asks the relations core for exact linear relations among the target and the
exact feature columns; a relation with a nonzero target coefficient that holds on every row
where its columns are present is a finding ("the target follows from these columns") and a
leakage warning, naming the columns to leave out.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass

__all__ = ["TargetFollows", "target_follows"]

# Feature columns tried together with the target (the relations core caps its own search).
MAX_FOLLOW_COLUMNS = 30
# A relation in k columns always exists on k rows or fewer; one counts as a finding only when
# it holds on at least this many rows per column it uses (its constant counted as a column).
ROWS_PER_TERM = 2


@dataclass(frozen=True)
class TargetFollows:
    """The target as an exact linear function of feature columns, on every row checked.

    relation: the relation's text, e.g. ``2*h11 - 2*h21 - euler = 0``.
    columns: the feature columns it uses (the target excluded), to leave out if wanted.
    holds_on: rows on which it was checked.
    """

    relation: str
    columns: tuple[str, ...]
    holds_on: int
    terms: tuple = ()          # (column, Fraction) of the relation, target included
    constant: object = 0

    def to_json(self) -> dict:
        return {"relation": self.relation, "columns": list(self.columns),
                "holds_on": self.holds_on}


def target_follows(target: str, target_values: Sequence,
                   features: Mapping[str, Sequence], row_ids=None) -> TargetFollows | None:
    """The shortest exact relation that writes ``target`` through ``features``, if any.

    target_values, features: exact values (ints, fractions; None for missing), one per row.
    Returns None when no relation involving the target holds on every row.

    Euler's formula for convex polyhedra (v - e + f = 2), on the five Platonic solids and
    four prisms and pyramids:

    >>> v = [4, 8, 6, 20, 12, 6, 5, 10, 12]
    >>> f = [4, 6, 8, 12, 20, 5, 5, 7, 8]
    >>> e = [6, 12, 12, 30, 30, 9, 8, 15, 18]
    >>> found = target_follows("e", e, {"v": v, "f": f})
    >>> found.relation, found.columns
    ('v + f - e = 2', ('v', 'f'))
    """
    from analysis.relations import find_relations

    names = [name for name in features if name != target][:MAX_FOLLOW_COLUMNS]
    columns = {name: features[name] for name in names}
    columns[target] = target_values
    found = find_relations(columns, row_ids=row_ids, robust=False, bounds=False)
    best = None
    for relation in found.relations:
        coefs = dict(relation.terms)
        if relation.violations or relation.trivial or not coefs.get(target):
            continue
        if relation.holds_on < ROWS_PER_TERM * (len(relation.terms) + 1):
            continue
        used = tuple(name for name, _ in relation.terms if name != target)
        if not used:
            continue
        if best is None or len(relation.terms) < len(best[0].terms):
            best = (relation, used)
    if best is None:
        return None
    relation, used = best
    return TargetFollows(relation=relation.text, columns=used, holds_on=relation.holds_on,
                         terms=tuple(relation.terms), constant=relation.constant)
