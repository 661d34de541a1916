"""Tests for analysis/congruences.py against published parity and divisibility facts."""

from __future__ import annotations

import json
import math
import random

import networkx as nx
import numpy as np
import pytest

from analysis.congruences import MODULI, Congruence, find_congruences, settle_congruences
from analysis.errors import StepError


def _texts(found):
    return [c.text for c in found]


def _convex_hull(points):
    points = sorted(set(points))
    if len(points) < 3:
        return points

    def cross(o, a, b):
        return (a[0] - o[0]) * (b[1] - o[1]) - (a[1] - o[1]) * (b[0] - o[0])

    lower, upper = [], []
    for p in points:
        while len(lower) >= 2 and cross(lower[-2], lower[-1], p) <= 0:
            lower.pop()
        lower.append(p)
    for p in reversed(points):
        while len(upper) >= 2 and cross(upper[-2], upper[-1], p) <= 0:
            upper.pop()
        upper.append(p)
    return lower[:-1] + upper[:-1]


def _inside_or_on(hull, point):
    n = len(hull)
    for i in range(n):
        (ax, ay), (bx, by) = hull[i], hull[(i + 1) % n]
        if (bx - ax) * (point[1] - ay) - (by - ay) * (point[0] - ax) < 0:
            return False
    return True


def _lattice_polygons(count, seed):
    """Convex lattice polygons: twice the area, boundary and interior points counted directly."""
    rng = random.Random(seed)
    rows = {"twice_area": [], "boundary": [], "interior": []}
    while len(rows["boundary"]) < count:
        hull = _convex_hull([(rng.randrange(12), rng.randrange(12)) for _ in range(6)])
        if len(hull) < 3:
            continue
        n = len(hull)
        edges = [(hull[i], hull[(i + 1) % n]) for i in range(n)]
        twice_area = abs(sum(p[0] * q[1] - q[0] * p[1] for p, q in edges))  # shoelace formula
        boundary = sum(math.gcd(q[0] - p[0], q[1] - p[1]) for p, q in edges)
        covered = sum(_inside_or_on(hull, (x, y)) for x in range(12) for y in range(12))
        rows["twice_area"].append(twice_area)
        rows["boundary"].append(boundary)
        rows["interior"].append(covered - boundary)
    return rows


def test_pick_theorem_parity_of_twice_the_area():
    # Pick's theorem (Pick 1899): A = I + B/2 - 1, so 2A = 2I + B - 2 and 2A ≡ B (mod 2).
    rows = _lattice_polygons(300, seed=3)
    assert all(2 * i + b - 2 == a for a, b, i in
               zip(rows["twice_area"], rows["boundary"], rows["interior"]))
    found = find_congruences({"twice_area": rows["twice_area"], "boundary": rows["boundary"]},
                             range(300))
    assert "twice_area + boundary ≡ 0 (mod 2)" in _texts(found)
    pick = next(c for c in found if c.text == "twice_area + boundary ≡ 0 (mod 2)")
    assert pick.holds_on == 300 and pick.violations == () and pick.violation_count == 0


def _cubic_graphs():
    graphs = [g for g in nx.graph_atlas_g() if g.number_of_nodes()
              and all(d == 3 for _, d in g.degree())]
    graphs += [nx.random_regular_graph(3, n, seed=n) for n in range(8, 60, 2)]
    return graphs


def test_cubic_graphs_have_an_even_number_of_vertices():
    # Handshake lemma: 3 * vertices = 2 * edges, so a cubic graph has an even number of
    # vertices and its edge count is a multiple of 3 (networkx graph atlas and generators).
    graphs = _cubic_graphs()
    columns = {"vertices": [g.number_of_nodes() for g in graphs],
               "edges": [g.number_of_edges() for g in graphs]}
    found = _texts(find_congruences(columns, range(len(graphs))))
    assert "vertices ≡ 0 (mod 2)" in found
    assert "edges ≡ 0 (mod 3)" in found
    # The exact relation 2*edges - 3*vertices = 0 implies both: passed in, they are left out.
    with_relation = find_congruences(columns, range(len(graphs)),
                                     relations=[({"edges": 2, "vertices": -3}, 0)])
    assert _texts(with_relation) == []


def test_handshake_lemma_on_the_graph_atlas():
    # Handshake lemma: the degree sum is twice the edge count (networkx graph atlas).
    graphs = nx.graph_atlas_g()[1:]
    degree_sum = [sum(d for _, d in g.degree()) for g in graphs]
    found = find_congruences({"degree_sum": degree_sum}, range(len(graphs)))
    assert _texts(found) == ["degree_sum ≡ 0 (mod 2)"]


