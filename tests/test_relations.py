"""Tests for analysis/relations.py: exact relations, robust relations, approximate relations and
sharp bounds, checked against theorems, brute force and sympy."""

from __future__ import annotations

import itertools
import json
import math
import random
from fractions import Fraction
from pathlib import Path

import networkx as nx
import numpy as np
import pytest
import sympy
from hypothesis import given, settings
from hypothesis import strategies as st
from sympy.polys.domains import ZZ
from sympy.polys.matrices import DomainMatrix

from analysis.errors import StepError
from analysis.relations import (
    Bound,
    RelationsStep,
    bound_rank,
    find_relations,
    integer_kernel,
    lll_reduce,
    relation_reasons,
)
from analysis.table import load_table, read_table

SAMPLE_POLYGONS = Path(__file__).resolve().parent.parent / "sample_tables" / "lattice_polygons.csv"


# --------------------------------------------------------------------------------------------
# Lattice polygons, computed here by brute force
# --------------------------------------------------------------------------------------------


def _cross(o, a, b):
    return (a[0] - o[0]) * (b[1] - o[1]) - (a[1] - o[1]) * (b[0] - o[0])


def _hull(points):
    """Counterclockwise hull corners of a set of lattice points."""
    points = sorted(set(points))

    def half(sequence):
        kept = []
        for p in sequence:
            while len(kept) >= 2 and _cross(kept[-2], kept[-1], p) <= 0:
                kept.pop()
            kept.append(p)
        return kept

    return half(points)[:-1] + half(points[::-1])[:-1]


def _polygon(corners):
    """(twice the area, interior points, boundary points, corners, all edges primitive).

    Twice the area by the shoelace formula; interior and boundary points by testing every
    lattice point of the bounding box against the edges (no use of Pick's theorem).
    """
    n = len(corners)
    edges = [(corners[i], corners[(i + 1) % n]) for i in range(n)]
    twice_area = sum(p[0] * q[1] - q[0] * p[1] for p, q in edges)
    xs = [p[0] for p in corners]
    ys = [p[1] for p in corners]
    interior = boundary = 0
    for point in itertools.product(range(min(xs), max(xs) + 1), range(min(ys), max(ys) + 1)):
        sides = [_cross(p, q, point) for p, q in edges]
        on_edge = any(
            s == 0 and min(p[0], q[0]) <= point[0] <= max(p[0], q[0])
            and min(p[1], q[1]) <= point[1] <= max(p[1], q[1])
            for s, (p, q) in zip(sides, edges)
        )
        if on_edge:
            boundary += 1
        elif all(s > 0 for s in sides):
            interior += 1
    # An edge carries gcd(|dx|, |dy|) - 1 lattice points inside it (common practice).
    primitive = all(math.gcd(q[0] - p[0], q[1] - p[1]) == 1 for p, q in edges)
    return twice_area, interior, boundary, n, primitive


@pytest.fixture(scope="module")
def polygons():
    """Random convex lattice polygons: hulls of a few random points in a 7 x 7 box."""
    rng = random.Random(1899)
    rows = []
    while len(rows) < 160:
        points = [(rng.randint(0, 6), rng.randint(0, 6)) for _ in range(rng.randint(3, 7))]
        corners = _hull(points)
        if len(corners) >= 3:
            rows.append(_polygon(corners))
    return rows


def _columns(rows):
    return {
        "twice_area": [r[0] for r in rows],
        "interior": [r[1] for r in rows],
        "boundary": [r[2] for r in rows],
        "vertices": [r[3] for r in rows],
    }


def _vector(relation, names):
    """The relation as the integer vector (coef of each name..., -constant)."""
    coefs = dict(relation.terms)
    return [coefs.get(name, Fraction(0)) for name in names] + [-relation.constant]


def _proportional(u, v) -> bool:
    return sympy.Matrix([u, v]).rank() == 1


def _holds(relation, columns, row):
    return sum(c * Fraction(columns[name][row]) for name, c in relation.terms) == relation.constant


def _satisfies(bound: Bound, values: dict) -> bool:
    total = sum(c * Fraction(values[name]) for name, c in bound.terms)
    return total <= bound.constant if bound.relation == "<=" else total >= bound.constant


def _as_le(bound: Bound) -> tuple[dict, Fraction]:
    """The bound as (coefs, constant) meaning sum coefs * columns <= constant."""
    sign = 1 if bound.relation == "<=" else -1
    return {n: sign * c for n, c in bound.terms}, sign * bound.constant


# --------------------------------------------------------------------------------------------
# Exact relations
# --------------------------------------------------------------------------------------------


