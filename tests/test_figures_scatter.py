"""Figure builders for projection, clustering and objects to look at, tested through the
builder functions: every row id in customdata, hover columns, colours matching the table."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import plotly.graph_objects as go
import pytest
from conftest import iris_frame, table_from_frame

from analysis.clustering import ClusteringStep
from analysis.errors import ScoutError, StepError
from analysis.figures import figures_for
from analysis.figures.clustering import profile_figure, sweep_figure
from analysis.figures.outliers import score_figure, standing_figure
from analysis.figures.projection import (
    loadings_figure,
    scatter_figure,
    scree_figure,
    selected_rows,
)
from analysis.outliers import OutliersStep
from analysis.projection import ProjectionStep

FEATURES = ["sepal_length", "sepal_width", "petal_length", "petal_width"]


@pytest.fixture(scope="module")
def iris():
    # Fisher's iris measurements as shipped with scikit-learn, with an id, a label and a count
    frame = iris_frame(short_names=True)
    frame["petals_mm"] = (frame["petal_length"] * 10).round().astype(int)
    frame.loc[5, "petals_mm"] = None
    return table_from_frame(frame, "iris.csv")


@pytest.fixture(scope="module")
def pca(iris):
    return ProjectionStep(method="pca", columns=FEATURES, target="species").run(iris)


def _custom_rows(figure: go.Figure) -> list:
    return [row[0] for trace in figure.data for row in trace.customdata]


def _row_of(iris, row_id) -> int:
    return int(np.flatnonzero(iris.row_ids == row_id)[0])


def test_scatter_carries_every_row_id(pca):
    figure = scatter_figure(pca)
    ids = _custom_rows(figure)
    assert sorted(ids) == sorted(pca.row_ids.tolist())
    assert len(ids) == 150
    # each point's coordinates are its row's
    trace = figure.data[0]
    np.testing.assert_array_equal(trace.x, pca.x)
    np.testing.assert_array_equal(trace.y, pca.y)


def test_hover_shows_the_chosen_columns(iris, pca):
    figure = scatter_figure(pca, iris, hover=["species", "petal_width"])
    trace = figure.data[0]
    assert "species: %{customdata[1]}" in trace.hovertemplate
    assert "petal_width: %{customdata[2]}" in trace.hovertemplate
    for row in trace.customdata[:20]:
        position = _row_of(iris, row[0])
        assert row[1] == iris.frame["species"].iloc[position]
        assert float(row[2]) == pytest.approx(iris.frame["petal_width"].iloc[position])


def test_colour_by_category_gives_one_trace_per_label(iris, pca):
    figure = scatter_figure(pca, iris, color_by="species")
    assert [t.name for t in figure.data] == ["setosa", "versicolor", "virginica"]
    colours = {t.marker.color for t in figure.data}
    assert len(colours) == 3, "each label its own colour"
    for trace in figure.data:
        labels = {iris.frame["species"].iloc[_row_of(iris, row[0])] for row in trace.customdata}
        assert labels == {trace.name}
    assert sorted(_custom_rows(figure)) == sorted(pca.row_ids.tolist())


def test_colour_by_target_uses_the_target_column(iris, pca):
    by_target = scatter_figure(pca, iris, color_by="target")
    by_column = scatter_figure(pca, iris, color_by="species")
    assert [t.name for t in by_target.data] == [t.name for t in by_column.data]


def test_colour_by_number_uses_a_continuous_scale_and_shows_missing(iris, pca):
    figure = scatter_figure(pca, iris, color_by="petals_mm")
    names = [t.name for t in figure.data]
    assert "missing" in names
    missing = figure.data[names.index("missing")]
    assert [row[0] for row in missing.customdata] == ["F005"]
    scale = [t for t in figure.data if t.name != "missing"][0]
    assert scale.marker.colorscale is not None
    expected = [iris.frame["petals_mm"].iloc[_row_of(iris, row[0])] for row in scale.customdata]
    np.testing.assert_array_equal(np.asarray(scale.marker.color, dtype=float), expected)
    assert sorted(_custom_rows(figure)) == sorted(pca.row_ids.tolist())


def test_colour_by_cluster_and_outlier_score(iris, pca):
    clusters = ClusteringStep(method="kmeans", k=3, columns=FEATURES).run(iris)
    figure = scatter_figure(pca, iris, color_by="cluster", clustering=clusters)
    assert {t.name for t in figure.data} == {"cluster 0", "cluster 1", "cluster 2"}
    assigned = dict(zip(clusters.row_ids.tolist(), clusters.labels.tolist()))
    for trace in figure.data:
        assert {f"cluster {assigned[row[0]]}" for row in trace.customdata} == {trace.name}
    ranked = OutliersStep(columns=FEATURES, relations=False, top=5).run(iris)
    figure = scatter_figure(pca, iris, color_by="outlier score", outliers=ranked)
    scores = dict(zip(ranked.row_ids.tolist(), ranked.scores.tolist()))
    trace = figure.data[0]
    np.testing.assert_allclose(trace.marker.color, [scores[row[0]] for row in trace.customdata])


def test_huge_integers_are_coloured_on_the_signed_log_scale():
    huge = [3**700, -(5**500), 7, 0, 2**1100]
    frame = pd.DataFrame({"a": [1.0, 2.0, 3.5, 4.0, 6.0], "b": [2.0, 1.0, 0.0, 3.0, 5.0],
                          "height": [str(v) for v in huge]})
    table = table_from_frame(frame, "huge.csv")
    result = ProjectionStep(method="pca", columns=["a", "b"]).run(table)
    figure = scatter_figure(result, table, color_by="height")
    trace = figure.data[0]
    assert trace.marker.colorbar.title.text == "slog(height)"
    # reference: Python's exact integer log10, sign(x) * log10(1 + |x|)
    expected = [(1 if v >= 0 else -1) * math.log10(1 + abs(v)) for v in huge]
    np.testing.assert_allclose(trace.marker.color, expected)


def test_large_results_draw_with_webgl():
    rng = np.random.default_rng(0)
    frame = pd.DataFrame(rng.normal(size=(5001, 2)), columns=["u", "v"])
    table = table_from_frame(frame, "many.csv")
    result = ProjectionStep(method="pca").run(table)
    figure = scatter_figure(result, table)
    assert isinstance(figure.data[0], go.Scattergl)
    assert len(_custom_rows(figure)) == 5001


@pytest.mark.parametrize("options, message", [
    ({"color_by": "cluster"}, "needs a clustering result"),
    ({"color_by": "outlier score"}, "objects-to-look-at"),
    ({"color_by": "colour"}, "no column named 'colour'"),
], ids=["cluster-without-result", "score-without-result", "unknown-column"])
def test_colouring_without_what_it_needs_is_refused(iris, pca, options, message):
    with pytest.raises(ScoutError, match=message):
        scatter_figure(pca, iris, **options)


def test_hover_without_the_table_is_refused(pca):
    with pytest.raises(StepError, match="hover columns need the table"):
        scatter_figure(pca, hover=["species"])


def test_selected_points_give_row_ids(iris, pca):
    figure = scatter_figure(pca, iris, hover=["species"])
    points = [{"customdata": list(figure.data[0].customdata[i])} for i in (3, 9, 3)]
    assert selected_rows({"points": points}) == [pca.row_ids[3], pca.row_ids[9]]


def test_pca_scree_and_loadings(pca):
    scree = scree_figure(pca)
    np.testing.assert_allclose(scree.data[0].y, pca.explained_variance_ratio)
    assert scree.data[1].y[-1] == pytest.approx(1.0)
    loadings = loadings_figure(pca)
    assert set(loadings.data[0].y) == set(FEATURES)
    for trace, axis in zip(loadings.data, (0, 1)):
        for name, weight in zip(trace.y, trace.x):
            assert weight == pca.loadings[name][axis]


def test_dispatcher_gives_titled_figures(iris, pca):
    titled = figures_for(pca, iris, color_by="species", hover=["petal_width"])
    assert [title for title, _ in titled][1:] == [
        "Explained variance by principal component", "Loadings: what the axes are made of"]
    assert all(isinstance(figure, go.Figure) for _, figure in titled)


def test_clustering_sweep_and_profile_figures(iris):
    result = ClusteringStep(method="auto", k_range=(2, 4), columns=FEATURES).run(iris)
    titles = [title for title, _ in figures_for(result, iris)]
    assert titles == ["Silhouette against k", "BIC of the Gaussian mixtures",
                      "Cluster profiles"]
    sweep = sweep_figure(result)
    lines = {t.name: t for t in sweep.data}
    assert set(lines) == {"k-means", "Gaussian mixture", "agglomerative (Ward)", "chosen"}
    kmeans = {e.k: e.silhouette for e in result.sweep if e.method == "kmeans"}
    assert dict(zip(lines["k-means"].x, lines["k-means"].y)) == kmeans
    heat = profile_figure(result).data[0]
    assert list(heat.x) == FEATURES
    np.testing.assert_allclose(
        heat.z, [[p.differences[n] for n in FEATURES] for p in result.profiles])
    assert heat.text[0][0] == f"{result.profiles[0].means['sepal_length']:.3g}"


def test_outlier_figures_list_rows_in_rank_order(iris):
    result = OutliersStep(columns=FEATURES, target="species", relations=False,
                          top=12).run(iris)
    scores = score_figure(result)
    listed = {row[0]: x for trace in scores.data for row, x in zip(trace.customdata, trace.x)}
    assert listed == {o.row: o.score for o in result.outliers}
    assert list(scores.layout.yaxis.categoryarray)[::-1][0] == f"1. {result.outliers[0].row}"
    heat = standing_figure(result).data[0]
    assert list(heat.x) == list(result.measures)
    np.testing.assert_allclose(
        heat.z, [[o.standing[m] for m in result.measures] for o in result.outliers])
