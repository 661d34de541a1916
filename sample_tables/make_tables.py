"""Compute the demo tables of Invariant Scout from scratch.

Run from the repository root:

    python sample_tables/make_tables.py

Every table is computed here, with numpy, sympy, networkx and the standard library; nothing
is downloaded. The output is deterministic (fixed seeds, fixed iteration order) and is written
next to this script:

    lattice_polygons.csv      convex lattice polygons in small boxes
    graphs_up_to_7.csv        the graphs of networkx's graph atlas (1 to 7 vertices)
    quadratic_fields.csv      imaginary quadratic fields by fundamental discriminant
    symmetric_matrices.json   symmetric integer matrices, each with permuted copies
    elliptic_curves.csv       curves y^2 = x^3 + a x + b over small prime fields
"""

from __future__ import annotations

import csv
import itertools
import json
import math
from fractions import Fraction
from pathlib import Path

import networkx as nx
import numpy as np
import sympy

HERE = Path(__file__).resolve().parent

# One seed per table, so that changing one table does not reshuffle another.
POLYGON_SEED = 20240601
MATRIX_SEED = 20240602

POLYGON_COUNT = 3000
DILATION = 10**12
MAX_ABS_DISCRIMINANT = 10000
MATRIX_SOURCES = 400
CURVE_PRIMES = [p for p in range(5, 54) if sympy.isprime(p)]


def _write_csv(path: Path, header: list[str], rows: list[list[object]]) -> None:
    # "\n" line endings on every platform, so the bytes (and digests) are reproducible.
    with path.open("w", newline="", encoding="utf-8") as handle:
        writer = csv.writer(handle, lineterminator="\n")
        writer.writerow(header)
        writer.writerows(rows)


def _flag(value: bool) -> str:
    return "true" if value else "false"


def _json_array(value: object) -> str:
    # Compact JSON text for array cells in CSV files: "[[0,0],[2,0],[0,1]]".
    return json.dumps(value, separators=(",", ":"))


def _rational(value: Fraction) -> str:
    return str(value)  # "7/2", or "4" when the denominator is 1


# --------------------------------------------------------------------------------------------
# 1. Convex lattice polygons
# --------------------------------------------------------------------------------------------


def _cross(o: tuple[int, int], a: tuple[int, int], b: tuple[int, int]) -> int:
    return (a[0] - o[0]) * (b[1] - o[1]) - (a[1] - o[1]) * (b[0] - o[0])


def _convex_hull(points: set[tuple[int, int]]) -> list[tuple[int, int]]:
    """Vertices of the convex hull, counterclockwise, without collinear boundary points."""
    pts = sorted(points)
    if len(pts) < 3:
        return pts

    def half(seq: list[tuple[int, int]]) -> list[tuple[int, int]]:
        chain: list[tuple[int, int]] = []
        for p in seq:
            # Pop on "<= 0" so that points in the middle of an edge are not kept as vertices.
            while len(chain) >= 2 and _cross(chain[-2], chain[-1], p) <= 0:
                chain.pop()
            chain.append(p)
        return chain

    lower = half(pts)
    upper = half(list(reversed(pts)))
    return lower[:-1] + upper[:-1]


def _normal_form(vertices: list[tuple[int, int]]) -> tuple[tuple[int, int], ...]:
    """Translate so the bounding box starts at (0, 0); start at the least vertex, keep the turn.

    Two polygons that differ by a lattice translation get the same normal form.
    """
    min_x = min(x for x, _ in vertices)
    min_y = min(y for _, y in vertices)
    shifted = [(x - min_x, y - min_y) for x, y in vertices]
    start = shifted.index(min(shifted))
    return tuple(shifted[start:] + shifted[:start])


