"""The demo tables in sample_tables/: read through load_table, checked against mathematics.

Each table is computed by sample_tables/make_tables.py. These tests load the committed files
with the program's own reader (so the roles a user sees are the ones tested) and check the
numbers against theorems, published sequences and independent recomputation.
"""

from __future__ import annotations

import itertools
import json
import math
from collections import Counter, defaultdict
from fractions import Fraction
from pathlib import Path

import networkx as nx
import numpy as np
import pytest
import sympy

from analysis.features import group_keys
from analysis.table import load_table

TABLES = Path(__file__).resolve().parent.parent / "sample_tables"
DILATION = 10**12


@pytest.fixture(scope="module")
def polygons():
    return load_table(TABLES / "lattice_polygons.csv")


@pytest.fixture(scope="module")
def graphs():
    return load_table(TABLES / "graphs_up_to_7.csv")


@pytest.fixture(scope="module")
def fields():
    return load_table(TABLES / "quadratic_fields.csv")


@pytest.fixture(scope="module")
def matrices():
    return load_table(TABLES / "symmetric_matrices.json")


@pytest.fixture(scope="module")
def curves():
    return load_table(TABLES / "elliptic_curves.csv")


def _records(table, *names):
    """Rows as tuples of exact values (arrays stay numpy arrays, ids stay strings)."""
    columns = []
    for name in names:
        dtype = table.column(name).dtype
        if dtype in ("integer", "big integer", "rational", "boolean"):
            columns.append(table.exact(name))
        else:
            columns.append(table.frame[name].tolist())
    return list(zip(*columns))


# --------------------------------------------------------------------------------------------
# Roles the reader detects


@pytest.mark.parametrize(
    ("fixture", "expected"),
    [
        pytest.param("polygons", {
            "polygon": ("id", None), "vertex_list": ("array", "array"),
            "area": ("invariant", "rational"), "twice_area": ("invariant", "integer"),
            "is_reflexive": ("flag", "boolean"), "centrally_symmetric": ("flag", "boolean"),
            "points_in_dilate_1e12": ("invariant", "big integer"),
        }, id="polygons"),
        pytest.param("graphs", {
            "graph": ("id", None), "adjacency": ("array", "array"),
            "diameter": ("invariant", "integer"), "spectral_radius": ("invariant", "real"),
            "bipartite": ("flag", "boolean"), "planar": ("flag", "boolean"),
            "connected": ("flag", "boolean"), "chromatic_number": ("invariant", "integer"),
        }, id="graphs"),
        pytest.param("fields", {
            "field": ("id", None), "discriminant": ("invariant", "integer"),
            "class_number": ("invariant", "integer"),
            "class_number_odd": ("flag", "boolean"), "class_number_one": ("flag", "boolean"),
        }, id="fields"),
        pytest.param("matrices", {
            "matrix_id": ("id", None), "matrix": ("array", "array"),
            "determinant": ("invariant", "integer"), "definiteness": ("category", None),
            "is_positive_definite": ("flag", "boolean"),
        }, id="matrices"),
        pytest.param("curves", {
            "curve": ("id", None), "points": ("invariant", "integer"),
            "trace": ("invariant", "integer"), "supersingular": ("flag", "boolean"),
        }, id="curves"),
    ],
)
def test_detected_roles(request, fixture, expected):
    table = request.getfixturevalue(fixture)
    file_name = table.name
    for name, (role, dtype) in expected.items():
        info = table.column(name)
        assert info.role == role, f"{file_name}: {name} detected as {info.role}, want {role}"
        if dtype is not None:
            assert info.dtype == dtype, f"{file_name}: {name} typed {info.dtype}, want {dtype}"
    assert table.id_column == next(n for n, (r, _) in expected.items() if r == "id")
    assert len(set(table.row_ids.tolist())) == table.n_rows


# --------------------------------------------------------------------------------------------
# Lattice polygons