def test_pick_theorem_is_the_one_relation(polygons):
    # Pick (1899): a lattice polygon has area A = I + B/2 - 1, i.e. 2A - 2I - B = -2.
    columns = _columns(polygons)
    result = find_relations(columns, bounds=False)
    names = list(columns)
    found = [r for r in result.relations if not r.trivial]
    assert len(found) == 1, [r.text for r in result.relations]
    pick = found[0]
    assert _proportional(_vector(pick, names), [1, -2, -1, 0, 2]), pick.text
    assert pick.text == "twice_area - 2*interior - boundary = -2"
    assert pick.exact and pick.holds_on == len(polygons) and pick.violations == ()
    # Independent check with sympy: the rational nullspace of the data with a column of ones
    # is one-dimensional and spanned by the same vector.
    data = sympy.Matrix([[*r[:4], 1] for r in polygons])
    (null,) = data.nullspace()
    assert _proportional(list(null), _vector(pick, names))


@pytest.mark.parametrize("max_breakers", [0.02, 5], ids=["fraction", "count"])
def test_planted_errors_do_not_hide_pick(polygons, max_breakers):
    # Pick (1899) again, on a copy in which three rows got a wrong interior count.
    columns = _columns(polygons)
    planted = [7, 58, 131]
    for row in planted:
        columns["interior"][row] += 1
    row_ids = [f"P{i:03d}" for i in range(len(polygons))]
    result = find_relations(columns, row_ids=row_ids, max_breakers=max_breakers, bounds=False)
    found = [r for r in result.relations if not r.trivial]
    assert len(found) == 1, [r.text for r in result.relations]
    pick = found[0]
    assert _proportional(_vector(pick, list(columns)), [1, -2, -1, 0, 2]), pick.text
    assert sorted(pick.violations) == [row_ids[i] for i in planted]
    assert pick.holds_on == len(polygons) - len(planted)
    assert not any(_holds(pick, columns, i) for i in planted)


def test_planted_errors_break_the_relation_without_robust_mode(polygons):
    # Pick (1899): with a wrong interior count in some rows no relation holds on every row.
    columns = _columns(polygons)
    columns["interior"][12] -= 1
    assert find_relations(columns, robust=False, bounds=False).relations == ()


def test_pick_on_the_sample_table():
    # Pick (1899) on the demo table of lattice polygons, through the table reader.
    if not SAMPLE_POLYGONS.exists():
        pytest.skip("sample_tables/lattice_polygons.csv is not there yet (generated separately)")
    table = load_table(SAMPLE_POLYGONS)
    result = RelationsStep(bounds=False).run(table)
    exact = [r for r in result.relations if not r.violations]
    names = sorted({name for r in exact for name, _ in r.terms})
    pick = {"twice_area": 1, "interior_points": -2, "boundary_points": -1}
    basis = sympy.Matrix([_vector(r, names) for r in exact])
    extended = basis.col_join(sympy.Matrix([[pick.get(n, 0) for n in names] + [2]]))
    assert extended.rank() == basis.rank(), "Pick's theorem is not among the relations"
    # Ehrhart (1962): a lattice polygon dilated by t holds A t^2 + (B/2) t + 1 lattice points;
    # with t = 10**12 that is a relation with 24-digit coefficients on a big-integer column.
    ehrhart = {"twice_area": 5 * 10**23, "boundary_points": 5 * 10**11,
               "points_in_dilate_1e12": -1}
    extended = basis.col_join(sympy.Matrix([[ehrhart.get(n, 0) for n in names] + [1]]))
    assert extended.rank() == basis.rank(), "Ehrhart's polynomial is not among the relations"
    # The rational column area is half of twice_area, exactly.
    assert "2*area - twice_area = 0" in [r.text for r in exact]
    values = {name: table.exact(name) for name in names}
    for relation in exact:
        assert all(_holds(relation, values, i) for i in range(table.n_rows)), relation.text
    # vertices and edges of a polygon are equal: one trivial relation, not repeated elsewhere.
    trivial = [r for r in result.relations if r.trivial]
    assert [r.text for r in trivial] == ["vertices - edges = 0"]
    assert not any("edges" in dict(r.terms) for r in result.relations if not r.trivial)