def _lattice_points(vertices: tuple[tuple[int, int], ...]) -> tuple[int, int]:
    """Count (interior, boundary) lattice points by testing every point of the bounding box."""
    n = len(vertices)
    edges = [(vertices[i], vertices[(i + 1) % n]) for i in range(n)]
    max_x = max(x for x, _ in vertices)
    max_y = max(y for _, y in vertices)
    interior = boundary = 0
    for x in range(max_x + 1):
        for y in range(max_y + 1):
            sides = [_cross(a, b, (x, y)) for a, b in edges]
            if min(sides) < 0:
                continue  # strictly outside some edge of a counterclockwise polygon
            if 0 in sides:
                boundary += 1
            else:
                interior += 1
    return interior, boundary


def _lattice_width(vertices: tuple[tuple[int, int], ...]) -> int:
    """Least width max - min of u*x + v*y over the vertices, over primitive directions (u, v).

    Every direction (u, v) with width at most W (the smaller of the two axis widths) satisfies
    |(u, v) . e| <= W for any two vertex differences e1, e2; solving that 2 x 2 system by
    Cramer's rule bounds |u| and |v|, so the search below is finite and exact.
    """
    xs = [x for x, _ in vertices]
    ys = [y for _, y in vertices]
    axis_width = min(max(xs) - min(xs), max(ys) - min(ys))
    differences = [(x - xs[0], y - ys[0]) for x, y in vertices[1:]]
    e1, e2 = max(
        itertools.combinations(differences, 2),
        key=lambda pair: abs(pair[0][0] * pair[1][1] - pair[0][1] * pair[1][0]),
    )
    det = abs(e1[0] * e2[1] - e1[1] * e2[0])
    bound_u = axis_width * (abs(e1[1]) + abs(e2[1])) // det
    bound_v = axis_width * (abs(e1[0]) + abs(e2[0])) // det
    best = axis_width
    for u in range(0, bound_u + 1):
        for v in range(-bound_v, bound_v + 1):
            if (u, v) <= (0, 0) or math.gcd(u, v) != 1:
                continue  # one of each pair +-(u, v); (0, 0) is no direction
            values = [u * x + v * y for x, y in vertices]
            best = min(best, max(values) - min(values))
    return best


def _centrally_symmetric(vertices: tuple[tuple[int, int], ...]) -> bool:
    # A convex polygon is symmetric about a point exactly when it has an even number of
    # vertices and opposite vertices (i and i + n/2 in cyclic order) all have the same sum.
    n = len(vertices)
    if n % 2:
        return False
    half = n // 2
    sums = {(vertices[i][0] + vertices[i + half][0], vertices[i][1] + vertices[i + half][1])
            for i in range(half)}
    return len(sums) == 1


def make_lattice_polygons() -> tuple[list[str], list[list[object]]]:
    """Convex hulls of random integer point sets in boxes of side 1 to 8, up to translation."""
    rng = np.random.default_rng(POLYGON_SEED)
    seen: dict[tuple[tuple[int, int], ...], None] = {}
    while len(seen) < POLYGON_COUNT:
        side = int(rng.integers(1, 9))
        count = int(rng.integers(3, 10))
        coords = rng.integers(0, side + 1, size=(count, 2))
        hull = _convex_hull({(int(x), int(y)) for x, y in coords})
        if len(hull) < 3:
            continue  # all points on one line: no polygon
        seen.setdefault(_normal_form(hull), None)

    header = [
        "polygon", "vertex_list", "vertices", "edges", "area", "twice_area",
        "interior_points", "boundary_points", "lattice_width", "max_edge_length",
        "primitive_edges", "is_reflexive", "centrally_symmetric", "points_in_dilate_1e12",
    ]
    rows = []
    for number, vertices in enumerate(seen, start=1):
        n = len(vertices)
        twice_area = sum(
            vertices[i][0] * vertices[(i + 1) % n][1] - vertices[(i + 1) % n][0] * vertices[i][1]
            for i in range(n)
        )
        area = Fraction(twice_area, 2)
        # Lattice length of an edge: the number of lattice steps along it.
        edge_lengths = [
            math.gcd(vertices[(i + 1) % n][0] - vertices[i][0],
                     vertices[(i + 1) % n][1] - vertices[i][1])
            for i in range(n)
        ]
        interior, boundary = _lattice_points(vertices)
        # Ehrhart polynomial of a lattice polygon: area t^2 + (boundary / 2) t + 1; here the
        # boundary count is the sum of the edge lattice lengths, independent of the enumeration.
        dilate = area * DILATION**2 + Fraction(sum(edge_lengths), 2) * DILATION + 1
        assert dilate.denominator == 1
        rows.append([
            f"P{number:04d}",
            _json_array([list(v) for v in vertices]),
            n,
            n,
            _rational(area),
            twice_area,
            interior,
            boundary,
            _lattice_width(vertices),
            max(edge_lengths),
            sum(1 for length in edge_lengths if length == 1),
            _flag(interior == 1),
            _flag(_centrally_symmetric(vertices)),
            dilate.numerator,
        ])
    return header, rows


