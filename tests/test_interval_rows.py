"""Rows known only by an interval, held against the relations and bounds found on the others."""

from __future__ import annotations

import pytest

from analysis.interval_rows import IntervalRows
from analysis.relations import RelationsStep
from analysis.table import read_table

nx = pytest.importorskip("networkx")


def _atlas_table(wrong_every: int = 23, open_every: int = 11):
    # networkx's graph atlas; the handshake lemma (Euler): the degree sum is twice the number
    # of edges. Some edge counts are written as an interval that holds the true count, and a
    # few as an interval that does not (a table in error), which must break the relation.
    lines = ["graph,vertices,degree_sum,max_degree,edges"]
    truth = {}
    for i, g in enumerate(nx.graph_atlas_g()[1:300]):
        m = g.number_of_edges()
        degrees = [d for _, d in g.degree()]
        cell = str(m)
        if i % wrong_every == 5:
            cell = f'"[{m + 1},{m + 3}]"'
            truth[f"g{i}"] = "wrong"
        elif i % open_every == 2:
            cell = f'"[{max(m - 1, 0)},{m + 1}]"'
            truth[f"g{i}"] = "open"
        lines.append(f"g{i},{g.number_of_nodes()},{sum(degrees)},{max(degrees, default=0)},"
                     f"{cell}")
    return read_table("\n".join(lines).encode(), "atlas.csv", id_column="graph"), truth


def test_an_interval_row_breaks_a_relation_only_when_every_value_does():
    table, truth = _atlas_table()
    result = RelationsStep(bounds=False, congruences=False).run(table)
    handshake = next(r for r in result.relations
                     if {name for name, _ in r.terms} == {"degree_sum", "edges"})
    assert {name: abs(coef) for name, coef in handshake.terms} == {"degree_sum": 1, "edges": 2}
    assert set(handshake.violations) == {g for g, kind in truth.items() if kind == "wrong"}
    assert set(handshake.consistent_with) == {g for g, kind in truth.items() if kind == "open"}
    data = handshake.to_json()
    assert sorted(data["consistent_with"]) == sorted(handshake.consistent_with)
    assert "consistent with" in result.summary()


def test_whole_number_intervals_and_bounds():
    # worked by hand: a vertex of largest degree has that many edges at it, so
    # max_degree <= edges (common practice)
    lines = ["graph,max_degree,edges,degree_sum", 'a,3,"[1,2]",6', 'b,2,"[1,4]",4',
             'c,1,"[1,2]",3', "d,2,,2", "e,1,1,2", "f,2,3,6", "g,2,2,4", "h,3,3,6", "i,1,2,4"]
    table = read_table("\n".join(lines).encode(), "hand.csv", id_column="graph")
    assert len(table.intervals("edges")) == 3 and table.column("edges").dtype == "integer"
    rows = IntervalRows(table, ["max_degree", "edges", "degree_sum"])
    bound = rows.judge([("max_degree", 1), ("edges", -1)], "<=", 0)
    assert bound.breaking == ("a",) and set(bound.consistent) == {"b", "c"}
    # d's edge count is missing, not an interval: it says nothing
    handshake = rows.judge([("degree_sum", 1), ("edges", -2)], "=", 0)
    # c: degree_sum 3 needs edges = 3/2, not a whole number, though 3/2 lies in [1, 2]
    assert handshake.breaking == ("a", "c") and handshake.consistent == ("b",)


def test_the_report_counts_the_consistent_interval_rows():
    from analysis.report import report_html
    from analysis.study import Study, new_step, run_study

    table, truth = _atlas_table()
    step = new_step("relations", {"bounds": False, "congruences": False})
    run = run_study(Study(table=table.name, steps=(step,)), table)
    assert run.ok, run.summary()
    page = report_html(run)
    assert "consistent rows known by an interval" in page
    opened = sum(kind == "open" for kind in truth.values())
    assert f'<td class="num">{opened}</td>' in page