def test_polygon_table_size(polygons):
    assert 1000 <= polygons.n_rows <= 10000, f"{polygons.n_rows} polygons"


def test_pick_theorem_on_every_polygon(polygons):
    # Pick's theorem (Pick, 1899): A = I + B/2 - 1 for a lattice polygon. The table counts
    # I and B by enumerating lattice points, so this is a real check of both counts.
    rows = _records(polygons, "polygon", "area", "twice_area", "interior_points",
                    "boundary_points")
    for polygon, area, twice_area, interior, boundary in rows:
        assert isinstance(area, Fraction)
        assert area == interior + Fraction(boundary, 2) - 1, polygon
        assert twice_area == 2 * area, polygon


def test_polygon_vertices_are_convex_and_measured(polygons):
    # Shoelace formula for the area; boundary points are the sum over edges of
    # gcd(|dx|, |dy|) (common practice); a strictly convex counterclockwise polygon turns left
    # at every vertex.
    rows = _records(polygons, "polygon", "vertex_list", "vertices", "edges", "twice_area",
                    "boundary_points", "max_edge_length", "primitive_edges")
    for polygon, cell, n_vertices, n_edges, twice_area, boundary, longest, primitive in rows:
        vertices = [tuple(int(c) for c in v) for v in cell.tolist()]
        n = len(vertices)
        assert n == n_vertices == n_edges, polygon
        following = vertices[1:] + vertices[:1]
        turn = vertices[2:] + vertices[:2]
        for (ax, ay), (bx, by), (cx, cy) in zip(vertices, following, turn):
            assert (bx - ax) * (cy - ay) - (by - ay) * (cx - ax) > 0, polygon
        assert sum(ax * by - bx * ay for (ax, ay), (bx, by) in zip(vertices, following)) \
            == twice_area, polygon
        lengths = [math.gcd(bx - ax, by - ay) for (ax, ay), (bx, by) in zip(vertices, following)]
        assert sum(lengths) == boundary, polygon
        assert max(lengths) == longest, polygon
        assert lengths.count(1) == primitive, polygon


def test_polygons_are_distinct_up_to_translation(polygons):
    seen = set()
    for cell in polygons.frame["vertex_list"]:
        points = cell.tolist()
        low_x = min(x for x, _ in points)
        low_y = min(y for _, y in points)
        key = tuple(sorted((x - low_x, y - low_y) for x, y in points))
        assert key not in seen, f"two rows are translates of {key}"
        seen.add(key)


def test_scott_inequality_on_every_polygon(polygons):
    # Scott (1976): a lattice polygon with I >= 1 interior points has B <= 2I + 6, except the
    # triangle 3 * (standard simplex), where I = 1 and B = 9 (from memory).
    rows = _records(polygons, "polygon", "interior_points", "boundary_points")
    for polygon, interior, boundary in rows:
        if interior >= 1 and boundary > 2 * interior + 6:
            assert (interior, boundary) == (1, 9), polygon
    # Reflexive (exactly one interior point) polygons have 3 <= B <= 9 (from memory).
    flags = _records(polygons, "is_reflexive", "interior_points", "boundary_points")
    reflexive = [(i, b) for flag, i, b in flags if flag]
    assert reflexive and all(i == 1 and 3 <= b <= 9 for i, b in reflexive)
    assert sum(1 for _, i, _ in flags if i == 1) == len(reflexive)


def test_central_symmetry_flag(polygons):
    # A polygon is centrally symmetric exactly when reflecting its vertices through their
    # mean gives the same vertex set (common practice).
    rows = _records(polygons, "polygon", "vertex_list", "centrally_symmetric")
    for polygon, cell, flag in rows:
        points = {tuple(v) for v in cell.tolist()}
        sx = sum(x for x, _ in points)
        sy = sum(y for _, y in points)
        n = len(points)
        mirrored = {(Fraction(2 * sx, n) - x, Fraction(2 * sy, n) - y) for x, y in points}
        assert bool(flag) == (mirrored == points), polygon
    assert any(flag for _, _, flag in rows), "no centrally symmetric polygon in the table"


