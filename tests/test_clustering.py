"""The clustering step, checked on scikit-learn's make_blobs data and its own metrics."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from conftest import table_from_frame
from sklearn.datasets import make_blobs
from sklearn.metrics import (
    adjusted_rand_score,
    normalized_mutual_info_score,
    silhouette_score,
)

import analysis.clustering as clustering
from analysis.clustering import ClusteringStep
from analysis.errors import StepError
from analysis.steps import make_step, step_params

FEATURES = ["x1", "x2", "x3"]


# Blob centres at least 10 apart; with spread 0.5 every blob is 20 standard deviations from
# the next, so the blobs are separated beyond doubt.
CENTRES = np.array([[0, 0, 0], [10, 0, 0], [0, 10, 0], [0, 0, 10], [10, 10, 10]], dtype=float)


def _blobs(centers: int, n: int = 240, seed: int = 7, spread: float = 0.5) -> pd.DataFrame:
    # scikit-learn's make_blobs: isotropic Gaussian blobs with known membership
    values, labels = make_blobs(n_samples=n, centers=CENTRES[:centers], cluster_std=spread,
                                random_state=seed)
    frame = pd.DataFrame(values, columns=FEATURES)
    frame.insert(0, "point", [f"p{i}" for i in range(n)])
    frame["blob"] = [f"blob {b}" for b in labels]
    return frame


@pytest.fixture(scope="module")
def four_blobs():
    return table_from_frame(_blobs(4), "blobs.csv")


def _truth(table, result):
    return table.frame["blob"].to_numpy()[result.positions]


@pytest.mark.parametrize("method", ["kmeans", "gmm", "agglomerative"],
                         ids=["k-means", "gaussian-mixture", "agglomerative"])
def test_methods_recover_blobs(four_blobs, method):
    result = ClusteringStep(method=method, k=4, compare="blob").run(four_blobs)
    # reference: scikit-learn's adjusted_rand_score against make_blobs' own labels
    ari = adjusted_rand_score(_truth(four_blobs, result), result.labels)
    assert ari == 1.0, f"{method}: adjusted Rand index {ari:.4f} against the blob labels"
    assert result.k == 4 and result.method == method
    assert "blob" not in result.features


def test_agreement_equals_scikit_learn_scores(four_blobs):
    # three clusters for four blobs: agreement is imperfect, so the numbers mean something
    result = ClusteringStep(method="kmeans", k=3, compare="blob").run(four_blobs)
    truth = _truth(four_blobs, result)
    # reference: sklearn.metrics.adjusted_rand_score and normalized_mutual_info_score
    assert result.agreement["ari"] == pytest.approx(adjusted_rand_score(truth, result.labels),
                                                    abs=1e-12)
    assert result.agreement["nmi"] == pytest.approx(
        normalized_mutual_info_score(truth, result.labels), abs=1e-12)
    assert result.agreement["ari"] < 1.0
    payload = result.to_json()
    assert set(payload["agreement"]) == {"ari", "nmi"}


@pytest.mark.parametrize("centers", [3, 5], ids=["three-blobs", "five-blobs"])
def test_auto_picks_the_number_of_blobs(centers):
    table = table_from_frame(_blobs(centers, seed=11), "blobs.csv")
    result = ClusteringStep(method="auto", compare="blob").run(table)
    assert result.k == centers, f"auto chose k = {result.k}: {result.reason}"
    assert result.agreement["ari"] == 1.0, f"adjusted Rand index {result.agreement['ari']}"
    # the sweep holds every method over k = 2..8 and the reason names the winner's score
    assert {(e.method, e.k) for e in result.sweep} == {
        (m, k) for m in ("kmeans", "gmm", "agglomerative") for k in range(2, 9)}
    assert "highest silhouette" in result.reason and f"k = {centers}" in result.reason


def test_gaussian_mixture_chooses_k_by_bic(four_blobs):
    result = ClusteringStep(method="gmm", k_range=(2, 6), columns=FEATURES).run(four_blobs)
    bics = {e.k: e.bic for e in result.sweep}
    assert set(bics) == {2, 3, 4, 5, 6} and all(b is not None for b in bics.values())
    assert result.k == 4 and min(bics, key=bics.get) == 4, f"BIC by k: {bics}"
    assert "lowest BIC" in result.reason


def test_silhouette_matches_scikit_learn(four_blobs):
    result = ClusteringStep(method="kmeans", k_range=(2, 5), columns=FEATURES).run(four_blobs)
    values = four_blobs.frame[FEATURES].to_numpy()
    values = (values - values.mean(axis=0)) / values.std(axis=0)
    chosen = [e for e in result.sweep if e.k == result.k][0]
    # reference: sklearn.metrics.silhouette_score on the standardized features
    assert chosen.silhouette == pytest.approx(silhouette_score(values, result.labels),
                                              abs=1e-10)
    assert result.silhouette == chosen.silhouette


def test_hdbscan_finds_blobs_and_marks_noise(four_blobs):
    result = ClusteringStep(method="hdbscan", compare="blob").run(four_blobs)
    truth = _truth(four_blobs, result)
    clustered = result.labels != -1
    ari = adjusted_rand_score(truth[clustered], result.labels[clustered])
    assert result.k == 4, f"HDBSCAN found {result.k} clusters"
    assert ari == 1.0, f"adjusted Rand index {ari:.4f} on the clustered rows"
    assert clustered.mean() >= 0.9, f"only {clustered.mean():.0%} of rows clustered"
    assert result.sweep[0].method == "hdbscan" and result.sweep[0].k is None


def test_profiles_are_cluster_means_in_table_units():
    frame = _blobs(3, seed=5)
    # a count that only the first blob has large values of, in the table's own units
    frame["count"] = np.where(frame["blob"] == "blob 0", 40, 2) + np.arange(len(frame)) % 3
    table = table_from_frame(frame, "blobs.csv")
    result = ClusteringStep(method="kmeans", k=3, columns=FEATURES + ["count"]).run(table)
    labels = pd.Series(result.labels, index=table.frame.index[result.positions])
    # reference: pandas groupby means of the untouched columns
    expected = table.frame.iloc[result.positions][FEATURES + ["count"]].groupby(
        labels.to_numpy()).mean()
    for profile in result.profiles:
        for name in FEATURES + ["count"]:
            assert profile.means[name] == pytest.approx(expected.loc[profile.cluster, name])
    high = [p for p in result.profiles if p.means["count"] > 30]
    assert len(high) == 1
    assert any(text.startswith("count high (mean 41") for text in high[0].distinguished_by), \
        high[0].distinguished_by
    assert sum(p.size for p in result.profiles) == len(frame)
    sizes = [p.size for p in result.profiles]
    assert sizes == sorted(sizes, reverse=True), "clusters are numbered from the largest"


def test_large_table_alternatives_are_stated(four_blobs, monkeypatch):
    # lower the thresholds so a small table takes the large-table path
    monkeypatch.setattr(clustering, "MINIBATCH_ROWS", 100)
    result = ClusteringStep(method="kmeans", k=4, compare="blob",
                            sample_size=120).run(four_blobs)
    notes = " ".join(result.notes)
    assert "mini-batch k-means" in notes
    assert "random sample of 120 of the 240 rows" in notes
    assert result.agreement["ari"] >= 0.99, f"mini-batch ARI {result.agreement['ari']:.4f}"
    agglomerative = ClusteringStep(method="agglomerative", k=4, compare="blob",
                                   sample_size=120).run(four_blobs)
    assert "agglomerative clustering (Ward) built on a random sample" in \
        " ".join(agglomerative.notes)
    assert agglomerative.agreement["ari"] == 1.0


def test_same_seed_same_clusters(four_blobs):
    step = ClusteringStep(method="auto", k_range=(3, 5), seed=2, columns=FEATURES)
    first, second = step.run(four_blobs), step.run(four_blobs)
    np.testing.assert_array_equal(first.labels, second.labels)
    assert first.to_json()["sweep"] == second.to_json()["sweep"]


def test_json_fields(four_blobs):
    result = ClusteringStep(method="kmeans", k=4).run(four_blobs)
    payload = result.to_json()
    for key in ("method", "k", "assignments", "sweep", "profiles", "reason", "notes"):
        assert key in payload
    assert "agreement" not in payload
    assert payload["assignments"][0] == {"row": "p0", "cluster": int(result.labels[0])}
    assert set(payload["sweep"][0]) >= {"method", "k", "silhouette", "bic"}
    assert make_step("clustering", step_params(ClusteringStep(k_range=(3, 4)))).k_range \
        == [3, 4]


@pytest.mark.parametrize("settings, message", [
    ({"method": "spectral"}, "clustering method 'spectral'"),
    ({"k": 1}, "k = 1"),
    ({"k_range": (5, 2)}, "k_range"),
    ({"k_range": [2]}, "k_range"),
    ({"compare": "blob", "columns": ["x1", "blob"]}, "cannot also be a feature"),
    ({"compare": "colour"}, "no column named 'colour'"),
    ({"k": 500}, "k = 500 clusters need more than 500 rows"),
], ids=["unknown-method", "k-one", "k-range-reversed", "k-range-short", "compare-as-feature",
        "compare-missing", "k-too-large"])
def test_bad_settings_are_refused(four_blobs, settings, message):
    from analysis.errors import ScoutError

    with pytest.raises(ScoutError, match=message):
        ClusteringStep(**settings).run(four_blobs)


def test_step_errors_are_step_errors(four_blobs):
    with pytest.raises(StepError, match="use one of"):
        ClusteringStep(method="nope").run(four_blobs)