def test_handshake_lemma_on_the_graph_atlas():
    # Handshake lemma (Euler, 1736): the degrees of a graph add up to twice its edges.
    # Graphs: networkx's graph atlas (all graphs on up to 7 vertices).
    graphs = nx.graph_atlas_g()
    columns = {
        "vertices": [g.number_of_nodes() for g in graphs],
        "edges": [g.number_of_edges() for g in graphs],
        "degree_sum": [sum(d for _, d in g.degree()) for g in graphs],
        "triangles": [sum(nx.triangles(g).values()) // 3 for g in graphs],
    }
    result = find_relations(columns, bounds=False)
    assert [r.text for r in result.relations] == ["2*edges - degree_sum = 0"]
    assert result.relations[0].holds_on == len(graphs)


# Vertex, edge and face counts, from memory (any handbook of polyhedra lists them).
PLATONIC = {
    "tetrahedron": (4, 6, 4),
    "cube": (8, 12, 6),
    "octahedron": (6, 12, 8),
    "dodecahedron": (20, 30, 12),
    "icosahedron": (12, 30, 20),
}
# An n-gonal prism has 2n vertices, 3n edges and n + 2 faces (from memory).
PRISMS = {f"prism{n}": (2 * n, 3 * n, n + 2) for n in range(3, 11)}


def _polyhedra():
    solids = {**PLATONIC, **PRISMS}
    names = list(solids)
    columns = {
        "vertices": [solids[s][0] for s in names],
        "edges": [solids[s][1] for s in names],
        "faces": [solids[s][2] for s in names],
    }
    return names, columns


def test_euler_formula_on_polyhedra():
    # Euler's polyhedron formula: V - E + F = 2 for every convex polyhedron.
    names, columns = _polyhedra()
    result = find_relations(columns, row_ids=names, bounds=False)
    assert [r.text for r in result.relations] == ["vertices - edges + faces = 2"]
    assert result.relations[0].violations == ()


def test_simple_polyhedra_found_with_their_breakers():
    # In a polyhedron whose vertices all have degree 3, 2E = 3V (count edge ends; from
    # memory). Of these solids only the octahedron and the icosahedron have other degrees.
    # With Euler's formula it may be written in other ways (V - 2F = -4, say): any of them.
    names, columns = _polyhedra()
    result = find_relations(columns, row_ids=names, max_breakers=2, bounds=False)
    texts = [r.text for r in result.relations]
    assert texts[0] == "vertices - edges + faces = 2", texts
    assert len(result.relations) == 2, texts
    simple = result.relations[1]
    order = list(columns)
    span = sympy.Matrix([[1, -1, 1, -2], [3, -2, 0, 0], _vector(simple, order)])
    assert span.rank() == 2 and not _proportional(_vector(simple, order), [1, -1, 1, -2])
    assert sorted(simple.violations) == ["icosahedron", "octahedron"]
    reasons = relation_reasons(result)
    assert reasons["octahedron"] == [
        f"breaks {simple.text}, which every other object obeys (one of the 2 objects that do)"]
    assert "tetrahedron" not in reasons


@pytest.mark.parametrize("seed", [0, 1, 2], ids=lambda s: f"seed{s}")
@pytest.mark.parametrize("max_breakers", [0.01, 5], ids=["default", "five_rows"])
def test_random_columns_have_no_relation(seed, max_breakers):
    # Control: independent random integers obey no linear relation; nothing may be reported.
    rng = np.random.default_rng(seed)
    columns = {name: rng.integers(0, 1000, 300).tolist() for name in ("a", "b", "c", "d")}
    result = find_relations(columns, max_breakers=max_breakers, bounds=False, seed=seed)
    assert result.relations == (), [r.text for r in result.relations]


def test_trivial_relations_once_and_implied_ones_not_repeated(polygons):
    # Pick (1899) plus two columns defined from others, a constant and a copied column.
    columns = _columns(polygons)
    columns["corners"] = list(columns["vertices"])
    columns["dimension"] = [2] * len(polygons)
    columns["t_plus_b"] = [t + b for t, b in zip(columns["twice_area"], columns["boundary"])]
    columns["sum3"] = [s + i for s, i in zip(columns["t_plus_b"], columns["interior"])]
    columns["area"] = [Fraction(t, 2) for t in columns["twice_area"]]
    result = find_relations(columns, bounds=False)
    trivial = [r for r in result.relations if r.trivial]
    assert sorted(r.text for r in trivial) == ["dimension = 2", "vertices - corners = 0"]
    others = [r for r in result.relations if not r.trivial]
    assert not any({"corners", "dimension"} & set(dict(r.terms)) for r in others)
    # The remaining relations form a basis: as many as the nullspace's dimension (sympy),
    # linearly independent, and each in the nullspace.
    names = [n for n in columns if n not in ("corners", "dimension")]
    data = sympy.Matrix([[Fraction(columns[n][i]) for n in names] + [1]
                         for i in range(len(polygons))])
    dimension = len(data.nullspace())
    vectors = sympy.Matrix([_vector(r, names) for r in others])
    assert len(others) == dimension == 4, [r.text for r in others]
    assert vectors.rank() == dimension
    assert (data * vectors.T).is_zero_matrix
    assert "twice_area - 2*area = 0" in [r.text for r in others]


@settings(max_examples=25, deadline=None)
@given(
    coefficients=st.lists(st.integers(-7, 7), min_size=2, max_size=4),
    constant=st.integers(-50, 50),
    seed=st.integers(0, 10**6),
)
def test_planted_relation_is_always_found(coefficients, constant, seed):
    # Property: last = sum c_i * column_i + constant on random columns; the one relation
    # found must be that one (up to sign; trivial when last is a constant or a copied column)
    # and it must hold on every row (checked by hand).
    rng = np.random.default_rng(seed)
    columns = {f"x{i}": rng.integers(-30, 30, 40).tolist() for i in range(len(coefficients))}
    columns["last"] = [
        sum(c * columns[f"x{i}"][row] for i, c in enumerate(coefficients)) + constant
        for row in range(40)
    ]
    result = find_relations(columns, bounds=False, seed=seed)
    names = list(columns)
    planted = [*coefficients, -1, constant]
    found = list(result.relations)
    assert len(found) == 1, [r.text for r in result.relations]
    assert _proportional(_vector(found[0], names), planted), found[0].text
    assert all(_holds(found[0], columns, row) for row in range(40))


def test_column_with_missing_values_is_searched_where_present():
    # y = 2x + 1 wherever y is known; x itself must not look constant.
    rng = np.random.default_rng(5)
    x = rng.integers(0, 50, 120).tolist()
    z = rng.integers(0, 50, 120).tolist()
    y = [2 * v + 1 if i % 4 else None for i, v in enumerate(x)]
    result = find_relations({"x": x, "y": y, "z": z}, bounds=False)
    assert [r.text for r in result.relations] == ["2*x - y = -1"]
    relation = result.relations[0]
    assert relation.holds_on == sum(v is not None for v in y)
    assert "where 'y' is present" in relation.note


# --------------------------------------------------------------------------------------------
# LLL and the relation lattice
# --------------------------------------------------------------------------------------------


def _sympy_lll(basis):
    rows, cols = len(basis), len(basis[0])
    matrix = DomainMatrix([[ZZ(x) for x in row] for row in basis], (rows, cols), ZZ)
    return matrix.lll().to_Matrix().tolist()


def _same_lattice(a, b) -> bool:
    """Each basis is an integer combination of the other (so the change of basis is
    unimodular)."""
    ma, mb = sympy.Matrix(a), sympy.Matrix(b)
    for source, target in ((ma, mb), (mb, ma)):
        change = target * source.T * (source * source.T).inv()
        if any(not x.is_integer for x in change) or abs(change.det()) != 1:
            return False
    return True


def test_lll_on_a_known_basis():
    # A small worked example of LLL (from memory): the basis (1,1,1), (-1,0,2), (3,5,6)
    # reduces to (0,1,0), (1,0,1), (-1,0,2).
    basis = [[1, 1, 1], [-1, 0, 2], [3, 5, 6]]
    reduced = lll_reduce(basis)
    assert reduced == [[0, 1, 0], [1, 0, 1], [-1, 0, 2]]
    assert reduced == _sympy_lll(basis)
    assert _same_lattice(reduced, basis)


@pytest.mark.parametrize("seed", range(6), ids=lambda s: f"seed{s}")
def test_lll_agrees_with_sympy(seed):
    # Reference: sympy's LLL (DomainMatrix.lll, delta = 3/4) on random integer bases.
    rng = np.random.default_rng(seed)
    rows = int(rng.integers(2, 6))
    cols = rows + int(rng.integers(0, 3))
    while True:
        basis = rng.integers(-60, 60, size=(rows, cols)).tolist()
        if sympy.Matrix(basis).rank() == rows:
            break
    reduced = lll_reduce(basis)
    assert reduced == _sympy_lll(basis)
    assert _same_lattice(reduced, basis)


def test_lll_rejects_dependent_vectors():
    with pytest.raises(ValueError, match="linearly dependent"):
        lll_reduce([[1, 2], [2, 4]])


def test_integer_kernel_holds_every_integer_solution():
    # 2x + y + z = 0 and x - y + 3w = 0: every integer solution in a box (brute force) must be
    # an integer combination of the basis, not merely a rational one.
    rows = [[2, 1, 1, 0], [1, -1, 0, 3]]
    basis = sympy.Matrix(integer_kernel(rows))
    assert basis.rows == 2
    gram_inverse = (basis * basis.T).inv()
    for point in itertools.product(range(-4, 5), repeat=4):
        if all(sum(a * b for a, b in zip(row, point)) == 0 for row in rows):
            coefficients = sympy.Matrix([point]) * basis.T * gram_inverse
            assert all(c.is_integer for c in coefficients), point


# --------------------------------------------------------------------------------------------
# Approximate relations
# --------------------------------------------------------------------------------------------


def test_approximate_relations_among_real_columns():
    # sin^2 t + cos^2 t = 1 (Pythagorean identity), in floating point: an approximate relation.
    rng = np.random.default_rng(3)
    t = rng.uniform(0, 6, 200)
    real = {"sin2": np.sin(t) ** 2, "cos2": np.cos(t) ** 2}
    steps = rng.integers(0, 20, 200)
    exact = {"steps": steps.tolist()}
    result = find_relations(exact, real, bounds=False, tolerance=1e-9)
    assert [r.text.split(" (")[0] for r in result.approximate] == ["sin2 + cos2 = 1"]
    relation = result.approximate[0]
    assert not relation.exact and relation.tolerance == 1e-9
    assert "approximately" in relation.text
    assert relation.holds_on == 200 and relation.violations == ()


def test_approximate_relation_with_a_row_off():
    # y = 3/2 x + 1/4 computed in floating point, with one row moved off by a visible amount.
    rng = np.random.default_rng(4)
    x = rng.uniform(-10, 10, 300)
    y = 1.5 * x + 0.25
    y[17] += 1e-3
    result = find_relations({}, {"x": x, "y": y}, max_breakers=3, bounds=False)
    assert len(result.approximate) == 1
    relation = result.approximate[0]
    coefs = dict(relation.terms)
    assert coefs["y"] / coefs["x"] == Fraction(-2, 3), relation.text
    assert relation.constant / coefs["y"] == Fraction(1, 4)
    assert relation.violations == (17,)


# --------------------------------------------------------------------------------------------
# Bounds
# --------------------------------------------------------------------------------------------


def test_boundary_points_at_least_vertices(polygons):
    # Each corner of a lattice polygon is a boundary point, so B >= V, with equality exactly
    # when no edge carries a lattice point inside it: gcd(dx, dy) = 1 on every edge.
    columns = _columns(polygons)
    result = find_relations(columns, robust=False)
    wanted = ({"vertices": 1, "boundary": -1}, 0)
    matches = [b for b in result.bounds if _as_le(b) == wanted]
    assert len(matches) == 1, [b.text for b in result.bounds]
    bound = matches[0]
    primitive = sorted(i for i, row in enumerate(polygons) if row[4])
    assert sorted(bound.attained_by) == primitive
    assert bound.attained_count == len(primitive) and bound.violations == ()
    assert bound.holds_on == len(polygons)


def test_every_bound_holds_and_is_attained(polygons):
    # Brute force: every reported bound holds on every row but the ones it lists as breaking
    # it (robust mode allows one row in 160 here), and is attained by the rows it lists.
    columns = _columns(polygons)
    result = find_relations(columns)
    assert result.bounds, "no bound found"
    assert len(result.bounds) <= 30
    # those that hold on every row first, then those a few rows break, each in rank order
    holding = [b for b in result.bounds if not b.violations]
    assert list(result.bounds[:len(holding)]) == holding
    for group in (holding, [b for b in result.bounds if b.violations]):
        keys = [bound_rank(b) for b in group]
        assert keys == sorted(keys), "bounds not in the order of bound_rank"
    for bound in result.bounds:
        rows = [{name: columns[name][i] for name in columns} for i in range(len(polygons))]
        broken = [i for i, row in enumerate(rows) if not _satisfies(bound, row)]
        assert broken == sorted(bound.violations), bound.text
        assert len(broken) <= 1, bound.text
        attained = [i for i, row in enumerate(rows)
                    if sum(c * row[n] for n, c in bound.terms) == bound.constant]
        assert sorted(bound.attained_by) == attained, bound.text
        assert max(abs(c) for _, c in bound.terms) <= 6
        # The columns' own ranges are never reported as bounds.
        assert len(bound.terms) >= 2, bound.text


def test_bound_implied_by_a_relation_and_ranges_is_suppressed(polygons):
    # By Pick (1899) twice_area - boundary = 2*interior - 2 >= -2, since interior >= 0: this
    # follows from the relation and a range, so it is not reported while the relation is exact.
    columns = _columns(polygons)
    assert min(columns["interior"]) == 0
    result = find_relations(columns, robust=False)
    implied = ({"twice_area": -1, "boundary": 1}, 2)
    assert all(_as_le(b) != implied for b in result.bounds)


def test_bound_found_when_a_planted_row_breaks_it(polygons):
    # B >= V again, on a copy with one row whose boundary count is below its corner count.
    columns = _columns(polygons)
    planted = next(i for i, row in enumerate(polygons) if row[3] == 5 and row[2] == 5)
    columns["boundary"][planted] = 4
    result = find_relations(columns, max_breakers=3)
    wanted = ({"vertices": 1, "boundary": -1}, 0)
    matches = [b for b in result.bounds if _as_le(b) == wanted]
    assert len(matches) == 1, [b.text for b in result.bounds]
    assert matches[0].violations == (planted,)
    reasons = relation_reasons(result)
    assert f"breaks {matches[0].text}, which every other object obeys" in reasons[planted]


def test_a_bound_many_objects_break_flags_none_of_them():
    # Brooks' bound on the atlas's connected graphs allowed 20 breakers: its 9 exceptions are
    # few, so each is flagged; with a tendency broken by many, none is.
    rng = np.random.default_rng(8)
    x = rng.integers(0, 30, 2000)
    y = x + rng.integers(0, 4, 2000)
    y[:40] = x[:40] - 1     # 40 breakers of y >= x
    found = find_relations({"x": x, "y": y}, max_breakers=60)
    near = [b for b in found.bounds if len(b.violations) == 40]
    assert near, [b.text for b in found.bounds]
    reasons = relation_reasons(found)
    assert not any(text.startswith("breaks " + near[0].text)
                   for texts in reasons.values() for text in texts)


# --------------------------------------------------------------------------------------------
# The step on a table, JSON, settings
# --------------------------------------------------------------------------------------------


def _polygon_table(rows, planted=()):
    lines = ["polygon,twice_area,interior,boundary,vertices,name"]
    for i, (t, interior, b, v, _) in enumerate(rows):
        lines.append(f"Q{i},{t},{interior + (1 if i in planted else 0)},{b},{v},poly {i}")
    return read_table("\n".join(lines).encode(), "polygons.csv", id_column="polygon")


def test_step_on_a_table_names_rows_by_id(polygons):
    # Pick (1899) on a table read from CSV, with two planted errors found by their ids.
    table = _polygon_table(polygons, planted={3, 40})
    before = table.frame.copy()
    result = RelationsStep(max_breakers=4, triples=False).run(table)
    assert result.n_rows == len(polygons)
    assert result.columns == ("twice_area", "interior", "boundary", "vertices")
    pick = [r for r in result.relations if not r.trivial]
    assert [r.text for r in pick] == ["twice_area - 2*interior - boundary = -2"]
    assert sorted(pick[0].violations) == ["Q3", "Q40"]
    assert table.frame.equals(before)
    assert relation_reasons(result)["Q3"] == [
        "breaks twice_area - 2*interior - boundary = -2, which every other object obeys (one "
        "of the 2 objects that do)"]


def test_to_json_fields(polygons):
    # Field names from the design's JSON contract for `relations`.
    table = _polygon_table(polygons, planted={5})
    payload = RelationsStep(max_breakers=2).run(table).to_json()
    json.dumps(payload, allow_nan=False)
    assert {"relations", "bounds", "caveat"} <= set(payload)
    assert "conjecture" in payload["caveat"] and "not a theorem" in payload["caveat"]
    relation = payload["relations"][0]
    assert {"terms", "relation", "constant", "text", "holds_on", "violations"} <= set(relation)
    assert relation["relation"] == "="
    assert relation["violations"] == ["Q5"]
    for term in relation["terms"]:
        assert set(term) == {"column", "coef"}
        assert isinstance(term["coef"], str)
        Fraction(term["coef"])
    assert isinstance(relation["constant"], str)
    assert payload["bounds"], "no bounds in the JSON"
    for bound in payload["bounds"]:
        assert {"terms", "relation", "constant", "text", "attained_by", "violations"} <= set(
            bound)
        assert bound["relation"] in ("<=", ">=")
        assert all(set(t) == {"column", "coef"} for t in bound["terms"])
        Fraction(bound["constant"])


def test_same_seed_same_result(polygons):
    table = _polygon_table(polygons, planted={9, 10})
    first = RelationsStep(seed=7, max_breakers=3).run(table).to_json()
    second = RelationsStep(seed=7, max_breakers=3).run(table).to_json()
    assert first == second


@pytest.mark.parametrize(
    ("settings", "message"),
    [
        ({"max_breakers": -1}, "max_breakers"),
        ({"max_breakers": 2.5}, "max_breakers"),
        ({"max_breakers": "few"}, "max_breakers"),
        ({"max_coefficient": 0}, "max_coefficient"),
        ({"tolerance": 2.0}, "tolerance"),
        ({"columns": ["genus"]}, "no column 'genus'"),
        ({"columns": ["name"]}, "column 'name' .* role text"),
        ({"columns": "interior"}, "list of column names"),
    ],
    ids=["negative_breakers", "fractional_count", "text_breakers", "zero_coefficient",
         "tolerance", "unknown_column", "text_column", "columns_as_string"],
)
def test_rejected_settings(polygons, settings, message):
    table = _polygon_table(polygons[:20])
    with pytest.raises(StepError, match=message):
        RelationsStep(**settings).run(table)


def _chromatic_number(graph) -> int:
    """Smallest number of colours of a proper colouring, by exhaustive backtracking (the
    atlas's graphs have at most seven vertices)."""
    nodes = sorted(graph, key=graph.degree, reverse=True)

    def colourable(k, colours, i):
        if i == len(nodes):
            return True
        used = {colours[v] for v in graph[nodes[i]] if v in colours}
        for colour in range(k):
            if colour not in used:
                colours[nodes[i]] = colour
                if colourable(k, colours, i + 1):
                    return True
                del colours[nodes[i]]
        return False

    return next(k for k in range(1, len(nodes) + 1) if colourable(k, {}, 0))


def test_brooks_bound_is_found_with_exactly_its_exceptions():
    # Brooks' theorem (Brooks 1941, Proc. Cambridge Philos. Soc. 37): a connected graph has
    # chromatic number at most its largest degree, unless it is complete or an odd cycle. On
    # the connected graphs of networkx's graph atlas the near-bound chromatic <= max_degree
    # must be found, broken by exactly the complete graphs and the odd cycles.
    import networkx as nx

    graphs = [g for g in nx.graph_atlas_g()[1:] if nx.is_connected(g)]
    chromatic = [_chromatic_number(g) for g in graphs]
    degree = [max((d for _, d in g.degree()), default=0) for g in graphs]
    exceptions = {i for i, g in enumerate(graphs)
                  if g.number_of_edges() == len(g) * (len(g) - 1) // 2
                  or (len(g) % 2 == 1 and len(g) >= 3 and all(d == 2 for _, d in g.degree()))}
    found = find_relations({"chromatic": chromatic, "max_degree": degree}, max_breakers=20)
    brooks = [b for b in found.bounds
              if dict(b.terms) == {"chromatic": 1, "max_degree": -1} and b.relation == "<="
              and b.constant == 0]
    assert len(brooks) == 1, [b.text for b in found.bounds]
    assert set(brooks[0].violations) == exceptions
    # and the greedy colouring bound chromatic <= max_degree + 1 holds on every graph
    # (common practice), attained by exactly the same graphs
    greedy = [b for b in found.bounds
              if dict(b.terms) == {"chromatic": 1, "max_degree": -1} and b.constant == 1]
    assert len(greedy) == 1 and not greedy[0].violations
    assert set(greedy[0].attained_by) == exceptions


def test_a_simple_bound_with_a_few_breakers_comes_before_a_long_one_attained_by_few():
    # A planted table: h >= f for all but 22 special rows set to zero, attained by most rows.
    rng = np.random.default_rng(0)
    n = 7890
    factors = rng.integers(1, 16, n)
    h = factors + rng.geometric(0.6, n) - 1
    h[rng.choice(n, 22, replace=False)] = 0
    rows = rng.integers(factors, factors + 10)
    columns = rng.integers(factors + 1, factors + 20)
    found = find_relations({"h": h, "f": factors, "rows": rows, "columns": columns})
    texts = [b.text for b in found.bounds]
    assert "h - f >= 0" in texts, texts
    planted = found.bounds[texts.index("h - f >= 0")]
    assert len(planted.violations) == 22 and planted.attained_count > n / 2
    # it leads the bounds that a few rows break, ahead of every three-term one
    near = [b for b in found.bounds if b.violations]
    assert near[0] is planted, [b.text for b in near]
    exact = [b for b in found.bounds if not b.violations]
    assert found.bounds[:len(exact)] == tuple(exact)


def test_the_step_reports_congruences_beside_relations_and_bounds():
    # An imaginary quadratic field has 2, 4 or 6 roots of unity (from memory: 4 for Q(i), 6
    # for Q(sqrt(-3)), 2 otherwise), so the sample table's units column is even; and the
    # discriminant's residue mod 8 is the column disc_mod_8, by its definition.
    table = load_table(Path(__file__).resolve().parent.parent / "sample_tables" /
                       "quadratic_fields.csv")
    result = RelationsStep().run(table)
    texts = [c.text for c in result.congruences]
    assert "units ≡ 0 (mod 2)" in texts, texts
    assert "discriminant - disc_mod_8 ≡ 0 (mod 8)" in texts, texts
    data = result.to_json()["congruences"]
    assert {"terms", "modulus", "residue", "text", "holds_on", "violations"} <= set(data[0])
    assert "congruences (" in result.summary()
    assert RelationsStep(congruences=False).run(table).congruences == ()


def test_bounds_in_columns_too_wide_for_one_counting_grid_are_exact():
    # Three columns of 0..200 make 8 million grid cells, past the counting grid, and a fourth
    # spans ten million values: their distinct points are found by sorting one integer key.
    # Brute force (common practice): the planted face x + y + z <= 400 is reported, holds on
    # every row and is attained by exactly the rows on it; every other bound holds too.
    rng = np.random.default_rng(5)
    points = rng.integers(0, 201, size=(6000, 3))
    points = points[points.sum(axis=1) <= 400][:2500]
    on_face = rng.integers(0, 201, size=(40, 2))
    on_face = on_face[on_face.sum(axis=1) >= 200]
    points = np.vstack([points, np.column_stack([on_face, 400 - on_face.sum(axis=1)])])
    wide = rng.integers(0, 10**7, size=len(points))
    columns = {"x": points[:, 0].tolist(), "y": points[:, 1].tolist(),
               "z": points[:, 2].tolist(), "w": wide.tolist()}
    result = find_relations(columns, robust=False)
    texts = {b.text: b for b in result.bounds}
    assert "x + y + z <= 400" in texts, sorted(texts)
    face = texts["x + y + z <= 400"]
    on = [i for i in range(len(points)) if points[i].sum() == 400]
    assert face.attained_count == len(on) and sorted(face.attained_by) == on[:len(
        face.attained_by)]
    for bound in result.bounds:
        rows = [{name: columns[name][i] for name in columns} for i in range(len(points))]
        assert all(_satisfies(bound, row) for row in rows), bound.text


def test_the_relations_step_reports_its_phases_and_can_be_stopped():
    # networkx's graph atlas, as the sample table holds it
    from analysis.progress import Reporter, StepStopped, Stopper
    from analysis.relations import RelationsStep
    from analysis.table import load_table

    table = load_table(Path(__file__).resolve().parent.parent / "sample_tables"
                       / "graphs_up_to_7.csv")
    seen = []
    RelationsStep().run(table, progress=seen.append)
    phases = [p.phase for p in seen]
    assert phases[0] == "exact relations" and "bounds in pairs of columns" in phases
    assert "congruences" in phases
    pairs = [p for p in seen if p.phase == "bounds in pairs of columns"]
    assert pairs[-1].done == pairs[-1].total - 1 > 0
    stopper = Stopper()

    def stop_at_pairs(record):
        if record.phase == "bounds in pairs of columns" and record.done == 3:
            stopper.request()

    with pytest.raises(StepStopped):
        RelationsStep().run(table, progress=Reporter(stop_at_pairs, stopper=stopper))



# --------------------------------------------------------------------------------------------
# Relations between two columns that both have missing values
# --------------------------------------------------------------------------------------------
def _embedded_faces(graph) -> int | None:
    """Faces of a connected graph in networkx's planar embedding, each traversed once;
    None for a graph that is not planar."""
    planar, embedding = nx.check_planarity(graph)
    if not planar:
        return None
    if graph.number_of_edges() == 0:
        return 1
    seen: set = set()
    faces = 0
    for u, v in embedding.edges():
        if (u, v) not in seen:
            embedding.traverse_face(u, v, mark_half_edges=seen)
            faces += 1
    return faces


def test_a_relation_between_two_gappy_columns_is_found_where_both_are_present():
    # networkx's graph atlas (every graph on 1 to 7 vertices), as a table might be
    # downloaded: the first Betti number written only for connected graphs, the faces only
    # for connected planar ones, and no edge count. Euler's formula for connected plane
    # graphs (v - e + f = 2) ties them: faces - betti = 1 wherever both are present, which no
    # search of one gappy column at a time can see.
    rows = []
    for graph in nx.graph_atlas_g()[1:]:
        connected = nx.is_connected(graph)
        rows.append({"v": graph.number_of_nodes(),
                     "betti": graph.number_of_edges() - graph.number_of_nodes() + 1
                     if connected else None,
                     "faces": _embedded_faces(graph) if connected else None})
    both = sum(r["betti"] is not None and r["faces"] is not None for r in rows)
    assert 0 < both < len(rows)
    table = read_table(json.dumps(rows).encode(), "atlas.json")
    result = RelationsStep(bounds=False).run(table)
    found = {frozenset(r.terms): r for r in result.relations}
    relation = found.get(frozenset({("betti", Fraction(-1)), ("faces", Fraction(1))})) \
        or found.get(frozenset({("betti", Fraction(1)), ("faces", Fraction(-1))}))
    assert relation is not None, [r.text for r in result.relations]
    assert abs(relation.constant) == 1 and relation.holds_on == both
    assert "'betti' and 'faces' are present" in relation.note


def test_a_relation_of_the_rows_all_gappy_columns_share_must_hold_where_its_own_are():
    # h = 2g on the rows where g, h and k are all present, but not on rows where k is
    # missing: the joint search sees it, the check where g and h are present refuses it
    rng = random.Random(3)
    rows = []
    for i in range(400):
        g = rng.randint(0, 50)
        k = None if i % 4 == 0 else rng.randint(0, 9)
        h = 2 * g if k is not None else 2 * g + 1
        rows.append({"n": i, "g": g if i % 7 else None, "h": h if i % 11 else None, "k": k})
    table = read_table(json.dumps(rows).encode(), "gappy.json")
    result = RelationsStep(bounds=False).run(table)
    assert not any({name for name, _ in r.terms} == {"g", "h"} for r in result.relations)


def test_close_rows_are_judged_on_the_middle_half_when_a_few_values_are_huge():
    # groups of order 1..100 and ten of order past 2**70: on the whole range, 1/20 of the
    # spread is about 2**66 and every small row would be "close" to order + k >= 2
    rng = random.Random(5)
    rows = []
    for i in range(1000):
        order = rng.randint(1, 100) if i % 100 else 2**70 + i
        rows.append({"order": str(order), "classes": rng.randint(1, 10) if i % 100 else 2**20,
                     "k": rng.randint(0, 9)})
    table = read_table(json.dumps(rows).encode(), "groups.json")
    assert table.column("order").dtype == "big integer"
    bound = next(b for b in RelationsStep().run(table).bounds if b.text == "order + k >= 2")
    left = [int(r["order"]) + r["k"] for r in rows]
    # the count follows its definition: rows above the bound by at most the margin
    assert bound.near == sum(1 for v in left if 0 < v - 2 <= bound.near_margin)
    # and the margin is 1/20 of the middle half's spread (numpy's quartiles of the rows
    # below 2**70 give it to within a step of the data), not of the whole range
    small = np.array([v for v in left if v < 2**70], dtype=np.float64)
    quartiles = float(np.percentile(small, 75) - np.percentile(small, 25))
    assert bound.near_margin <= Fraction(1, 20) * (quartiles + 2)
    assert bound.near < 100
