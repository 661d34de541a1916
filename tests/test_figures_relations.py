"""The relations figure: a two-invariant bound or relation drawn over the table, with the
objects on the line and the objects breaking it marked (analysis.figures.relations)."""

from __future__ import annotations

from fractions import Fraction

import networkx as nx
import numpy as np
import pytest

from analysis.figures import figures_for
from analysis.figures.relations import statement_figure
from analysis.relations import RelationsStep
from analysis.table import read_table


def _trace(figure, name):
    found = [t for t in figure.data if t.name == name]
    return found[0] if found else None


def _objects(trace) -> int:
    # customdata holds the hover text first and the number of objects at the pair second
    return int(sum(int(row[1]) for row in trace.customdata))


@pytest.fixture(scope="module")
def connected_graphs():
    # networkx's graph atlas: every graph on up to 7 vertices; keep the connected ones
    graphs = [g for g in nx.graph_atlas_g()[1:] if nx.is_connected(g)]
    text = "graph,vertices,edges,is_tree\n" + "\n".join(
        f"G{i},{g.number_of_nodes()},{g.number_of_edges()},{int(nx.is_tree(g))}"
        for i, g in enumerate(graphs)) + "\n"
    return read_table(text.encode(), "connected.csv", id_column="graph"), graphs


def test_trees_attain_the_edge_bound_of_connected_graphs(connected_graphs):
    # a connected graph on n vertices has at least n - 1 edges, with equality exactly for
    # trees (a standard theorem of graph theory)
    table, graphs = connected_graphs
    result = RelationsStep(columns=["vertices", "edges"]).run(table)
    lower = [b for b in result.bounds
             if dict(b.terms) in ({"edges": 1, "vertices": -1}, {"edges": -1, "vertices": 1})]
    assert lower, [b.text for b in result.bounds]
    bound = lower[0]
    figure = statement_figure(table, bound.terms, bound.relation, bound.constant,
                              text=bound.text)
    trees = sum(nx.is_tree(g) for g in graphs)
    assert _objects(_trace(figure, "objects attaining it")) == trees == bound.attained_count
    off = _trace(figure, "objects off the line")
    assert _objects(off) == len(graphs) - trees
    # every drawn pair off the line obeys the bound strictly: edges > vertices - 1
    assert np.all(np.asarray(off.y) > np.asarray(off.x) - 1)
    assert _trace(figure, "objects breaking it") is None
    titles = [title for title, _ in figures_for(result, table)]
    assert any("vertices" in t and "edges" in t for t in titles), titles


def test_points_of_value_pairs_are_not_taken_for_objects():
    # with no id column the ids are row numbers; a count of objects at a pair must not be
    # read as one of them by the page's point selection
    from app.figure_view import row_traces

    text = "a,b\n" + "\n".join(f"{i % 4},{i % 4 + 2 * (i % 3)}" for i in range(60)) + "\n"
    table = read_table(text.encode(), "pairs.csv")
    figure = statement_figure(table, (("a", Fraction(1)), ("b", Fraction(-1))), "<=",
                              Fraction(0), text="a - b <= 0")
    assert row_traces(figure, table) == set()


def test_rows_breaking_a_relation_are_marked_with_their_ids():
    # y = 2x + 1 on every row but three planted ones
    x = np.arange(1, 201)
    y = 2 * x + 1
    planted = {17: 5, 90: 4, 150: -3}
    for row, shift in planted.items():
        y[row] += shift
    text = "name,x,y\n" + "\n".join(f"obj{i},{a},{b}" for i, (a, b) in
                                     enumerate(zip(x, y))) + "\n"
    table = read_table(text.encode(), "planted.csv", id_column="name")
    result = RelationsStep(robust=True, bounds=False, max_breakers=5).run(table)
    broken = [r for r in result.relations if r.violations and len(r.terms) == 2]
    assert broken, [r.text for r in result.relations]
    figures = figures_for(result, table)
    assert figures and figures[0][0].startswith("Relation")
    figure = figures[0][1]
    marked = _trace(figure, "objects breaking it")
    assert _objects(marked) == 3
    hover = " ".join(str(row[0]) for row in marked.customdata)
    assert all(f"obj{row}" in hover for row in planted)
    # drawn by their gap from the relation, which is the planted shift up to sign
    assert sorted(abs(v) for v in marked.y) == sorted(abs(v) for v in planted.values())
    assert _objects(_trace(figure, "objects obeying it")) == 197


def test_no_figure_for_integers_past_float_precision():
    big = 2**60
    text = "a,b\n" + "\n".join(f"{big + i},{i}" for i in range(10)) + "\n"
    table = read_table(text.encode(), "big.csv")
    assert statement_figure(table, (("a", Fraction(1)), ("b", Fraction(-1))), "=",
                            Fraction(big), text="a - b = big") is None



@pytest.mark.parametrize("shift", [0.0, 0.5])
def test_distinct_pairs_match_numpy_unique_rows(shift):
    # reference: numpy's np.unique over rows (axis=0), for whole numbers (keyed path) and
    # for halves (sorted-rows path)
    from analysis.figures.relations import _distinct_pairs

    rng = np.random.default_rng(1)
    x = rng.integers(-30, 40, size=5000).astype(float) + shift
    y = rng.integers(-5, 900, size=5000).astype(float)
    pairs, inverse, counts = _distinct_pairs(x, y)
    want, want_inverse, want_counts = np.unique(np.column_stack([x, y]), axis=0,
                                                return_inverse=True, return_counts=True)
    assert np.array_equal(pairs, want)
    assert np.array_equal(inverse, want_inverse.reshape(-1))
    assert np.array_equal(counts, want_counts)