def _class_number(discriminant):
    """The number of reduced primitive positive definite forms of a negative discriminant."""
    count, a = 0, 1
    while 3 * a * a <= -discriminant:
        for b in range(-a + 1, a + 1):
            if (b * b - discriminant) % (4 * a):
                continue
            c = (b * b - discriminant) // (4 * a)
            if c < a or (c == a and b < 0) or math.gcd(a, b, c) != 1:
                continue
            count += 1
        a += 1
    return count


def test_class_numbers_of_prime_discriminants_are_odd():
    import sympy

    # From memory: h(-23) = 3, h(-47) = 5, h(-163) = 1, h(-3) = 1, h(-7) = 1.
    assert [_class_number(-p) for p in (3, 7, 23, 47, 163)] == [1, 1, 3, 5, 1]
    primes = [p for p in sympy.primerange(3, 4000) if p % 4 == 3]
    classes = [_class_number(-p) for p in primes]
    # Genus theory: the 2-rank of the class group is (number of primes dividing -p) - 1 = 0.
    found = find_congruences({"h": classes}, primes)
    facts = [c for c in found if [name for name, _ in c.terms] == ["h"]]
    assert [c.text for c in facts] == ["h ≡ 1 (mod 2)"]
    assert facts[0].holds_on == len(primes)


def test_mod_12_is_reported_over_its_divisors():
    # Common practice: x ≡ 5 (mod 12) implies x ≡ 5 mod 6, 4, 3 and 2.
    values = [12 * k + 5 for k in range(50)]
    found = find_congruences({"x": values}, range(50))
    assert _texts(found) == ["x ≡ 5 (mod 12)"]
    assert found[0].implied_moduli == (2, 3, 4, 6)


def test_big_integers_keep_exact_residues():
    # Exact arithmetic (checked against Python's own big integers): 2**100 + 6k ≡ 2**100 mod 6.
    values = [2 ** 100 + 6 * k for k in range(40)]
    found = find_congruences({"big": values}, range(40))
    assert _texts(found) == [f"big ≡ {2 ** 100 % 6} (mod 6)"]


def test_near_congruence_lists_its_planted_breakers():
    # Common practice: a planted handful of odd values among even ones.
    rng = np.random.default_rng(5)
    values = 2 * rng.integers(0, 1000, size=1000)
    planted = [17, 402, 901]
    values[planted] += 1
    ids = [f"obj{i}" for i in range(1000)]
    found = find_congruences({"x": values}, ids)
    assert len(found) == 1 and found[0].modulus == 2 and found[0].residue == 0
    assert found[0].violations == tuple(f"obj{i}" for i in planted)
    assert found[0].violation_count == 3
    too_many = values.copy()
    too_many[[1, 2, 3, 4, 5]] += 1
    assert find_congruences({"x": too_many}, ids) == []


def test_listed_breakers_are_capped_but_counted():
    # Common practice: the listing is capped, the count is not.
    values = np.array([2 * k + (k in (3, 8, 9)) for k in range(1000)], dtype=np.uint64)
    found = find_congruences({"x": values}, range(1000), max_listed_rows=2)
    assert found[0].violations == (3, 8) and found[0].violation_count == 3


def test_missing_values_count_only_where_present():
    # Common practice: missing cells are left out, not counted for or against.
    values = [None if i % 5 == 0 else 3 * i for i in range(100)]
    found = find_congruences({"x": values}, range(100))
    assert _texts(found) == ["x ≡ 0 (mod 3)"] and found[0].holds_on == 80


def test_distinct_value_rule_leaves_out_constant_and_two_valued_columns():
    # Common practice: two values always agree modulo a divisor of their difference.
    columns = {"constant": [7] * 30, "two": [1, 13] * 15}
    assert find_congruences(columns, range(30)) == []


def test_pairs_implied_by_single_facts_are_left_out():
    # Common practice: x even and y even imply x + y even.
    rng = random.Random(4)
    x = [2 * rng.randrange(1000) for _ in range(40)]
    y = [2 * rng.randrange(1000) + 1 for _ in range(40)]
    found = _texts(find_congruences({"x": x, "y": y}, range(40)))
    assert "x ≡ 0 (mod 2)" in found and "y ≡ 1 (mod 2)" in found
    assert not any("x" in t and "y" in t for t in found), found


def test_euler_number_relation_excludes_what_follows_from_it():
    # Euler number of a Calabi-Yau threefold: euler = 2*(h11 - h21), so euler is even
    # (relation from the Hodge diamond); with the relation passed nothing is left.
    rng = np.random.default_rng(2)
    h11, h21 = rng.integers(1, 500, size=200), rng.integers(1, 500, size=200)
    columns = {"euler": 2 * h11 - 2 * h21, "h11": h11, "h21": h21}
    assert "euler ≡ 0 (mod 2)" in _texts(find_congruences(columns, range(200)))
    relation = ({"euler": 1, "h11": -2, "h21": 2}, 0)
    assert find_congruences(columns, range(200), relations=[relation]) == []