def test_lattice_width_by_wide_search(polygons):
    # Independent recomputation: the least width over all primitive directions with
    # |u|, |v| <= 20, on the first 150 polygons (boxes have side at most 8).
    directions = np.array([(u, v) for u in range(0, 21) for v in range(-20, 21)
                           if (u, v) > (0, 0) and math.gcd(u, v) == 1])
    rows = _records(polygons, "polygon", "vertex_list", "lattice_width")[:150]
    for polygon, cell, width in rows:
        values = cell @ directions.T
        assert int((values.max(axis=0) - values.min(axis=0)).min()) == width, polygon


def test_ehrhart_column_is_exact_big_integer(polygons):
    # Ehrhart polynomial of a lattice polygon: L(t) = A t^2 + (B/2) t + 1 (Ehrhart, 1962;
    # for polygons it follows from Pick's theorem). Compared in exact Fractions.
    rows = _records(polygons, "polygon", "area", "boundary_points", "points_in_dilate_1e12")
    for polygon, area, boundary, count in rows:
        assert type(count) is int, polygon
        expected = area * DILATION**2 + Fraction(boundary, 2) * DILATION + 1
        assert expected == count, polygon
        assert count > 2**63, polygon


# --------------------------------------------------------------------------------------------
# Graphs


def test_graph_counts_match_oeis(graphs):
    # OEIS A000088: number of graphs on n unlabeled nodes, 1, 1, 2, 4, 11, 34, 156, 1044 for
    # n = 0..7. The table leaves out the graph with no vertices.
    counts = Counter(graphs.exact("vertices"))
    assert [counts[n] for n in range(0, 8)] == [0, 1, 2, 4, 11, 34, 156, 1044]


def test_graph_rows_are_the_atlas_graphs(graphs):
    # The id names the atlas index; the adjacency cell must be that atlas graph.
    atlas = nx.graph_atlas_g()
    for graph_id, cell in zip(graphs.row_ids, graphs.frame["adjacency"]):
        expected = nx.to_numpy_array(atlas[int(graph_id[1:])], nodelist=sorted(
            atlas[int(graph_id[1:])].nodes), dtype=int)
        assert np.array_equal(cell, expected), graph_id


def test_handshake_lemma_and_cycle_rank(graphs):
    # Handshake lemma: the degrees sum to twice the number of edges (Euler, 1736).
    rows = _records(graphs, "graph", "adjacency", "vertices", "edges", "degree_sum",
                    "min_degree", "max_degree", "components", "cycle_rank", "tree", "connected",
                    "diameter")
    for graph, cell, n, m, degree_sum, low, high, components, rank, tree, connected, diameter \
            in rows:
        degrees = cell.sum(axis=1)
        assert cell.shape == (n, n) and degree_sum == 2 * m == int(degrees.sum()), graph
        assert (low, high) == (int(degrees.min()), int(degrees.max())), graph
        assert rank == m - n + components >= 0, graph
        # A tree is a connected graph with n - 1 edges (common practice).
        assert bool(tree) == (components == 1 and m == n - 1), graph
        assert bool(connected) == (components == 1) == (diameter is not None), graph
        if diameter is not None:
            assert 0 <= diameter <= n - 1, graph


def test_spectral_radius_bounds(graphs):
    # numpy eigenvalues for the value; average degree <= spectral radius <= maximum degree
    # (Collatz and Sinogowitz, 1957) and Wilf's bound chi <= 1 + spectral radius (Wilf, 1967).
    rows = _records(graphs, "graph", "adjacency", "spectral_radius", "max_degree",
                    "chromatic_number")
    for graph, cell, radius, high, chi in rows:
        radius = float(radius)
        expected = float(np.abs(np.linalg.eigvalsh(cell.astype(float))).max())
        assert abs(radius - expected) <= 1e-6, graph
        assert cell.sum() / len(cell) - 1e-6 <= radius <= high + 1e-6, graph
        assert chi <= 1 + radius + 1e-6, graph