# --------------------------------------------------------------------------------------------
# 2. Graphs on up to 7 vertices
# --------------------------------------------------------------------------------------------


def _chromatic_number(graph: nx.Graph) -> int:
    """Least k with a proper k-colouring, by backtracking over the vertices in order."""
    nodes = list(graph.nodes)
    if not nodes:
        return 0
    neighbours = {v: set(graph.neighbors(v)) for v in nodes}

    def colourable(k: int) -> bool:
        colour: dict[int, int] = {}

        def place(i: int) -> bool:
            if i == len(nodes):
                return True
            v = nodes[i]
            used = {colour[w] for w in neighbours[v] if w in colour}
            # Never open more than one new colour at a time: colours are interchangeable.
            for c in range(min(k, max(colour.values(), default=-1) + 2)):
                if c not in used:
                    colour[v] = c
                    if place(i + 1):
                        return True
                    del colour[v]
            return False

        return place(0)

    k = 1
    while not colourable(k):
        k += 1
    return k


def make_graphs() -> tuple[list[str], list[list[object]]]:
    """Every graph of networkx's atlas except the graph with no vertices (index 0)."""
    header = [
        "graph", "vertices", "edges", "degree_sum", "triangles", "components", "diameter",
        "min_degree", "max_degree", "bipartite", "planar", "regular", "tree", "connected",
        "spectral_radius", "cycle_rank", "chromatic_number", "adjacency",
    ]
    rows = []
    for index, graph in enumerate(nx.graph_atlas_g()):
        n = graph.number_of_nodes()
        if n == 0:
            continue  # no diameter, degrees, spectrum or adjacency entries to speak of
        m = graph.number_of_edges()
        degrees = [d for _, d in graph.degree()]
        components = nx.number_connected_components(graph)
        connected = components == 1
        nodes = sorted(graph.nodes)
        adjacency = nx.to_numpy_array(graph, nodelist=nodes, dtype=int)
        # Largest absolute eigenvalue; "+ 0.0" turns a possible -0.0 into 0.0.
        radius = float(np.max(np.abs(np.linalg.eigvalsh(adjacency)))) + 0.0
        rows.append([
            f"G{index:04d}",
            n,
            m,
            sum(degrees),
            sum(nx.triangles(graph).values()) // 3,
            components,
            nx.diameter(graph) if connected else "",
            min(degrees),
            max(degrees),
            _flag(nx.is_bipartite(graph)),
            _flag(nx.check_planarity(graph)[0]),
            _flag(nx.is_regular(graph)),
            _flag(nx.is_tree(graph)),
            _flag(connected),
            f"{radius:.6f}",
            m - n + components,
            _chromatic_number(graph),
            _json_array(adjacency.tolist()),
        ])
    return header, rows


# --------------------------------------------------------------------------------------------
# 3. Imaginary quadratic fields
# --------------------------------------------------------------------------------------------


def _squarefree(n: int) -> bool:
    return all(exponent == 1 for exponent in sympy.factorint(n).values())


