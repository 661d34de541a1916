"""The overview step's correlations and repeated rows (analysis.overview)."""

import pandas as pd
import pytest

import analysis.overview as overview
from analysis.overview import OverviewStep
from analysis.table import load_table, read_table


def _line_table(n: int):
    # y = 2x + 1: Pearson's r is exactly 1 on any rows (its definition)
    text = "x,y,z\n" + "\n".join(f"{v},{2 * v + 1},{(v * 7) % 5}" for v in range(n)) + "\n"
    return read_table(text.encode(), "line.csv")


def test_correlations_past_the_sample_size_say_they_come_from_a_sample(monkeypatch):
    monkeypatch.setattr(overview, "CORRELATION_ROWS", 50)
    result = OverviewStep(seed=3).run(_line_table(200))
    assert result.correlation_rows == 50
    assert result.correlations[0][:2] == ("x", "y")
    assert result.correlations[0][2] == pytest.approx(1.0)
    assert "random sample of 50 of the 200 rows" in result.summary()
    assert result.to_json()["correlation_rows"] == 50


def test_correlations_on_every_row_below_the_sample_size():
    result = OverviewStep().run(_line_table(200))
    assert result.correlation_rows is None
    assert result.correlations[0][2] == pytest.approx(1.0)
    assert "sample" not in result.summary()


# ----------------------------------------------------------------------------------------
# Rows equal to an earlier row in every column


def test_iris_without_its_ids_has_one_repeated_flower():
    # scikit-learn's iris data: flowers 102 and 143 have the same four measurements and
    # species (pandas' DataFrame.duplicated on sklearn.datasets.load_iris finds them)
    from conftest import iris_frame

    frame = iris_frame(short_names=True).drop(columns="flower")
    table = read_table(frame.to_csv(index=False).encode(), "iris.csv")
    result = OverviewStep().run(table)
    assert result.repeated_rows == int(frame.duplicated().sum()) == 1
    warning = [w for w in result.warnings if "equal to an earlier row" in w]
    assert warning and "row 143 equals row 102" in warning[0]
    assert result.to_json()["repeated_rows"] == 1


def test_an_id_column_rules_repeats_out():
    from conftest import iris_frame

    frame = iris_frame(short_names=True)
    table = read_table(frame.to_csv(index=False).encode(), "iris.csv", id_column="flower")
    assert OverviewStep().run(table).repeated_rows == 0


def _atlas_invariants():
    """Graphs G1..G208 of networkx's atlas by invariants only: different graphs often share
    them, so the table has rows equal in every column (networkx computes each invariant)."""
    nx = pytest.importorskip("networkx")
    rows = []
    for graph in nx.graph_atlas_g()[1:209]:
        degrees = sorted(d for _, d in graph.degree())
        rows.append({"vertices": graph.number_of_nodes(), "edges": graph.number_of_edges(),
                     "degrees": str(degrees), "triangles": sum(nx.triangles(graph).values()) // 3,
                     "density": nx.density(graph) if graph.number_of_nodes() > 1 else None})
    return rows


def test_graph_atlas_repeats_match_the_distinct_invariant_tuples():
    import json

    rows = _atlas_invariants()
    table = read_table(json.dumps(rows).encode(), "atlas.json")
    result = OverviewStep().run(table)
    # the reference: the atlas order and Python's own equality of the invariant tuples
    seen: dict[tuple, int] = {}
    expected = []
    for k, row in enumerate(rows):
        key = tuple(row.values())
        if key in seen:
            expected.append((k, seen[key]))
        else:
            seen[key] = k
    assert result.repeated_rows == len(expected) > 0
    first = ", ".join(f"row {r + 1} equals row {f + 1}" for r, f in expected[:3])
    assert any(first in w for w in result.warnings)


def test_rows_differing_only_in_a_marker_word_or_interval_are_not_repeats():
    csv = (b'genus,name\n1,a\n1,a\n?,a\nunknown,a\n"[1, 2]",a\n"[1, 3]",a\n"[1, 2]",a\n'
           b"2,a\n3,a\n4,a\n5,a\n6,a\n")
    table = read_table(csv, "g.csv")
    assert table.column("genus").dtype == "integer"   # the marked-number reading
    result = OverviewStep().run(table)
    # rows 2 (= row 1) and 7 (= row 5, the same interval) only: '?' and 'unknown' differ,
    # as do the two intervals
    assert result.repeated_rows == 2
    assert any("row 2 equals row 1, row 7 equals row 5" in w for w in result.warnings)


def test_big_integers_fractions_and_arrays_are_compared_exactly():
    import json

    big = 2**80
    rows = [{"n": str(big), "q": "7/2", "m": [[1, 2], [3, 4]]},
            {"n": str(big + 1), "q": "7/2", "m": [[1, 2], [3, 4]]},     # differs past 2**53
            {"n": str(big), "q": "7/3", "m": [[1, 2], [3, 4]]},
            {"n": str(big), "q": "7/2", "m": [[1, 2], [3, 5]]},
            {"n": str(big), "q": "7/2", "m": [[1, 2], [3, 4]]}]          # equals row 1
    table = read_table(json.dumps(rows).encode(), "exact.json")
    assert table.column("n").dtype == "big integer"
    result = OverviewStep().run(table)
    assert result.repeated_rows == 1
    assert any("row 5 equals row 1" in w for w in result.warnings)


# dask's Parquet reader calls a pandas method pandas 3.1 deprecates; not ours to change
@pytest.mark.filterwarnings("ignore:The inplace keyword in DataFrame.reset_index")
def test_the_dask_engine_finds_the_same_repeats_across_partitions(tmp_path):
    pytest.importorskip("dask.dataframe")
    pytest.importorskip("distributed")
    from conftest import write_parts

    from analysis.distributed import open_cluster, run_distributed

    frame = pd.DataFrame(_atlas_invariants())
    folder, whole = write_parts(frame, tmp_path / "atlas", parts=5)
    memory = OverviewStep().run(load_table(whole))
    with open_cluster(n_workers=1) as client:
        dask = run_distributed(OverviewStep(), folder, client=client)
    assert dask.repeated_rows == memory.repeated_rows > 0
    said = [w for w in memory.warnings if "equal to an earlier row" in w]
    assert said and said[0] in [str(w) for w in dask.warnings]