def test_chromatic_number_against_theorems(graphs):
    rows = _records(graphs, "graph", "adjacency", "vertices", "edges", "bipartite", "planar",
                    "regular", "connected", "max_degree", "chromatic_number", "triangles")
    for graph, cell, n, m, bipartite, planar, regular, connected, high, chi, triangles in rows:
        # A graph is 2-colourable exactly when it is bipartite (Konig, 1936).
        assert (chi <= 2) == bool(bipartite), graph
        assert chi == 1 or m > 0, graph
        # Four colour theorem (Appel and Haken, 1976) and Euler's bound m <= 3n - 6.
        if planar:
            assert chi <= 4, graph
            assert n < 3 or m <= 3 * n - 6, graph
        # Brooks (1941): chi <= max degree for a connected graph, unless complete or an odd
        # cycle.
        complete = m == n * (n - 1) // 2
        odd_cycle = connected and regular and high == 2 and n % 2 == 1
        if connected and not complete and not odd_cycle:
            assert chi <= high, graph
        if complete:
            assert chi == n, graph
        if odd_cycle:
            assert chi == 3, graph
        # Triangles: trace(A^3) / 6 (common practice).
        assert int(np.trace(np.linalg.matrix_power(cell, 3))) == 6 * triangles, graph


def test_planarity_of_the_kuratowski_graphs(graphs):
    # K5 and K3,3 are not planar (Kuratowski, 1930); their atlas rows must say so.
    for example in (nx.complete_graph(5), nx.complete_bipartite_graph(3, 3)):
        size = (example.number_of_nodes(), 2 * example.number_of_edges())
        matches = [
            graph_id for graph_id, cell in zip(graphs.row_ids, graphs.frame["adjacency"])
            if (len(cell), int(cell.sum())) == size
            and nx.is_isomorphic(nx.from_numpy_array(cell), example)
        ]
        assert len(matches) == 1
        assert graphs.frame.loc[graphs.row_ids == matches[0], "planar"].item() is False


# --------------------------------------------------------------------------------------------
# Imaginary quadratic fields


def _kronecker(d: int, n: int) -> int:
    """Kronecker symbol (d / n) for n >= 1: Jacobi symbol on the odd part, (d / 2) on twos."""
    result = 1
    while n % 2 == 0:
        n //= 2
        if d % 2 == 0:
            return 0
        result *= 1 if d % 8 in (1, 7) else -1
    return result * (sympy.jacobi_symbol(d % n, n) if n > 1 else 1)


def test_class_number_one(fields):
    # Heegner (1952), Baker (1966), Stark (1967): class number one exactly for these.
    rows = _records(fields, "discriminant", "class_number", "class_number_one")
    assert {d for d, h, _ in rows if h == 1} == {-3, -4, -7, -8, -11, -19, -43, -67, -163}
    assert all(bool(flag) == (h == 1) for _, h, flag in rows)


def test_class_numbers_two_and_three(fields):
    # Class number two: Baker (1971) and Stark (1971); class number three: Oesterle (1985).
    # The lists are recalled from memory.
    h = dict(zip(fields.exact("discriminant"), fields.exact("class_number")))
    two = {-15, -20, -24, -35, -40, -51, -52, -88, -91, -115, -123, -148, -187, -232, -235,
           -267, -403, -427}
    three = {-23, -31, -59, -83, -107, -139, -211, -283, -307, -331, -379, -499, -547, -643,
             -883, -907}
    assert {d for d, value in h.items() if value == 2} == two
    assert {d for d, value in h.items() if value == 3} == three
    # A few more values from memory.
    assert (h[-47], h[-71], h[-167], h[-199]) == (5, 7, 11, 9)


