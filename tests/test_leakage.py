"""The separator's check that its target follows exactly from the feature columns."""

import numpy as np

from analysis.leakage import target_follows


def test_hodge_numbers_determine_the_euler_number():
    # The Euler number of a Calabi-Yau threefold is 2 (h11 - h21) (Hodge theory; e.g. Candelas,
    # Dale, Lutken and Schimmrigk 1988, Nucl. Phys. B 298: complete intersection Calabi-Yau
    # manifolds). Hodge pairs drawn at random stand in for a list of such spaces.
    rng = np.random.default_rng(0)
    h11 = rng.integers(1, 20, 300).tolist()
    h21 = rng.integers(1, 100, 300).tolist()
    euler = [2 * (a - b) for a, b in zip(h11, h21)]
    noise = rng.integers(0, 9, 300).tolist()
    found = target_follows("h11", h11, {"h21": h21, "euler": euler, "other": noise})
    assert found is not None
    assert set(found.columns) == {"h21", "euler"}
    assert found.holds_on == 300


def test_edges_follow_from_the_degree_sum_in_the_graph_atlas():
    # Handshake lemma (Euler 1736): the degrees of a graph add up to twice its edges. Graphs
    # from networkx's atlas of all graphs on up to seven vertices.
    import networkx as nx

    graphs = nx.graph_atlas_g()[1:400]
    edges = [g.number_of_edges() for g in graphs]
    degree_sum = [sum(d for _, d in g.degree()) for g in graphs]
    triangles = [sum(nx.triangles(g).values()) // 3 for g in graphs]
    found = target_follows("edges", edges, {"degree_sum": degree_sum, "triangles": triangles})
    assert found is not None and found.columns == ("degree_sum",)


def test_independent_columns_give_no_finding():
    rng = np.random.default_rng(1)
    target = rng.integers(0, 50, 200).tolist()
    features = {f"c{i}": rng.integers(0, 50, 200).tolist() for i in range(5)}
    assert target_follows("t", target, features) is None


def test_too_few_rows_prove_nothing():
    # three rows always fit a relation among three columns (linear algebra, common practice)
    assert target_follows("e", [3, 6, 10], {"v": [3, 4, 5], "f": [2, 4, 7]}) is None
