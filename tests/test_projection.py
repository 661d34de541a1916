"""The projection step, checked against scikit-learn's iris data and numpy's eigenvalues."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from conftest import iris_frame as iris_data
from conftest import table_from_frame

from analysis.clustering import ClusteringStep
from analysis.errors import StepError
from analysis.outliers import OutliersStep
from analysis.projection import ProjectionStep
from analysis.steps import make_step, step_params

FEATURES = ["sepal_length", "sepal_width", "petal_length", "petal_width"]



@pytest.fixture(scope="module")
def iris_frame():
    # Fisher's iris measurements as shipped with scikit-learn (sklearn.datasets.load_iris)
    return iris_data(short_names=True)


@pytest.fixture(scope="module")
def iris(iris_frame):
    return table_from_frame(iris_frame, "iris.csv")


def test_pca_unscaled_matches_documented_iris_ratios(iris):
    result = ProjectionStep(method="pca", standardize=False, columns=FEATURES).run(iris)
    # scikit-learn's example "Comparison of LDA and PCA 2D projection of Iris dataset" prints
    # explained variance ratio (first two components): [0.92461872 0.05306648]
    assert result.explained_variance_ratio[:2] == pytest.approx([0.92461872, 0.05306648],
                                                                abs=1e-6)
    assert "own units" in " ".join(result.notes)


def test_pca_unscaled_matches_covariance_eigenvalues(iris_frame, iris):
    result = ProjectionStep(method="pca", standardize=False, columns=FEATURES).run(iris)
    values = iris_frame[FEATURES].to_numpy()
    # independent computation: eigenvalues of the sample covariance matrix (numpy)
    eigenvalues = np.sort(np.linalg.eigvalsh(np.cov(values, rowvar=False)))[::-1]
    assert result.explained_variance_ratio == pytest.approx(
        list(eigenvalues / eigenvalues.sum()), abs=1e-10)
    # the picture's axes are the principal axes: their variances are the two largest
    # eigenvalues, and they are uncorrelated
    assert np.var(result.x, ddof=1) == pytest.approx(eigenvalues[0], rel=1e-10)
    assert np.var(result.y, ddof=1) == pytest.approx(eigenvalues[1], rel=1e-10)
    assert abs(np.corrcoef(result.x, result.y)[0, 1]) < 1e-10


def test_pca_standardized_matches_correlation_eigenvalues(iris_frame, iris):
    result = ProjectionStep(method="pca", columns=FEATURES).run(iris)
    values = iris_frame[FEATURES].to_numpy()
    # standardizing every feature makes PCA the eigen-decomposition of the correlation
    # matrix (numpy's corrcoef); its eigenvalues sum to the number of features
    eigenvalues = np.sort(np.linalg.eigvalsh(np.corrcoef(values, rowvar=False)))[::-1]
    assert result.explained_variance_ratio == pytest.approx(
        list(eigenvalues / len(FEATURES)), abs=1e-10)
    assert result.standardize is True
    assert "standardized" in " ".join(result.notes)


def test_pca_loadings_are_named_unit_principal_axes(iris_frame, iris):
    result = ProjectionStep(method="pca", standardize=False, columns=FEATURES).run(iris)
    assert list(result.loadings) == FEATURES
    first = np.array([result.loadings[name][0] for name in FEATURES])
    values = iris_frame[FEATURES].to_numpy()
    # the first principal axis is the top eigenvector of the covariance matrix (numpy),
    # determined up to sign
    vectors = np.linalg.eigh(np.cov(values, rowvar=False))[1]
    top = vectors[:, -1]
    assert abs(abs(first @ top) - 1.0) < 1e-10
    # petal length dominates the first axis of unscaled iris (common practice: the
    # largest-variance measurement)
    assert max(result.loadings, key=lambda name: abs(result.loadings[name][0])) \
        == "petal_length"


def test_coordinates_keep_row_ids_and_json_fields(iris):
    result = ProjectionStep(method="pca", columns=FEATURES).run(iris)
    payload = result.to_json()
    assert [c["row"] for c in payload["coordinates"]] == [f"F{i:03d}" for i in range(150)]
    assert set(payload["coordinates"][0]) == {"row", "x", "y"}
    for key in ("explained_variance_ratio", "loadings", "method", "notes", "sampled",
                "n_rows"):
        assert key in payload
    assert payload["sampled"] is False and payload["n_rows"] == 150
    assert payload["method"] == "pca"
    assert result.elapsed_seconds >= 0


def test_rows_with_missing_features_are_dropped_and_said(iris_frame):
    frame = iris_frame.copy()
    frame.loc[7, "petal_width"] = np.nan
    gappy = table_from_frame(frame, "gappy.csv")
    result = ProjectionStep(method="pca", columns=FEATURES).run(gappy)
    assert "F007" not in set(result.row_ids)
    assert result.n_rows == 149
    assert any("dropped 1" in note for note in result.notes)


def test_lda_separates_iris_species(iris):
    result = ProjectionStep(method="lda", target="species").run(iris)
    labels = iris.frame["species"].to_numpy()[result.positions]
    points = np.column_stack([result.x, result.y])
    centres = {s: points[labels == s].mean(axis=0) for s in set(labels)}
    names = list(centres)
    nearest = [names[int(np.argmin([np.linalg.norm(p - centres[s]) for s in names]))]
               for p in points]
    accuracy = float(np.mean(np.array(nearest) == labels))
    # iris species are linearly separable but for a few versicolor/virginica flowers
    # (from memory: LDA misclassifies about 2% of iris)
    assert accuracy >= 0.95, f"nearest-centre accuracy in the LDA picture only {accuracy:.3f}"
    assert result.axis_titles == ("first discriminant axis", "second discriminant axis")
    assert set(result.loadings) == set(FEATURES)


def test_lda_with_two_classes_uses_principal_axis_for_y(iris_frame):
    frame = iris_frame.copy()
    frame["setosa"] = frame["species"] == "setosa"
    frame = frame.drop(columns=["species"])
    result = ProjectionStep(method="lda", target="setosa").run(table_from_frame(frame, "two.csv"))
    assert result.axis_titles[1] == "first principal component"
    assert any("one discriminant axis" in note for note in result.notes)


def test_lda_without_target_is_refused(iris):
    with pytest.raises(StepError, match="LDA needs a target"):
        ProjectionStep(method="lda").run(iris)


def test_lda_with_one_class_is_refused(iris_frame):
    frame = iris_frame[iris_frame["species"] == "setosa"].copy()
    frame["kind"] = "flower"
    frame = frame.drop(columns=["species"])
    table = table_from_frame(frame, "setosa.csv").with_roles({"kind": "category"})
    with pytest.raises(StepError, match="at least two classes"):
        ProjectionStep(method="lda", target="kind").run(table)


@pytest.mark.parametrize("settings, message", [
    ({"method": "mds"}, "projection method 'mds'"),
    ({"method": "tsne", "sample_size": 3}, "sample size 3"),
    ({"method": "umap", "n_neighbors": 1}, "n_neighbors 1"),
    ({"method": "tsne", "perplexity": 0}, "perplexity 0"),
], ids=["unknown-method", "tiny-sample", "one-neighbour", "zero-perplexity"])
def test_bad_settings_are_refused(iris, settings, message):
    with pytest.raises(StepError, match=message):
        ProjectionStep(**settings).run(iris)


@pytest.mark.parametrize("method", ["tsne", "umap"], ids=["t-SNE", "UMAP"])
def test_nonlinear_methods_are_deterministic_and_report_sampling(iris, method):
    # one small table, sampled below its size, run twice with the same seed: the only
    # UMAP runs in this file (its first call compiles for many seconds)
    step = ProjectionStep(method=method, sample_size=100, seed=3)
    first = step.run(iris)
    second = step.run(iris)
    np.testing.assert_array_equal(first.x, second.x)
    np.testing.assert_array_equal(first.y, second.y)
    np.testing.assert_array_equal(first.row_ids, second.row_ids)
    assert first.sampled is True and first.n_rows == 150 and first.n_projected == 100
    assert len(set(first.row_ids)) == 100 and set(first.row_ids) <= set(iris.row_ids)
    assert any("random sample of 100 of the 150 rows" in note for note in first.notes)
    assert first.to_json()["sampled"] is True
    assert np.all(np.isfinite(first.x)) and np.all(np.isfinite(first.y))


def test_step_round_trips_through_study_parameters(iris):
    step = ProjectionStep(method="pca", standardize=False, columns=FEATURES[:3])
    again = make_step("projection", step_params(step))
    assert again == step
    result = again.run(iris)
    assert result.features == tuple(FEATURES[:3])


def test_table_is_not_changed(iris_frame, iris):
    before = iris.frame.copy()
    ProjectionStep(method="pca", columns=FEATURES).run(iris)
    pd.testing.assert_frame_equal(iris.frame, before)


def test_rows_without_a_target_are_drawn_but_not_used_by_lda(iris_frame):
    frame = iris_frame.copy()
    frame.loc[[4, 60], "species"] = None
    table = table_from_frame(frame, "unlabelled.csv")
    picture = ProjectionStep(method="pca", target="species").run(table)
    assert picture.n_rows == 150 and "species" not in " ".join(picture.features)
    separated = ProjectionStep(method="lda", target="species").run(table)
    assert separated.n_rows == 148
    assert {"F004", "F060"}.isdisjoint(set(separated.row_ids))


def test_one_feature_is_enough_for_t_sne():
    frame = pd.DataFrame({"genus": [0, 1, 1, 2, 3, 5, 8, 13]})
    result = ProjectionStep(method="tsne").run(table_from_frame(frame, "one.csv"))
    assert result.n_projected == 8
    assert np.all(np.isfinite(result.x)) and np.all(np.isfinite(result.y))


@pytest.mark.parametrize("step", [
    ProjectionStep(method="pca"), ProjectionStep(method="tsne"),
    ClusteringStep(), OutliersStep()], ids=["pca", "t-SNE", "clustering", "outliers"])
def test_constant_table_is_refused(step):
    frame = pd.DataFrame({"a": [1] * 12, "b": [2] * 12})
    with pytest.raises(StepError, match="every row has the same value in every feature"):
        step.run(table_from_frame(frame, "constant.csv"))
