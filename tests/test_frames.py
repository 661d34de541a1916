"""A Table from a pandas frame types its cells exactly as a CSV file of the same cells, leaves
the frame alone, and gives the same results; results convert back to frames."""

from __future__ import annotations

import io
from fractions import Fraction
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import analysis
from analysis.errors import TableError
from analysis.frames import frame_bytes, table_from_frame, write_frame
from analysis.table import load_table, read_table

TABLES = Path(__file__).resolve().parent.parent / "sample_tables"
SAMPLES = ["lattice_polygons.csv", "graphs_up_to_7.csv", "elliptic_curves.csv",
           "quadratic_fields.csv", "symmetric_matrices.json"]


def _typing(table) -> list[tuple]:
    return [(c.name, c.role, c.dtype, c.missing, c.distinct, c.detected_role, c.note)
            for c in table.columns]


def _same_values(left, right) -> None:
    """Every cell equal, arrays entry by entry, exact values exactly."""
    assert list(left.frame.columns) == list(right.frame.columns)
    for name in left.frame.columns:
        info = left.column(name)
        if info.dtype in ("integer", "big integer", "rational", "boolean", "real"):
            assert left.exact(name) == right.exact(name), name
        elif info.dtype == "array":
            pairs = zip(left.frame[name].tolist(), right.frame[name].tolist())
            assert all(np.array_equal(a, b) for a, b in pairs), name
        else:
            assert left.frame[name].tolist() == right.frame[name].tolist(), name


@pytest.mark.parametrize("name", SAMPLES)
def test_a_loaded_tables_frame_types_like_its_file(name):
    from_file = load_table(TABLES / name)
    from_frame = table_from_frame(from_file.frame, name=name)
    assert _typing(from_frame) == _typing(from_file)
    assert from_frame.id_column == from_file.id_column
    assert from_frame.warnings == from_file.warnings
    _same_values(from_file, from_frame)


@pytest.mark.parametrize("name", [n for n in SAMPLES if n.endswith(".csv")])
def test_a_frame_read_by_pandas_types_like_the_file(name):
    # pandas reads the matrices as text and the 25-digit counts as text or floats of its
    # own; the table must still come out as the file's
    frame = pd.read_csv(TABLES / name, dtype=str, keep_default_na=False)
    from_file = load_table(TABLES / name)
    from_frame = table_from_frame(frame, name=name)
    assert _typing(from_frame) == _typing(from_file)
    _same_values(from_file, from_frame)


def test_the_frame_is_not_changed():
    frame = load_table(TABLES / "lattice_polygons.csv").frame
    before = frame.copy(deep=True)
    cells = list(frame["vertex_list"])
    table_from_frame(frame.set_index("polygon"), id_column="polygon")
    table_from_frame(frame, roles={"lattice_width": "category"})
    pd.testing.assert_frame_equal(frame, before)
    assert all(a is b for a, b in zip(cells, frame["vertex_list"])), "cells replaced"


def test_cells_of_every_kind_type_like_a_csv_file():
    big = 2**70 + 1  # past 64 bits: stays an exact Python integer
    frame = pd.DataFrame({
        "name": ["a", "b", "c", "d"],
        "genus": pd.array([0, 1, None, 3], dtype="Int64"),
        "slope": [Fraction(7, 2), Fraction(-1, 3), None, Fraction(5)],
        "huge": [big, -big, 3, 4],
        "height": [0.1, 1 / 3, np.nan, 1e300],
        "smooth": [True, False, True, None],
        "matrix": [np.array([[1, 0], [0, 1]]), [[2, 1], [1, 2]], None, [[0, 1], [1, 0]]],
        "fiber": pd.Categorical(["I1", "II", "I1", "III"]),
    })
    written = ("name,genus,slope,huge,height,smooth,matrix,fiber\n"
               f"a,0,7/2,{big},0.1,True,\"[[1,0],[0,1]]\",I1\n"
               f"b,1,-1/3,{-big},0.3333333333333333,False,\"[[2,1],[1,2]]\",II\n"
               "c,,,3,,True,,I1\n"
               "d,3,5,4,1e+300,,\"[[0,1],[1,0]]\",III\n")
    by_hand = read_table(written.encode(), "cells.csv")
    table = table_from_frame(frame, name="cells.csv")
    assert _typing(table) == _typing(by_hand)
    _same_values(by_hand, table)
    assert table.exact("huge")[0] == big
    assert table.exact("slope")[:2] == [Fraction(7, 2), Fraction(-1, 3)]
    assert table.role("matrix") == "array" and table.id_column == "name"


def test_a_named_index_is_the_first_column_and_an_unnamed_one_is_left_out():
    frame = pd.DataFrame({"v": [4, 5, 6], "e": [4, 5, 6]},
                         index=pd.Index(["C4", "C5", "C6"], name="graph"))
    assert [c.name for c in table_from_frame(frame).columns] == ["graph", "v", "e"]
    assert table_from_frame(frame).id_column == "graph"
    plain = frame.reset_index(drop=True)
    assert [c.name for c in table_from_frame(plain).columns] == ["v", "e"]
    assert list(table_from_frame(plain).row_ids) == [0, 1, 2]