def test_genus_theory(fields):
    # Gauss: the 2-rank of the class group is t - 1, t the number of primes dividing D, so
    # 2^(t-1) divides h, and h is odd exactly when t = 1.
    rows = _records(fields, "field", "discriminant", "class_number", "prime_divisors",
                    "class_number_odd")
    for field, d, h, t, odd in rows:
        assert t == len(sympy.primefactors(-d)), field
        assert h % 2 ** (t - 1) == 0, field
        assert bool(odd) == (h % 2 == 1) == (t == 1), field


def test_dirichlet_class_number_formula(fields):
    # Dirichlet's class number formula: h(D) = -(w / (2|D|)) sum_{a=1}^{|D|-1} (D/a) a, w the
    # number of units; an independent recomputation of the form count, for every |D| <= 300.
    rows = _records(fields, "field", "discriminant", "class_number", "units")
    checked = 0
    for field, d, h, units in rows:
        if -d > 300:
            continue
        total = sum(_kronecker(d, a) * a for a in range(1, -d))
        assert Fraction(-total * units, 2 * -d) == h, field
        checked += 1
    assert checked > 80


def test_field_list_is_complete_at_the_start(fields):
    # The first negative fundamental discriminants are -3, -4, -7, -8, -11, -15, -19, -20, -23,
    # -24 (common practice). A fundamental discriminant is 1 mod 4, or 4m with m = 2, 3 mod 4,
    # so D mod 8 takes exactly the values 0, 1, 4, 5.
    discriminants = fields.exact("discriminant")
    assert discriminants[:10] == [-3, -4, -7, -8, -11, -15, -19, -20, -23, -24]
    assert fields.exact("disc_mod_8") == [d % 8 for d in discriminants]
    assert set(fields.exact("disc_mod_8")) == {0, 1, 4, 5}
    units = dict(zip(discriminants, fields.exact("units")))
    assert units[-3] == 6 and units[-4] == 4 and Counter(units.values())[2] == len(units) - 2


# --------------------------------------------------------------------------------------------
# Symmetric matrices


def _det(matrix: list[list[int]]) -> int:
    # Laplace expansion along the first row: exact integers, fine up to 4 x 4.
    if not matrix:
        return 1
    return sum((-1) ** j * matrix[0][j] * _det([row[:j] + row[j + 1:] for row in matrix[1:]])
               for j in range(len(matrix)))


def test_determinant_signature_and_rank(matrices):
    rows = _records(matrices, "matrix_id", "matrix", "size", "trace", "determinant", "rank",
                    "positive_eigenvalues", "negative_eigenvalues", "signature")
    for matrix_id, cell, size, trace, det, rank, positive, negative, signature in rows:
        entries = cell.tolist()
        assert cell.shape == (size, size) and np.array_equal(cell, cell.T), matrix_id
        assert trace == int(np.trace(cell)), matrix_id
        assert det == _det(entries), matrix_id
        # numpy eigenvalues with a tolerance far below the gap of an integer matrix's spectrum.
        eigenvalues = np.linalg.eigvalsh(cell.astype(float))
        assert positive == int((eigenvalues > 1e-8).sum()), matrix_id
        assert negative == int((eigenvalues < -1e-8).sum()), matrix_id
        assert signature == positive - negative, matrix_id
        assert rank == positive + negative == np.linalg.matrix_rank(cell), matrix_id
    # sympy's exact determinant and rank on a few rows.
    for matrix_id, cell, _size, _trace, det, rank, *_signs in rows[:25]:
        exact = sympy.Matrix(cell.tolist())
        assert (exact.det(), exact.rank()) == (det, rank), matrix_id