def _is_fundamental(d: int) -> bool:
    """Fundamental discriminant test for d < 0: d = 1 mod 4 squarefree, or 4m, m = 2, 3 mod 4
    squarefree."""
    if d % 4 == 1:
        return _squarefree(-d)
    if d % 4 == 0:
        return (d // 4) % 4 in (2, 3) and _squarefree(-d // 4)
    return False


def _class_number(d: int) -> int:
    """Number of reduced primitive forms (a, b, c) with b^2 - 4ac = d < 0.

    Reduced: |b| <= a <= c, and b >= 0 when |b| = a or a = c. Then 3 a^2 <= |d|.
    """
    count = 0
    a = 1
    while 3 * a * a <= -d:
        for b in range(-a + 1, a + 1):  # b = -a is never reduced
            if (b * b - d) % (4 * a):
                continue
            c = (b * b - d) // (4 * a)
            if c < a or (c == a and b < 0):
                continue
            if math.gcd(math.gcd(a, b), c) == 1:
                count += 1
        a += 1
    return count


def make_quadratic_fields() -> tuple[list[str], list[list[object]]]:
    """Imaginary quadratic fields with |discriminant| up to MAX_ABS_DISCRIMINANT."""
    header = [
        "field", "discriminant", "abs_discriminant", "class_number", "prime_divisors",
        "units", "disc_mod_8", "class_number_odd", "class_number_one",
    ]
    rows = []
    for n in range(3, MAX_ABS_DISCRIMINANT + 1):
        d = -n
        if not _is_fundamental(d):
            continue
        radicand = d if d % 4 == 1 else d // 4
        h = _class_number(d)
        rows.append([
            f"Q(sqrt({radicand}))",
            d,
            n,
            h,
            len(sympy.factorint(n)),
            {-3: 6, -4: 4}.get(d, 2),
            d % 8,
            _flag(h % 2 == 1),
            _flag(h == 1),
        ])
    return header, rows


# --------------------------------------------------------------------------------------------
# 4. Symmetric integer matrices with permuted copies
# --------------------------------------------------------------------------------------------


def _sign_changes(coefficients: list[int]) -> int:
    signs = [c > 0 for c in coefficients if c != 0]
    return sum(1 for s, t in zip(signs, signs[1:]) if s != t)


def _eigenvalue_signs(matrix: sympy.Matrix) -> tuple[int, int]:
    """(positive, negative) eigenvalue counts of a real symmetric integer matrix, exactly.

    All roots of the characteristic polynomial are real, so Descartes' rule of signs counts
    the positive roots exactly; the negative roots of p(x) are the positive roots of p(-x).
    """
    x = sympy.Symbol("x")
    poly = matrix.charpoly(x)
    coefficients = [int(c) for c in poly.all_coeffs()]
    degree = len(coefficients) - 1
    mirrored = [c * (-1) ** (degree - i) for i, c in enumerate(coefficients)]
    return _sign_changes(coefficients), _sign_changes(mirrored)


def _random_symmetric(rng: np.random.Generator, size: int) -> np.ndarray:
    """A symmetric integer matrix of one of four kinds, so every definiteness class occurs."""
    kind = rng.integers(0, 4)
    if kind == 0:  # entries -3..3: almost always indefinite
        upper = np.triu(rng.integers(-3, 4, size=(size, size)))
        return upper + np.triu(upper, 1).T
    # A Gram matrix B^T B is positive semidefinite; it is definite when B has full column rank,
    # which fails more often when B has fewer rows than columns.
    rows = int(rng.integers(size - 1, size + 2))
    b = rng.integers(-2, 3, size=(rows, size))
    gram = b.T @ b
    if kind == 1:
        return gram
    if kind == 2:
        return -gram
    # Shift by a multiple of the identity: pushes eigenvalues of a small random matrix up.
    upper = np.triu(rng.integers(-2, 3, size=(size, size)))
    return upper + np.triu(upper, 1).T + int(rng.integers(1, 5)) * np.eye(size, dtype=int)


def _definiteness(size: int, positive: int, negative: int) -> str:
    if positive == size:
        return "positive definite"
    if negative == size:
        return "negative definite"
    if negative == 0:
        return "positive semidefinite"
    if positive == 0:
        return "negative semidefinite"
    return "indefinite"


def make_symmetric_matrices() -> list[dict[str, object]]:
    """MATRIX_SOURCES random matrices, each written 2 to 4 times as P M P^T, in shuffled order."""
    rng = np.random.default_rng(MATRIX_SEED)
    records = []
    classes: set[tuple[int, ...]] = set()
    source = 0
    while source < MATRIX_SOURCES:
        size = int(rng.choice([3, 4]))
        matrix = _random_symmetric(rng, size)
        permutations = list(itertools.permutations(range(size)))
        # The least flattening over all P M P^T names the matrix up to simultaneous permutation
        # of rows and columns; a repeat of an earlier source would join two groups that are one
        # object, and the zero matrix would be both semidefinite kinds at once.
        klass = min(tuple(matrix[np.ix_(q, q)].ravel().tolist()) for q in permutations)
        if klass in classes or not matrix.any():
            continue
        classes.add(klass)
        source += 1
        exact = sympy.Matrix(matrix.tolist())
        positive, negative = _eigenvalue_signs(exact)
        facts = {
            "source_matrix": f"S{source:03d}",
            "size": size,
            "trace": int(exact.trace()),
            "determinant": int(exact.det(method="bareiss")),
            "rank": int(exact.rank()),
            "positive_eigenvalues": positive,
            "negative_eigenvalues": negative,
            "signature": positive - negative,
            "definiteness": _definiteness(size, positive, negative),
            "is_positive_definite": positive == size,
        }
        copies = int(rng.integers(2, 5))
        # The first copy is the matrix as drawn; the others are P M P^T for distinct
        # non-identity permutations (the copy can still equal M when M has symmetries).
        chosen = rng.choice(np.arange(1, len(permutations)), size=copies - 1, replace=False)
        for q in [permutations[0]] + [permutations[i] for i in chosen]:
            records.append({"matrix": matrix[np.ix_(q, q)].tolist(), **facts})
    order = rng.permutation(len(records))
    shuffled = [records[i] for i in order]
    return [{"matrix_id": f"M{i:04d}", **record} for i, record in enumerate(shuffled, start=1)]


# --------------------------------------------------------------------------------------------
# 5. Elliptic curves over small prime fields
# --------------------------------------------------------------------------------------------


def make_elliptic_curves() -> tuple[list[str], list[list[object]]]:
    """All nonsingular y^2 = x^3 + a x + b over F_p, 0 <= a, b < p, for primes 5 <= p <= 53."""
    header = [
        "curve", "p", "a", "b", "points", "trace", "two_torsion", "j_invariant", "supersingular",
    ]
    rows = []
    for p in CURVE_PRIMES:
        # Legendre symbol of every residue, from the list of squares.
        legendre = [-1] * p
        legendre[0] = 0
        for y in range(1, p):
            legendre[y * y % p] = 1
        cubes = [x * x * x % p for x in range(p)]
        for a, b in itertools.product(range(p), repeat=2):
            discriminant = (4 * a**3 + 27 * b**2) % p
            if discriminant == 0:
                continue
            values = [(cubes[x] + a * x + b) % p for x in range(p)]
            # Each x gives 1 + (f(x) / p) affine points; add the point at infinity.
            points = p + 1 + sum(legendre[v] for v in values)
            trace = p + 1 - points
            roots = sum(1 for v in values if v == 0)
            j = 1728 * 4 * a**3 * pow(discriminant, -1, p) % p
            rows.append([
                f"p{p}_a{a}_b{b}", p, a, b, points, trace, roots + 1, j, _flag(trace % p == 0),
            ])
    return header, rows


# --------------------------------------------------------------------------------------------
# 6. The graph atlas written as a downloaded database writes it
# --------------------------------------------------------------------------------------------


def _family(graph: nx.Graph) -> str:
    n, m = graph.number_of_nodes(), graph.number_of_edges()
    if nx.is_tree(graph):
        return "tree"
    if nx.is_connected(graph) and all(d == 2 for _, d in graph.degree()):
        return "cycle"
    if m == n * (n - 1) // 2:
        return "complete"
    return "other"


def make_graphs_as_downloaded() -> tuple[list[str], list[list[object]]]:
    """The atlas graphs on 3 to 7 vertices, with the habits of a table downloaded from a public
    database (see README.md in this folder):

    * chromatic_number is written as an interval [clique number, largest degree + 1] for every
      third graph on six or more vertices, as if only those bounds were known (both are
      theorems: a clique needs its own colours, and greedy colouring needs at most
      largest degree + 1);
    * girth is the word ``infty`` for forests (no cycle) and diameter the word ``D.N.E.`` for
      disconnected graphs: marker words where the invariant does not apply;
    * planar is Y/N and bipartite yes/no;
    * family is a category some of whose labels carry stray spaces;
    * independence_number is recorded only for bipartite graphs with a cycle, so most cells
      are empty;
    * adjacency matrices of different sizes.
    """
    header = ["graph", "vertices", "edges", "max_degree", "chromatic_number", "girth",
              "diameter", "planar", "bipartite", "family", "independence_number", "adjacency"]
    rows = []
    for index, graph in enumerate(nx.graph_atlas_g()):
        n = graph.number_of_nodes()
        if n < 3:
            continue
        degrees = [d for _, d in graph.degree()]
        chromatic = _chromatic_number(graph)
        if n >= 6 and index % 3 == 0:
            clique = max(len(c) for c in nx.find_cliques(graph))
            chromatic_cell = f"[{clique},{max(degrees) + 1}]"
        else:
            chromatic_cell = chromatic
        forest = nx.is_forest(graph)
        connected = nx.is_connected(graph)
        bipartite = nx.is_bipartite(graph)
        family = _family(graph)
        spaced = {0: f" {family}", 1: f"{family} "}.get(index % 5, family)
        independence = ""
        if bipartite and not forest:
            independence = max(len(c) for c in nx.find_cliques(nx.complement(graph)))
        nodes = sorted(graph.nodes)
        rows.append([
            f"G{index:04d}", n, graph.number_of_edges(), max(degrees), chromatic_cell,
            "infty" if forest else nx.girth(graph),
            nx.diameter(graph) if connected else "D.N.E.",
            "Y" if nx.check_planarity(graph)[0] else "N",
            "yes" if bipartite else "no",
            spaced, independence,
            _json_array(nx.to_numpy_array(graph, nodelist=nodes, dtype=int).tolist()),
        ])
    return header, rows


def main() -> None:
    """Compute every table and write it next to this script."""
    header, rows = make_lattice_polygons()
    _write_csv(HERE / "lattice_polygons.csv", header, rows)
    header, rows = make_graphs()
    _write_csv(HERE / "graphs_up_to_7.csv", header, rows)
    header, rows = make_quadratic_fields()
    _write_csv(HERE / "quadratic_fields.csv", header, rows)
    records = make_symmetric_matrices()
    with (HERE / "symmetric_matrices.json").open("w", encoding="utf-8", newline="\n") as handle:
        # One record per line: readable, diffable, and still a single JSON array.
        handle.write("[\n")
        handle.write(",\n".join(json.dumps(r, separators=(",", ":")) for r in records))
        handle.write("\n]\n")
    header, rows = make_elliptic_curves()
    _write_csv(HERE / "elliptic_curves.csv", header, rows)
    header, rows = make_graphs_as_downloaded()
    _write_csv(HERE / "graphs_as_downloaded.csv", header, rows)
    for name in ("lattice_polygons.csv", "graphs_up_to_7.csv", "quadratic_fields.csv",
                 "symmetric_matrices.json", "elliptic_curves.csv", "graphs_as_downloaded.csv"):
        path = HERE / name
        print(f"{name}: {path.stat().st_size} bytes")


if __name__ == "__main__":
    main()
