"""Selecting points lists rows: which traces hold objects, the ids a selection names, and the
rows shown for them. Checked on scikit-learn's iris data without a browser."""

from __future__ import annotations

import pandas as pd
import pytest
from conftest import iris_csv

from analysis.figures import figures_for
from analysis.projection import ProjectionStep
from analysis.separation import SeparatorStep
from analysis.table import read_table
from app import display
from app.figure_view import row_traces, selected_ids


@pytest.fixture(scope="module")
def iris():
    """scikit-learn's iris: 150 flowers, 4 measurements, 3 species (sklearn documentation)."""
    return read_table(iris_csv(), "iris.csv")


def test_the_projection_scatter_holds_objects(iris):
    result = ProjectionStep(target="species").run(iris)
    title, scatter = figures_for(result, iris, color_by="target")[0]
    traces = row_traces(scatter, iris)
    assert traces, title
    drawn = sum(len(scatter.data[t].customdata) for t in traces)
    assert drawn == 150


def test_a_learning_curve_is_not_a_picture_of_objects(iris):
    result = SeparatorStep(target="species", permutations=20, repeats=2).run(iris)
    pictures = dict(figures_for(result, iris))
    assert "Learning curve" in pictures
    assert row_traces(pictures["Learning curve"], iris) == set()


def test_selected_ids_come_from_object_traces_only():
    event = {"selection": {"points": [
        {"curve_number": 0, "customdata": ["F007", "x"]},
        {"curve_number": 0, "customdata": ["F007", "x"]},   # the same point twice
        {"curve_number": 1, "customdata": [300, 0.2]},      # a curve point, not an object
        {"curve_number": 0, "customdata": "F010"},
    ]}}
    assert selected_ids(event, {0}) == ["F007", "F010"]
    assert selected_ids(None) == []
    assert selected_ids({"selection": {"points": []}}) == []


def test_listed_rows_are_the_selected_objects_in_order(iris):
    shown = display.rows_frame(iris, ["F010", "F002"], ["species", "sepal length (cm)"])
    assert list(shown.columns) == ["flower", "species", "sepal length (cm)"]
    assert list(shown["flower"]) == ["F010", "F002"]
    # iris flower 10 (0-based) is a setosa with sepal length 5.4 (the dataset's own values)
    assert shown.iloc[0]["species"] == "setosa"
    assert shown.iloc[0]["sepal length (cm)"] == pytest.approx(5.4)


def test_exact_values_are_shown_as_exact_text():
    table = read_table(b"id,big,ratio\na,123456789012345678901234567890,7/3\nb,1,1/2\n",
                       "exact.csv")
    shown = display.rows_frame(table, ["a"])
    assert shown.iloc[0]["big"] == "123456789012345678901234567890"
    assert shown.iloc[0]["ratio"] == "7/3"
    assert isinstance(shown, pd.DataFrame)


@pytest.mark.parametrize("seconds, said", [
    (0.42, "0.4 s"), (9.96, "10 s"), (12.4, "12 s"), (59.6, "1 min 0 s"), (185, "3 min 5 s"),
    (3720, "1 h 2 min"),
])
def test_a_span_of_time_reads_as_people_say_it(seconds, said):
    from app.display import duration

    assert duration(seconds) == said