def test_the_same_frame_gives_the_same_digest_and_another_frame_another():
    frame = pd.DataFrame({"v": [4, 5, 6], "e": [4, 5, 6]})
    assert table_from_frame(frame).digest == table_from_frame(frame.copy()).digest
    assert table_from_frame(frame).digest != table_from_frame(frame.iloc[::-1]).digest


@pytest.mark.parametrize("frame, match", [
    ([{"v": 1}], r"expected a pandas DataFrame, got list"),
    (pd.DataFrame({"v": []}), r"a header but no rows"),
    (pd.DataFrame({"m": [["x", 1], [1, 2]]}), r"row 1, column 'm'"),
    (pd.DataFrame([[1, 2], [3, 4]], columns=["a", "a"]), r"'a'"),
    (pd.DataFrame({"m": [[1, 2], [Fraction(1, 2), 1]]}), r"mine, row 2, column 'm': an array"),
], ids=["not a frame", "no rows", "text in an array", "two columns named a",
        "a fraction in an array"])
def test_bad_frames_are_refused_with_a_message(frame, match):
    with pytest.raises(TableError, match=match):
        table_from_frame(frame, name="mine")


def test_limits_apply_to_a_frame_as_to_a_file():
    frame = pd.DataFrame({"v": range(10)})
    with pytest.raises(TableError, match="over the limit of 5"):
        table_from_frame(frame, limits=analysis.Limits(max_rows=5))


def test_write_frame_writes_the_bytes_the_table_was_read_from(tmp_path):
    frame = pd.read_csv(TABLES / "quadratic_fields.csv")
    path = write_frame(frame, tmp_path / "fields.csv")
    assert path.read_bytes() == frame_bytes(frame)
    assert load_table(path).digest == table_from_frame(frame, name="fields.csv").digest
    with pytest.raises(TableError, match="never written over"):
        write_frame(frame, path)


def test_a_separator_on_a_frame_gives_the_files_numbers():
    # Genus theory (Gauss): the class number of a quadratic field is odd exactly when at
    # most one prime divides its discriminant.
    path = TABLES / "quadratic_fields.csv"
    from_file = analysis.run(load_table(path), "separator", target="class_number_odd")
    from_frame = analysis.run(table_from_frame(pd.read_csv(path), name=path.name),
                              "separator", target="class_number_odd")
    assert from_frame.to_json() == from_file.to_json()
    assert from_frame.equation.text == "prime_divisors <= 1"


def test_result_frames_hold_the_results_rows():
    path = TABLES / "quadratic_fields.csv"
    table = load_table(path)
    projection = analysis.run(table, "projection", method="pca")
    frame = projection.to_frame()
    assert list(frame.columns) == ["row", "x", "y"] and len(frame) == table.n_rows
    coordinates = projection.to_json()["coordinates"]
    assert frame["row"].tolist() == [c["row"] for c in coordinates]
    assert np.allclose(frame["x"], [c["x"] for c in coordinates])

    clustering = analysis.run(table, "clustering", method="kmeans", k=3)
    assignments = clustering.to_frame()
    assert sorted(set(assignments["cluster"])) == [0, 1, 2]
    assert assignments.to_dict("records") == clustering.to_json()["assignments"]

    separator = analysis.run(table, "separator", target="class_number_odd")
    scores = separator.to_frame()
    # Genus theory (Gauss), as above: predicted odd exactly when prime_divisors <= 1
    truth = pd.read_csv(path).set_index("field")
    expected = (truth.loc[scores["row"], "prime_divisors"] <= 1).tolist()
    assert scores["predicted"].tolist() == expected
    assert scores["actual"].tolist() == truth.loc[scores["row"], "class_number_odd"].tolist()


def test_relations_as_a_frame_list_picks_theorem():
    # Pick (1899): A = I + B/2 - 1 on every lattice polygon, written with twice the area.
    table = load_table(TABLES / "lattice_polygons.csv")
    frame = analysis.run(table, "relations").to_frame()
    pick = frame[frame["text"] == "twice_area - 2*interior_points - boundary_points = -2"]
    assert pick["statement"].tolist() == ["relation"]
    assert pick["holds_on"].tolist() == [table.n_rows] and pick["violations"].tolist() == [0]
    bounds = frame[frame["statement"] == "bound"]
    assert len(bounds) > 0 and (bounds["attained_by"] >= 1).all()


def test_overview_as_a_frame_has_one_row_per_column():
    table = read_table(io.BytesIO(b"v,e\n3,3\n4,4\n5,5\n").getvalue(), "cycles.csv")
    frame = analysis.run(table, "overview").to_frame()
    assert frame["column"].tolist() == ["v", "e"]
    assert frame["min"].tolist() == [3, 3] and frame["max"].tolist() == [5, 5]