def test_definiteness_by_sylvester(matrices):
    # Sylvester's criterion: a symmetric matrix is positive definite exactly when all leading
    # principal minors are positive; negative definite when -M is positive definite.
    rows = _records(matrices, "matrix_id", "matrix", "definiteness", "is_positive_definite",
                    "positive_eigenvalues", "negative_eigenvalues", "size")
    seen = Counter()
    for matrix_id, cell, kind, flag, positive, negative, size in rows:
        entries = cell.tolist()
        minors = [_det([row[:k] for row in entries[:k]]) for k in range(1, size + 1)]
        definite = all(m > 0 for m in minors)
        negative_definite = all((-1) ** k * m > 0 for k, m in enumerate(minors, start=1))
        assert bool(flag) == definite == (kind == "positive definite"), matrix_id
        assert negative_definite == (kind == "negative definite"), matrix_id
        if kind == "positive semidefinite":
            assert negative == 0 < positive < size, matrix_id
        if kind == "negative semidefinite":
            assert positive == 0 < negative < size, matrix_id
        if kind == "indefinite":
            assert positive > 0 and negative > 0, matrix_id
        seen[kind] += 1
    assert set(seen) == {"positive definite", "negative definite", "positive semidefinite",
                         "negative semidefinite", "indefinite"}, seen


def test_copies_are_permutations_of_one_source(matrices):
    # Rows sharing source_matrix are P M P^T of each other and share every invariant; rows of
    # different sources are not (checked over all permutations, at most 4! = 24).
    assert matrices.role("source_matrix") in ("text", "category")
    groups = defaultdict(list)
    for record in _records(matrices, "source_matrix", "matrix", "size", "trace", "determinant",
                           "rank", "signature", "definiteness"):
        groups[record[0]].append(record)
    classes = {}
    for source, members in groups.items():
        assert 2 <= len(members) <= 4, source
        assert len({tuple(m[2:]) for m in members}) == 1, source
        first = members[0][1]
        for _, cell, *_ in members:
            assert any(np.array_equal(first[np.ix_(p, p)], cell)
                       for p in itertools.permutations(range(len(first)))), source
        key = min(tuple(first[np.ix_(p, p)].ravel().tolist())
                  for p in itertools.permutations(range(len(first))))
        assert key not in classes, f"{source} and {classes.get(key)} are one matrix"
        classes[key] = source


def test_canonical_keys_keep_copies_together(matrices):
    # The program's canonical key must never split the copies of one source, or a split by
    # groups would leak a matrix across train and test.
    keys = group_keys(matrices, "matrix")
    by_source = defaultdict(set)
    for source, key in zip(matrices.frame["source_matrix"], keys):
        by_source[source].add(key)
    split = [source for source, found in by_source.items() if len(found) > 1]
    assert not split, f"copies with different keys: {split[:5]}"


def test_matrix_records_are_shuffled(matrices):
    # Copies of a source are not all next to each other: a split by row order would leak.
    sources = matrices.frame["source_matrix"].tolist()
    adjacent = sum(a == b for a, b in zip(sources, sources[1:]))
    assert adjacent < 0.1 * len(sources), f"{adjacent} adjacent rows share a source"
    assert json.loads((TABLES / "symmetric_matrices.json").read_text())[0]["matrix_id"] \
        == matrices.row_ids[0]


# --------------------------------------------------------------------------------------------
# Elliptic curves


def test_hasse_bound_on_every_curve(curves):
    # Hasse (1933): |a_p| <= 2 sqrt(p), checked as a_p^2 <= 4p in integers.
    rows = _records(curves, "curve", "p", "points", "trace")
    for curve, p, points, trace in rows:
        assert trace == p + 1 - points, curve
        assert trace * trace <= 4 * p, curve


