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


def test_a_separator_asks_what_sets_the_breakers_apart():
    # A connected graph has at least v - 1 edges, with equality exactly for trees (a standard
    # fact of graph theory, e.g. Diestel, Graph Theory, Cor. 1.5.3). On the sample atlas table
    # (diameter is missing for disconnected graphs, so only connected ones are used) the
    # breakers of "edges - vertices >= 0" are the trees, and the separator says so without
    # the statement's own columns.
    import json
    from pathlib import Path

    from analysis.separation import SeparatorStep
    from analysis.steps import make_step, step_params
    from analysis.table import load_table

    table = load_table(Path(__file__).resolve().parent.parent / "sample_tables" /
                       "graphs_up_to_7.csv")
    statement = Statement.parse("edges - vertices >= 0")
    step = SeparatorStep(target_statement=statement.to_json(), permutations=19, repeats=2)
    result = step.run(table)
    assert result.target == "breaks: edges - vertices >= 0"
    assert result.equation is not None and result.equation.violations == 0
    assert [t.feature for t in result.equation.terms] == ["tree"], result.equation.text
    used = {f for t in result.equation.terms for f in t.factor_names()}
    assert not used & {"edges", "vertices"}
    # the study file keeps the statement, and the step made again gives the same numbers
    again = make_step("separator", json.loads(json.dumps(step_params(step))))
    assert again.run(table).equation.text == result.equation.text


def test_target_and_statement_together_are_refused():
    from analysis.separation import SeparatorStep

    statement = Statement.parse("a <= 3")
    with pytest.raises(StepError, match="both name a target"):
        SeparatorStep(target="b", target_statement=statement.to_json()).check()
