"""Derived targets: the flag "breaks this statement" made from a finding's JSON."""

from fractions import Fraction

import pytest

from analysis.derived import Statement, with_breaks_flag
from analysis.errors import StepError
from analysis.relations import find_relations
from analysis.table import read_table


def _polyhedra():
    # Vertices, edges and faces of the five Platonic solids, two prisms, a pyramid, and a
    # torus-like polyhedron (a 3x3 grid of squares glued into a torus: v = 9, e = 18, f = 9),
    # from memory. Euler's formula v - e + f = 2 holds for convex polyhedra; the torus breaks
    # it (its Euler characteristic is 0).
    text = ("name,v,e,f\ntetrahedron,4,6,4\ncube,8,12,6\noctahedron,6,12,8\n"
            "dodecahedron,20,30,12\nicosahedron,12,30,20\ntriangular prism,6,9,5\n"
            "pentagonal prism,10,15,7\nsquare pyramid,5,8,5\ntorus,9,18,9\n")
    return read_table(text.encode(), "polyhedra.csv")


def test_breaking_rows_of_a_relation_found_robustly():
    table = _polyhedra()
    found = find_relations({n: table.exact(n) for n in ("v", "e", "f")},
                           row_ids=table.row_ids, max_breakers=1, bounds=False)
    euler = next(r for r in found.relations if r.violations)
    statement = Statement.from_json(euler.to_json())
    new, name = with_breaks_flag(table, statement)
    assert name == "breaks: " + statement.text
    flagged = new.frame.loc[new.frame[name].astype(bool), "name"].tolist()
    assert flagged == ["torus"]
    assert table.frame.shape[1] == 4, "the table given was changed"
    assert new.role(name) == "flag"


def test_congruence_statement():
    # Edge counts of the solids above (from memory): every one is a multiple of 3 but the
    # square pyramid's 8, so "e ≡ 0 (mod 3)" is broken by the pyramid alone.
    table = _polyhedra()
    statement = Statement.from_json({"terms": [{"column": "e", "coef": "1"}], "modulus": 3,
                                     "residue": 0})
    assert statement.text == "e ≡ 0 (mod 3)"
    flags = statement.breaks({"e": table.exact("e")})
    assert [table.frame["name"][i] for i, f in enumerate(flags) if f] == [
        "square pyramid"]


def test_bound_statement_and_missing_cells():
    statement = Statement(terms=(("a", Fraction(1)), ("b", Fraction(-1))), relation="<=",
                          constant=Fraction(0))
    assert statement.breaks({"a": [1, 3, None], "b": [2, 2, 5]}) == [False, True, None]
    assert Statement.from_json(statement.to_json()) == statement


@pytest.mark.parametrize(("data", "message"), [
    ({"relation": "<="}, "needs terms"),
    ({"terms": [{"column": "a", "coef": "1"}], "relation": "<>", "constant": "0"},
     "must be one of"),
    ({"terms": [{"column": "a", "coef": "1"}], "modulus": 1, "residue": 0}, "at least 2"),
    ("a <= b", "JSON object"),
], ids=["no-terms", "bad-relation", "bad-modulus", "text"])
def test_bad_statements_are_refused(data, message):
    with pytest.raises(StepError, match=message):
        Statement.from_json(data)


def test_a_statement_nobody_breaks_is_refused():
    table = _polyhedra()
    statement = Statement(terms=(("e", Fraction(1)),), relation=">=", constant=Fraction(0))
    with pytest.raises(StepError, match="every checked row obeys"):
        with_breaks_flag(table, statement)