def test_point_counts_by_brute_force(curves):
    # Recount a sample of curves directly: every (x, y) in F_p^2 on the curve, plus infinity.
    rows = _records(curves, "curve", "p", "a", "b", "points", "two_torsion")
    for curve, p, a, b, points, two_torsion in rows[:: len(rows) // 40]:
        affine = sum(1 for x in range(p) for y in range(p)
                     if (y * y - (x**3 + a * x + b)) % p == 0)
        assert points == affine + 1, curve
        roots = sum(1 for x in range(p) if (x**3 + a * x + b) % p == 0)
        assert two_torsion == roots + 1, curve


def test_curve_table_structure(curves):
    # For p > 3, 4a^3 + 27b^2 = 0 has exactly p solutions (a, b) = (-3t^2, 2t^3) (common
    # practice), so each prime has p^2 - p nonsingular curves.
    counts = Counter(curves.exact("p"))
    assert sorted(counts) == [p for p in range(5, 54) if sympy.isprime(p)]
    assert all(count == p * p - p for p, count in counts.items()), counts
    rows = _records(curves, "curve", "p", "a", "b", "points", "two_torsion", "j_invariant",
                    "trace", "supersingular")
    for curve, p, a, b, points, two_torsion, j, trace, supersingular in rows:
        assert curve == f"p{p}_a{a}_b{b}"
        assert (4 * a**3 + 27 * b**2) % p != 0, curve
        # The 2-torsion is a subgroup: its order divides the group order (Lagrange).
        assert two_torsion in (1, 2, 4) and points % two_torsion == 0, curve
        # j = 1728 * 4a^3 / (4a^3 + 27b^2): j = 0 exactly when a = 0, j = 1728 when b = 0.
        assert (j == 0) == (a == 0) and (j == 1728 % p) == (b == 0), curve
        assert bool(supersingular) == (trace == 0), curve
        # j = 0 is supersingular for p = 2 mod 3 and j = 1728 for p = 3 mod 4 (Deuring, 1941).
        if (a == 0 and p % 3 == 2) or (b == 0 and p % 4 == 3):
            assert supersingular, curve


# --------------------------------------------------------------------------------------------
# The atlas as a downloaded database writes it


def test_downloaded_graphs_read_their_marks_as_a_mathematician_means():
    # Reference: networkx's own functions on the atlas graphs (graph_atlas_g), and two
    # theorems behind the intervals: a clique needs its own colours (clique number <= chi),
    # and greedy colouring needs at most largest degree + 1 colours (chi <= Delta + 1).
    import networkx as nx

    table = load_table(TABLES / "graphs_as_downloaded.csv")
    atlas = nx.graph_atlas_g()
    graph_of = {f"G{i:04d}": g for i, g in enumerate(atlas)}
    ids = table.row_ids.tolist()
    # every graph on 3 to 7 vertices is there: 4 + 11 + 34 + 156 + 1044 (OEIS A000088)
    assert len(ids) == 4 + 11 + 34 + 156 + 1044
    chromatic = table.column("chromatic_number")
    assert (chromatic.role, chromatic.dtype) == ("invariant", "integer")
    intervals = table.intervals("chromatic_number")
    assert chromatic.intervals == len(intervals.positions) > 300
    for row, low, high in zip(intervals.row_ids, intervals.low, intervals.high):
        g = graph_of[row]
        assert low == max(len(c) for c in nx.find_cliques(g))
        assert high == max(d for _, d in g.degree()) + 1
    girth = table.column("girth")
    forests = sum(nx.is_forest(graph_of[r]) for r in ids)
    assert girth.role == "invariant" and girth.markers == {"infty": forests}
    disconnected = sum(not nx.is_connected(graph_of[r]) for r in ids)
    assert table.column("diameter").markers == {"D.N.E.": disconnected}
    assert table.column("planar").role == table.column("bipartite").role == "flag"
    planar = table.frame["planar"].tolist()
    assert planar == [nx.check_planarity(graph_of[r])[0] for r in ids]
    assert table.column("family").distinct == 4
    assert any("spaces around the label" in w for w in table.warnings)


def test_downloaded_graphs_keep_their_rows_in_a_separator():
    # independence_number is empty in most rows: the default features leave it out (with a
    # warning) instead of dropping those rows.
    from analysis.separation import SeparatorStep

    table = load_table(TABLES / "graphs_as_downloaded.csv")
    assert table.column("independence_number").missing > 0.9 * table.n_rows
    result = SeparatorStep(target="bipartite", permutations=0, repeats=1).run(table)
    assert "independence_number" in result.left_out_columns
    assert any("independence_number" in w for w in result.warnings)


# The stories of sample_tables/README.md, one per kind of finding, checked as told there.


def test_story_congruence_on_elliptic_curves():
    # Lagrange and Cauchy: the points of order dividing 2 form a subgroup of order 1, 2 or 4,
    # and the group has a point of order 2 exactly when its order is even; so the number of
    # points and two_torsion have the same parity
    from analysis.relations import RelationsStep

    result = RelationsStep(bounds=False).run(load_table(TABLES / "elliptic_curves.csv"))
    found = {c.text: c for c in result.congruences}
    fact = found["points + two_torsion ≡ 0 (mod 2)"]
    assert fact.violation_count == 0 and fact.holds_on == result.n_rows


def test_story_the_graphs_breaking_brooks_bound():
    # Brooks' theorem (1941): a connected graph has chromatic number at most its largest
    # degree unless it is a complete graph or an odd cycle
    from analysis.derived import Statement
    from analysis.separation import SeparatorStep

    table = load_table(TABLES / "graphs_up_to_7.csv")
    statement = Statement.parse("chromatic_number - max_degree <= 0")
    frame = table.frame
    breaks = statement.breaks({name: table.exact(name) for name, _ in statement.terms})
    atlas = nx.graph_atlas_g()
    connected = frame["connected"].to_numpy(dtype=bool)
    broken = {frame["graph"][i] for i in np.flatnonzero(np.asarray(breaks) & connected)}
    expected = set()
    for index in range(1, len(atlas)):
        g = atlas[index]
        n = g.number_of_nodes()
        complete = g.number_of_edges() == n * (n - 1) // 2
        odd_cycle = n % 2 == 1 and n >= 3 and nx.is_connected(g) and \
            all(d == 2 for _, d in g.degree())
        if complete or odd_cycle:
            expected.add(f"G{index:04d}")
    assert broken == expected and len(broken) == 9
    result = SeparatorStep(target_statement=statement.to_json(), seed=0).run(table)
    assert result.rows_used == 996 == int(connected.sum())
    assert result.beats_chance
    assert result.importance[0].feature == "regular"   # both exceptions are regular graphs


def test_story_open_chromatic_numbers_predicted():
    # the downloaded copy hides some chromatic numbers behind their bounds; the exact values
    # are in graphs_up_to_7.csv (exhaustive search, checked above)
    from analysis.separation import SeparatorStep

    truth = dict(_records(load_table(TABLES / "graphs_up_to_7.csv"), "graph",
                          "chromatic_number"))
    result = SeparatorStep(target="chromatic_number", seed=0).run(
        load_table(TABLES / "graphs_as_downloaded.csv"))
    opened = result.open_predictions
    right = sum(p["prediction"] == truth[p["row"]] for p in opened)
    inside = sum(bool(p["inside"]) for p in opened)
    # the figures sample_tables/README.md gives
    assert result.reading.number and result.reading.chosen_by == "learning curve"
    assert (len(opened), inside, right) == (317, 312, 301)


def test_story_what_an_odd_class_number_rests_on():
    # genus theory (Gauss): the class number of an imaginary quadratic field is odd exactly
    # when its discriminant has one prime divisor
    from analysis.separation import SeparatorStep

    result = SeparatorStep(target="class_number_odd", seed=0).run(
        load_table(TABLES / "quadratic_fields.csv"))
    assert result.importance[0].feature == "prime_divisors"
    assert result.importance[0].mean > 0.9
    assert result.equation.text == "prime_divisors <= 1"