def test_random_integers_give_no_congruence():
    # Common practice: 500 random values fall in one class mod 2 with chance 2**-499.
    rng = np.random.default_rng(11)
    columns = {f"c{i}": rng.integers(-10 ** 9, 10 ** 9, size=500) for i in range(6)}
    assert find_congruences(columns, range(500)) == []


def test_json_shape_and_ranking():
    # Common practice: the project's JSON writes exact coefficients as strings.
    rows = _lattice_polygons(100, seed=8)
    rows["even"] = [2 * v for v in rows["interior"]]
    found = find_congruences(rows, range(100))
    assert found[0].text.startswith("even ≡ 0")
    data = json.loads(json.dumps([c.to_json() for c in found]))
    pick = next(d for d in data if d["text"] == "twice_area + boundary ≡ 0 (mod 2)")
    assert pick["terms"] == [{"column": "twice_area", "coef": "1"},
                             {"column": "boundary", "coef": "1"}]
    assert (pick["modulus"], pick["residue"], pick["violations"], pick["violation_count"]) \
        == (2, 0, [], 0)
    assert isinstance(found[0], Congruence)


def test_many_rows_and_columns():
    # Common practice: a planted mod 4 fact survives among random columns at scale.
    rng = np.random.default_rng(0)
    columns = {f"c{i}": rng.integers(0, 10 ** 12, size=200_000) for i in range(11)}
    columns["four"] = 4 * rng.integers(0, 10 ** 6, size=200_000) + 3
    assert _texts(find_congruences(columns, range(200_000))) == ["four ≡ 3 (mod 4)"]


@pytest.mark.parametrize("settings, message", [
    ({"moduli": [1, 2]}, "moduli"),
    ({"moduli": []}, "moduli"),
    ({"max_coefficient": 0}, "max_coefficient"),
    ({"max_breakers": -1}, "max_breakers"),
    ({"max_breaker_share": 0.7}, "max_breaker_share"),
], ids=["modulus-one", "no-moduli", "zero-coefficient", "negative-breakers", "share"])
def test_bad_settings_raise(settings, message):
    with pytest.raises(StepError, match=message):
        find_congruences({"x": [1, 2, 3]}, range(3), **settings)


def test_bad_values_raise_with_column_and_row():
    with pytest.raises(StepError, match=r"column 'x', row 2: expected an integer, got 1.5"):
        find_congruences({"x": [1, 1.5, 3]}, range(3))
    with pytest.raises(StepError, match=r"column 'x': 2 values for 3 row ids"):
        find_congruences({"x": [1, 2]}, range(3))


def test_each_modulus_alone_then_settled_equals_one_search():
    # n^3 - n = (n - 1) n (n + 1) is divisible by 6 and n^2 - n by 2 (common practice); an odd
    # square is 1 mod 8 (Hardy and Wright, from memory). Searched one modulus at a time and
    # settled, the facts are those of one search over all moduli, implied moduli included.
    rng = np.random.default_rng(8)
    n = rng.integers(-60, 61, 1500)
    odd = 2 * rng.integers(0, 40, 1500) + 1
    cube = n ** 3
    cube[[77, 1400]] += 1
    columns = {"n": n, "square": n ** 2, "cube": cube, "odd_square": odd ** 2}
    whole = find_congruences(columns, range(1500))
    apart = [c for m in MODULI for c in find_congruences(columns, range(1500), moduli=[m])]
    assert settle_congruences(apart) == whole
    texts = {c.text: c for c in whole}
    assert texts["odd_square ≡ 1 (mod 8)"].implied_moduli == (2, 4)
    assert texts["n - cube ≡ 0 (mod 6)"].violations == (77, 1400)


def test_settling_rejects_bad_settings():
    with pytest.raises(StepError, match="moduli: expected whole numbers from 2"):
        settle_congruences([], moduli=[1])


def test_congruences_of_one_sum_are_joined_by_the_chinese_remainder_theorem():
    # for every prime p >= 5, 24 divides p^2 - 1 (an exercise of elementary number theory,
    # common practice): the search finds it mod 8 and mod 3 (or 12) and says it once, mod 24
    from sympy import primerange

    primes = list(primerange(5, 400))
    found = find_congruences({"p2_minus_1": [p * p - 1 for p in primes]}, primes)
    assert [c.text for c in found] == ["p2_minus_1 ≡ 0 (mod 24)"]
    assert {8, 12} <= set(found[0].implied_moduli) and found[0].holds_on == len(primes)
    # a fact some row breaks is not joined with another: its breakers are its own
    values = [p * p - 1 for p in primes] + [10]
    found = find_congruences({"x": values}, primes + [1], max_breakers=1, max_breaker_share=0.1)
    assert "x ≡ 0 (mod 24)" not in [c.text for c in found]
