"""The dask engine: each step on a local cluster gives the in-memory answer where it is exact.

Tables are small and written as folders of four Parquet files, so every step really runs
over several partitions; the in-memory reference reads the same rows from one file. One
local cluster (one worker thread on 127.0.0.1) serves the module and is checked closed at the
end; separate tests check that clusters are closed after errors too.
"""

from __future__ import annotations

import re
import socket
import subprocess
import sys
import threading
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

pytest.importorskip("dask.dataframe")
pytest.importorskip("distributed")

from conftest import write_parts  # noqa: E402

from analysis.clustering import ClusteringStep  # noqa: E402
from analysis.distributed import open_cluster, read_partitioned, run_distributed  # noqa: E402
from analysis.errors import StepError, TableError  # noqa: E402
from analysis.notes import note_code  # noqa: E402
from analysis.overview import OverviewStep  # noqa: E402
from analysis.projection import ProjectionStep  # noqa: E402
from analysis.relations import RelationsStep  # noqa: E402
from analysis.separation import SeparatorStep  # noqa: E402
from analysis.table import load_table  # noqa: E402

ROOT = Path(__file__).resolve().parents[1]
# dask's Parquet reader calls a pandas method pandas 3.1 deprecates; not ours to change
pytestmark = pytest.mark.filterwarnings("ignore:The inplace keyword in DataFrame.reset_index")


@pytest.fixture(scope="module")
def client():
    with open_cluster(n_workers=1) as active:
        yield active
    # the module's cluster is closed once the block ends
    assert active.status == "closed"


@pytest.fixture(scope="module")
def mixed(tmp_path_factory):
    """Integers, reals with a missing cell, a flag, a category and an id column."""
    rng = np.random.default_rng(7)
    n = 1200
    frame = pd.DataFrame({
        "name": [f"object-{i}" for i in range(n)],
        "a": rng.integers(0, 10, n),
        "b": rng.integers(-5, 5, n),
        "c": rng.normal(size=n),
        "flag": rng.integers(0, 2, n),
        "kind": rng.choice(["x", "y", "z"], n),
    })
    frame["d"] = 2 * frame["a"] - 3 * frame["b"] + 1
    frame.loc[5, "c"] = np.nan
    return write_parts(frame, tmp_path_factory.mktemp("mixed") / "mixed")


@pytest.fixture(scope="module")
def planted(tmp_path_factory):
    """Integer invariants with a planted rule: label is 2*x0 - x1 >= 3, except 3 flipped rows.

    s = x0 + 2*x1 - x2 + 3 holds on every row; t = 2*x3 + 1 on all but rows 17, 901, 1999.
    """
    rng = np.random.default_rng(11)
    n = 2400
    frame = pd.DataFrame({f"x{i}": rng.integers(-9, 10, n) for i in range(5)})
    frame["s"] = frame.x0 + 2 * frame.x1 - frame.x2 + 3
    frame["t"] = 2 * frame.x3 + 1
    frame.loc[[17, 901, 1999], "t"] += 1
    label = 2 * frame.x0 - frame.x1 >= 3
    flipped = [40, 1000, 2300]
    label[flipped] = ~label[flipped]
    frame["label"] = label
    folder, whole = write_parts(frame, tmp_path_factory.mktemp("planted") / "planted")
    return folder, whole, flipped


# ----------------------------------------------------------------------------------------
# Reading in partitions


def test_reading_types_columns_as_in_memory(client, mixed):
    folder, whole = mixed
    table = read_partitioned(folder, client)
    assert table.npartitions == 4
    assert table.partition_rows == (300, 300, 300, 300)
    assert table.columns == load_table(whole).columns
    assert table.id_column == "name"


def test_csv_is_read_in_blocks_with_the_same_types(client, mixed, tmp_path):
    _, whole = mixed
    path = tmp_path / "mixed.csv"
    pd.read_parquet(whole).to_csv(path, index=False)
    table = read_partitioned(path, client, blocksize=8_000)
    assert table.npartitions > 2, f"the CSV was read in {table.npartitions} blocks"
    assert table.columns == load_table(path).columns


def test_csv_column_with_numbers_then_a_word_is_marked_numbers(client, tmp_path):
    path = tmp_path / "late_text.csv"
    values = [str(i) for i in range(3000)] + ["seven"]
    pd.DataFrame({"code": values, "n": range(len(values))}).to_csv(path, index=False)
    table = read_partitioned(path, client, blocksize=4_000)
    assert table.npartitions > 2
    # numbers with one word among them, the word only in the last block: marked numbers on
    # both engines, an integer invariant with the word counted as missing
    assert table.columns == load_table(path).columns
    assert (table.column("code").dtype, table.column("code").markers) == \
        ("integer", {"seven": 1})


@pytest.fixture(scope="module")
def atlas(tmp_path_factory):
    """networkx's graph atlas (1 to 7 vertices) written as a downloaded database writes it.

    girth is "infty" for a forest and diameter "D.N.E." for a disconnected graph; the
    chromatic number is exact for graphs with at most two colours and otherwise the interval
    [3, max degree + 1] (an odd cycle needs 3 colours; a greedy colouring uses at most
    max degree + 1: both common practice), a single number when the two ends meet.
    """
    nx = pytest.importorskip("networkx")
    rows = []
    for k, graph in enumerate(nx.graph_atlas_g()[1:], start=1):
        degrees = [d for _, d in graph.degree()]
        top = max(degrees)
        if nx.is_bipartite(graph):
            chromatic = str(1 if graph.number_of_edges() == 0 else 2)
        else:
            chromatic = "3" if top + 1 == 3 else f"[3,{top + 1}]"
        girth = nx.girth(graph)
        rows.append({
            "graph": f"G{k:04d}", "vertices": graph.number_of_nodes(),
            "edges": graph.number_of_edges(), "degree_sum": sum(degrees),
            "girth": "infty" if girth == float("inf") else str(girth),
            "diameter": str(nx.diameter(graph)) if nx.is_connected(graph) else "D.N.E.",
            "chromatic": chromatic, "bipartite": nx.is_bipartite(graph),
        })
    frame = pd.DataFrame(rows)
    folder, whole = write_parts(frame, tmp_path_factory.mktemp("atlas") / "atlas")
    return folder, whole, frame


def test_marked_numbers_read_as_in_memory(client, atlas, tmp_path):
    folder, whole, frame = atlas
    in_memory = load_table(whole)
    path = tmp_path / "atlas.csv"
    frame.to_csv(path, index=False)
    for table in (read_partitioned(folder, client),
                  read_partitioned(path, client, blocksize=6_000)):
        assert table.npartitions > 2
        assert table.columns == in_memory.columns
    girth, diameter = table.column("girth"), table.column("diameter")
    chromatic = table.column("chromatic")
    assert (girth.dtype, girth.role, diameter.dtype, chromatic.dtype) == \
        ("integer", "invariant", "integer", "integer")
    # counted independently from the frame written from networkx's atlas
    assert girth.markers == {"infty": int((frame.girth == "infty").sum())}
    assert diameter.markers == {"D.N.E.": int((frame.diameter == "D.N.E.").sum())}
    assert chromatic.intervals == int(frame.chromatic.str.startswith("[").sum()) > 0
    assert chromatic.missing == chromatic.intervals
    overview = run_distributed(OverviewStep(), folder, client=client)
    expected = OverviewStep().run(in_memory)
    assert [c.to_json() for c in overview.columns if c.name in ("girth", "chromatic")] == \
        [c.to_json() for c in expected.columns if c.name in ("girth", "chromatic")]


def test_marked_numbers_asked_for_as_an_invariant(client, tmp_path):
    # words in half the cells: text unless the user asks for an invariant (common practice)
    frame = pd.DataFrame({"score": ["3", "n/a yet", "[2,4]", "unknown"] * 30,
                          "v": range(120)})
    folder, whole = write_parts(frame, tmp_path / "asked", parts=3)
    assert read_partitioned(folder, client).column("score").dtype == "text"
    table = read_partitioned(folder, client, roles={"score": "invariant"})
    assert table.columns == load_table(whole, roles={"score": "invariant"}).columns
    score = table.column("score")
    assert (score.dtype, score.intervals, score.markers) == \
        ("integer", 30, {"n/a yet": 30, "unknown": 30})


def test_csv_array_text_is_read_as_arrays_and_a_bad_cell_named(client, tmp_path):
    path = tmp_path / "matrices.csv"
    cells = [f"[[{i % 3}, 1], [1, 0]]" for i in range(2000)]
    pd.DataFrame({"m": cells, "v": range(2000)}).to_csv(path, index=False)
    table = read_partitioned(path, client, blocksize=8_000)
    assert table.npartitions > 2
    in_memory = load_table(path).column("m")
    assert (table.column("m").dtype, table.column("m").role) == \
        (in_memory.dtype, in_memory.role) == ("array", "array")
    overview = run_distributed(OverviewStep(), path, client=client)
    assert overview.columns[0].common == (("shape 2x2", 2000),)
    cells[1500] = "[[1, 2], [3]]"   # a ragged matrix in a later block
    pd.DataFrame({"m": cells, "v": range(2000)}).to_csv(path, index=False)
    with pytest.raises(TableError, match="row 1501, column 'm': a ragged matrix"):
        read_partitioned(path, client, blocksize=8_000)
    with pytest.raises(TableError, match="row 1501, column 'm': a ragged matrix"):
        load_table(path)


def test_cut_off_lists_are_missing_and_counted_as_in_memory(client, tmp_path):
    # common practice in exported tables: long lists cut short with an ellipsis, "?" where a
    # list is unknown; the full lists come from sympy.divisors
    import sympy

    cells = []
    for n in range(2, 2002):
        full = sympy.divisors(n)
        cells.append("?" if n % 11 == 0 else
                     "[" + ", ".join(map(str, full[:3])) + ", ...]" if len(full) > 8 else
                     str(full))
    path = tmp_path / "divisors.csv"
    pd.DataFrame({"n": range(2, 2002), "divisors": cells}).to_csv(path, index=False)
    table = read_partitioned(path, client, blocksize=8_000)
    assert table.npartitions > 2
    in_memory = load_table(path).column("divisors")
    ours = table.column("divisors")
    assert (ours.dtype, ours.missing, ours.markers, ours.note) == (
        in_memory.dtype, in_memory.missing, in_memory.markers, in_memory.note)
    assert ours.markers == {"?": cells.count("?"),
                            "[\u2026]": sum(c.endswith("...]") for c in cells)}


def test_lists_in_braces_are_arrays_as_in_memory(client, tmp_path):
    # degree sequences in braces, as database dumps write arrays; networkx's graph atlas
    import networkx as nx

    atlas = nx.graph_atlas_g()[1:]
    cells = ["{" + ",".join(map(str, sorted((d for _, d in g.degree()), reverse=True))) + "}"
             for g in atlas]
    frame = pd.DataFrame({"n": [g.number_of_nodes() for g in atlas], "degrees": cells})
    folder, whole = write_parts(frame, tmp_path / "braces", parts=3)
    table = read_partitioned(folder, client)
    in_memory = load_table(whole)
    assert table.column("degrees").dtype == in_memory.column("degrees").dtype == "array"
    overview = run_distributed(OverviewStep(), folder, client=client)
    assert overview.to_json()["columns"] == OverviewStep().run(in_memory).to_json()["columns"]


def test_a_reversed_interval_is_named(client, tmp_path):
    frame = pd.DataFrame({"v": ["1", "2", "[5,3]", "4", "x", "6", "7", "8"]})
    folder, whole = write_parts(frame, tmp_path / "reversed", parts=2)
    with pytest.raises(TableError, match=r"row 3, column 'v': the interval '\[5,3\]' has its "
                                         "low end 5 above its high end 3"):
        read_partitioned(folder, client)
    with pytest.raises(TableError, match="row 3.*low end 5 above its high end 3"):
        load_table(whole)


def test_steps_drop_the_missing_cells_of_marked_numbers(client, atlas, monkeypatch):
    import analysis.distributed.relations as engine

    folder, whole, frame = atlas
    monkeypatch.setattr(engine, "SAMPLE_ROWS", 400)
    step = RelationsStep(columns=["vertices", "edges", "degree_sum", "girth"])
    result = run_distributed(step, folder, client=client)
    expected = step.run(load_table(whole))
    assert result.n_rows == expected.n_rows == len(frame)
    assert [r.to_json() for r in result.relations] == [r.to_json() for r in expected.relations]
    # girth is searched on the graphs with a cycle only: a forest's "infty" is a missing cell
    searched = [n for n in result.notes if "searched on the rows where they are present" in n]
    assert searched and searched == [n for n in expected.notes if n in searched]
    exact_bounds = [b.to_json() for b in result.bounds if not b.violations]
    assert exact_bounds == [b.to_json() for b in expected.bounds if not b.violations]
    assert any("girth" in b["text"] for b in exact_bounds)
    # the handshake lemma: the degrees add up to twice the number of edges (Euler, 1736)
    assert "2*edges - degree_sum = 0" in {r.text for r in result.relations}
    separator = SeparatorStep(target="bipartite", columns=["edges", "diameter"],
                              permutations=10, repeats=2)
    found = run_distributed(separator, folder, client=client)
    wanted = separator.run(load_table(whole))
    connected = int((frame.diameter != "D.N.E.").sum())
    assert found.equation.n_rows == wanted.equation.n_rows == connected


def _absent(folder: Path) -> Path:
    return folder / "absent.parquet"


def _empty_folder(folder: Path) -> Path:
    (folder / "empty").mkdir()
    (folder / "empty" / "notes.txt").write_text("no tables here")
    return folder / "empty"


def _corrupt(folder: Path) -> Path:
    (folder / "bad.parquet").write_bytes(b"PAR1 this is not a Parquet file PAR1")
    return folder / "bad.parquet"


@pytest.mark.parametrize("make, message", [
    (_absent, "absent.parquet: no such file"),
    (_empty_folder, "no Parquet files"),
    (_corrupt, "bad.parquet: not readable as Parquet"),
], ids=["missing file", "folder without parquet", "corrupt parquet"])
def test_bad_input_is_a_table_error(client, tmp_path, make, message):
    with pytest.raises(TableError, match=message):
        read_partitioned(make(tmp_path), client)


def test_duplicate_id_is_named(client, tmp_path):
    folder, _ = write_parts(pd.DataFrame({"key": [1, 2, 2, 3], "v": [5, 6, 7, 8]}),
                            tmp_path / "dup", parts=2)
    with pytest.raises(TableError, match="'key' cannot be the id"):
        read_partitioned(folder, client, id_column="key")


def test_array_columns_are_left_out_by_default_and_refused_by_name(client, tmp_path):
    frame = pd.DataFrame({"m": [[1, 2], [3, 4], [5, 6], [7, 9]], "v": [1, 5, 2, 8],
                          "w": [2, 1, 4, 3]})
    folder, _ = write_parts(frame, tmp_path / "arrays", parts=2)
    result = run_distributed(ProjectionStep(), folder, client=client)
    assert result.features == ("v", "w")
    assert any("left out of the features on the dask engine" in n and "m" in n
               for n in result.notes)
    with pytest.raises(StepError, match="'m' holds arrays"):
        run_distributed(ProjectionStep(columns=["m", "v"]), folder, client=client)


# ----------------------------------------------------------------------------------------
# Overview


def test_overview_equals_in_memory_and_pandas(client, mixed):
    folder, whole = mixed
    result = run_distributed(OverviewStep(), folder, client=client)
    expected = OverviewStep().run(load_table(whole))
    assert result.rows == expected.rows == 1200
    assert [c.name for c in result.columns] == [c.name for c in expected.columns]
    reference = pd.read_parquet(whole)   # pandas as the independent reference
    for got, want in zip(result.columns, expected.columns):
        assert (got.role, got.dtype, got.missing, got.distinct, got.common) == \
            (want.role, want.dtype, want.missing, want.distinct, want.common), got.name
        assert got.distinct == reference[got.name].nunique()
        if want.minimum is not None:
            assert got.minimum == want.minimum and got.maximum == want.maximum
            assert got.mean == pytest.approx(reference[got.name].mean(), rel=1e-12)
    assert result.correlations == pytest.approx(expected.correlations) or \
        [p[:2] for p in result.correlations] == [p[:2] for p in expected.correlations]


# ----------------------------------------------------------------------------------------
# Projection


def test_pca_ratios_and_coordinates_equal_in_memory(client, mixed):
    folder, whole = mixed
    step = ProjectionStep(method="pca", columns=["a", "b", "c", "d", "flag"])
    result = run_distributed(step, folder, client=client)
    expected = step.run(load_table(whole))
    np.testing.assert_allclose(result.explained_variance_ratio,
                               expected.explained_variance_ratio, atol=1e-6)
    np.testing.assert_array_equal(result.row_ids, expected.row_ids)
    np.testing.assert_allclose(result.x, expected.x, atol=1e-8)
    np.testing.assert_allclose(result.y, expected.y, atol=1e-8)
    # the reference: eigenvalues of the correlation matrix of the rows with every value
    # (PCA of standardized features, common practice); d = 2a - 3b + 1 adds a zero eigenvalue
    kept = pd.read_parquet(whole)[["a", "b", "c", "d", "flag"]].dropna().to_numpy(float)
    eigen = np.sort(np.linalg.eigvalsh(np.corrcoef(kept, rowvar=False)))[::-1]
    np.testing.assert_allclose(result.explained_variance_ratio, eigen / eigen.sum(), atol=1e-9)
    assert any("ran on a Dask cluster" in note for note in result.notes)


def test_imputed_missing_values_use_the_median_of_every_row(client, mixed):
    folder, whole = mixed
    step = ProjectionStep(method="pca", columns=["a", "c", "kind"], missing="impute")
    result = run_distributed(step, folder, client=client)
    expected = step.run(load_table(whole))
    assert len(result.row_ids) == 1200
    np.testing.assert_allclose(result.explained_variance_ratio,
                               expected.explained_variance_ratio, atol=1e-9)
    np.testing.assert_allclose(result.x, expected.x, atol=1e-8)
    # the in-memory step's note, word for word
    assert [n for n in result.notes if n.startswith("filled")] == \
        [n for n in expected.notes if n.startswith("filled")]


def test_pca_of_iris_matches_the_documented_ratios(client, tmp_path):
    datasets = pytest.importorskip("sklearn.datasets")
    iris = datasets.load_iris(as_frame=True).data
    iris.columns = ["sepal_length", "sepal_width", "petal_length", "petal_width"]
    folder, _ = write_parts(iris, tmp_path / "iris", parts=3)
    result = run_distributed(ProjectionStep(method="pca"), folder, client=client)
    # standardized iris: 72.96%, 22.85%, 3.67%, 0.52% of the variance (from memory; the
    # figures scikit-learn's PCA gives on StandardScaler output)
    np.testing.assert_allclose(result.explained_variance_ratio,
                               [0.7296, 0.2285, 0.0367, 0.0052], atol=5e-4)


def test_sampled_methods_say_so_and_keep_row_ids(client, mixed, monkeypatch):
    import analysis.distributed.projection as engine

    folder, whole = mixed
    monkeypatch.setattr(engine, "LDA_SAMPLE_ROWS", 200)
    step = ProjectionStep(method="lda", target="kind", columns=["a", "b", "d"])
    result = run_distributed(step, folder, client=client)
    assert result.sampled and len(result.row_ids) == 200
    names = pd.read_parquet(whole)["name"].to_numpy()
    # each projected row keeps its own id and its position in the whole table
    np.testing.assert_array_equal(names[result.positions], result.row_ids)
    assert any("uniform random sample of 200" in note for note in result.notes)


# ----------------------------------------------------------------------------------------
# Clustering


def test_kmeans_agrees_with_in_memory_and_finds_the_blobs(client, tmp_path):
    datasets = pytest.importorskip("sklearn.datasets")
    metrics = pytest.importorskip("sklearn.metrics")
    points, truth = datasets.make_blobs(n_samples=900, centers=3, n_features=3,
                                        cluster_std=1.0, random_state=4)
    frame = pd.DataFrame(points, columns=["u", "v", "w"])
    folder, whole = write_parts(frame, tmp_path / "blobs")
    step = ClusteringStep(method="kmeans", k=3)
    result = run_distributed(step, folder, client=client)
    expected = step.run(load_table(whole))
    agreement = metrics.adjusted_rand_score(result.labels, expected.labels)
    assert agreement >= 0.99, f"adjusted Rand index with the in-memory labels {agreement:.3f}"
    found = metrics.adjusted_rand_score(truth, result.labels)
    assert found >= 0.99, f"adjusted Rand index with the generating blobs {found:.3f}"
    assert sorted(p.size for p in result.profiles) == sorted(p.size for p in expected.profiles)
    assert any("Lloyd iterations" in note for note in result.notes)


# ----------------------------------------------------------------------------------------
# Separator


def test_separator_equation_and_violations_equal_in_memory(client, planted, monkeypatch):
    import analysis.distributed.separation as engine

    folder, whole, flipped = planted
    # the protocol runs on a sample smaller than the table, so the threshold choice and the
    # check on every row across partitions are what make the answer exact
    monkeypatch.setattr(engine, "SAMPLE_ROWS", 800)
    step = SeparatorStep(target="label", columns=["x0", "x1", "x2", "x3", "x4"],
                         permutations=10, repeats=2)
    result = run_distributed(step, folder, client=client)
    expected = step.run(load_table(whole))
    assert result.equation.text == expected.equation.text == "2*x0 - x1 >= 3"
    # the planted flips are exactly the rows that break the rule
    assert sorted(result.equation.violating_rows) == sorted(expected.equation.violating_rows) \
        == flipped
    assert result.equation.n_rows == 2400
    # the positive class counted on every row, not on the sample the search ran on
    rows = load_table(whole).frame["label"] == result.equation.positive_class
    assert result.equation.positives == expected.equation.positives == int(rows.sum())
    assert result.train_rows + result.test_rows == 800


# ----------------------------------------------------------------------------------------
# Relations


def test_relations_and_breakers_equal_in_memory(client, planted, monkeypatch):
    import analysis.distributed.relations as engine

    folder, whole, _ = planted
    monkeypatch.setattr(engine, "SAMPLE_ROWS", 300)
    step = RelationsStep(columns=["x0", "x1", "x2", "x3", "s", "t"])
    result = run_distributed(step, folder, client=client)
    expected = step.run(load_table(whole))
    assert [r.to_json() for r in result.relations] == [r.to_json() for r in expected.relations]
    texts = {r.text: r for r in result.relations}
    assert texts["x0 + 2*x1 - x2 - s = -3"].violations == ()
    assert sorted(texts["2*x3 - t = -1"].violations) == [17, 901, 1999]
    exact_bounds = [b.to_json() for b in result.bounds if not b.violations]
    assert exact_bounds == [b.to_json() for b in expected.bounds if not b.violations]
    assert result.n_rows == 2400


def test_congruences_equal_in_memory_and_follow_picks_theorem(client, tmp_path, monkeypatch):
    import math

    import analysis.distributed.relations as engine

    # Lattice triangles: by Pick's theorem (Pick, 1899) A = I + B/2 - 1, so twice the area
    # 2A = 2I + B - 2 has the parity of the boundary point count B. B is counted as the sum of
    # gcd(|dx|, |dy|) over the edges (common practice), 2A as the absolute cross product.
    rng = np.random.default_rng(3)
    rows = []
    while len(rows) < 1200:
        (x0, y0), (x1, y1), (x2, y2) = rng.integers(-7, 8, size=(3, 2)).tolist()
        twice_area = abs((x1 - x0) * (y2 - y0) - (x2 - x0) * (y1 - y0))
        if twice_area == 0:
            continue
        boundary = sum(math.gcd(abs(a - c), abs(b - d)) for (a, b), (c, d) in
                       [((x0, y0), (x1, y1)), ((x1, y1), (x2, y2)), ((x2, y2), (x0, y0))])
        rows.append({"twice_area": twice_area, "boundary": boundary,
                     "width": max(x0, x1, x2) - min(x0, x1, x2)})
    frame = pd.DataFrame(rows)
    breakers = [250, 1111]
    frame.loc[breakers, "boundary"] += 1   # two rows written wrong, breaking the parity
    folder, whole = write_parts(frame, tmp_path / "pick")
    monkeypatch.setattr(engine, "SAMPLE_ROWS", 400)
    step = RelationsStep(columns=["twice_area", "boundary", "width"])
    result = run_distributed(step, folder, client=client)
    expected = step.run(load_table(whole))
    assert [c.to_json() for c in result.congruences] == \
        [c.to_json() for c in expected.congruences]
    found = {c.text: c for c in result.congruences}
    parity = found["twice_area + boundary ≡ 0 (mod 2)"]
    assert (parity.violations, parity.violation_count, parity.holds_on) == \
        (tuple(breakers), 2, 1200)
    assert any("congruences proposed on a uniform random sample of 400 rows" in note
               for note in result.notes)


def test_congruences_keep_the_strongest_modulus_and_missing_cells_as_in_memory(
        client, tmp_path, monkeypatch):
    import analysis.distributed.relations as engine

    rng = np.random.default_rng(8)
    n = rng.integers(-60, 61, 1500)
    odd = 2 * rng.integers(0, 40, 1500) + 1
    frame = pd.DataFrame({"n": n, "square": n**2, "cube": n**3, "odd_square": odd**2})
    frame.loc[[77, 1400], "cube"] += 1          # two rows written wrong
    frame["odd_square"] = frame["odd_square"].astype(object)
    frame.loc[[5, 600], "odd_square"] = "-"     # a marker word: two missing cells
    frame["odd_square"] = frame["odd_square"].astype(str)
    folder, whole = write_parts(frame, tmp_path / "powers")
    monkeypatch.setattr(engine, "SAMPLE_ROWS", 500)
    step = RelationsStep()
    result = run_distributed(step, folder, client=client)
    expected = step.run(load_table(whole))
    assert [c.to_json() for c in result.congruences] == \
        [c.to_json() for c in expected.congruences]
    found = {c.text: c for c in result.congruences}
    # an odd square is 1 mod 8 (Hardy and Wright, An Introduction to the Theory of Numbers,
    # from memory), which makes the same fact mod 2 and mod 4 redundant; checked on the rows
    # where the column has a value
    square = found["odd_square ≡ 1 (mod 8)"]
    assert (square.implied_moduli, square.holds_on) == ((2, 4), 1498)
    # n^3 - n = (n - 1) n (n + 1) is divisible by 6 (common practice): broken by the two rows
    cube = found["n - cube ≡ 0 (mod 6)"]
    assert (cube.violations, cube.implied_moduli) == ((77, 1400), (2, 3))


# ----------------------------------------------------------------------------------------
# Clusters are closed


def _port_open(address: str) -> bool:
    host, port = address.rsplit("/", 1)[-1].rsplit(":", 1)
    with socket.socket() as probe:
        probe.settimeout(0.5)
        return probe.connect_ex((host, int(port))) == 0


def test_local_cluster_listens_on_loopback_and_is_closed_after_an_error():
    threads_before = {t.ident for t in threading.enumerate()}
    with pytest.raises(RuntimeError, match="inside the block"):
        with open_cluster(n_workers=1) as active:
            address = active.scheduler.address
            assert address.startswith("tcp://127.0.0.1:")
            assert _port_open(address)
            raise RuntimeError("inside the block")
    assert active.status == "closed"
    assert not _port_open(address), "the scheduler still listens after the block"
    import multiprocessing

    assert multiprocessing.active_children() == []
    leftover = [t for t in threading.enumerate()
                if t.ident not in threads_before and t.is_alive() and not t.daemon]
    assert leftover == []


def test_dask_informational_logs_stay_off_the_terminal_while_a_cluster_is_open():
    # a connection closed at shutdown is logged by distributed at INFO with its traceback;
    # a user of the command line must not see a traceback after a step that succeeded
    import logging

    logger = logging.getLogger("distributed")
    before = logger.level
    with open_cluster(n_workers=1):
        assert not logger.isEnabledFor(logging.INFO)
        assert logger.isEnabledFor(logging.WARNING)
    assert logger.level == before


def test_a_local_cluster_has_all_its_workers_before_the_first_step(mixed):
    # distributed's Client.wait_for_workers(n) returns once n workers have joined the
    # scheduler (its documentation); without it a step could start, and its note count,
    # before the second worker had registered
    folder, _ = mixed
    from analysis.distributed.cluster import workers_of

    with open_cluster(n_workers=2) as active:
        assert len(workers_of(active)) == 2
        result = run_distributed(OverviewStep(), folder, client=active)
    engine = [n for n in result.notes if note_code(n) == "dask_engine"]
    assert [n.figures["workers"] for n in engine] == [2]
    assert "ran on a Dask cluster (2 workers at tcp://127.0.0.1:" in str(engine[0])


def test_unreachable_scheduler_is_a_step_error(tmp_path):
    with socket.socket() as spare:
        spare.bind(("127.0.0.1", 0))
        port = spare.getsockname()[1]   # nothing listens here once closed
    with pytest.raises(StepError, match="cannot reach the dask scheduler"):
        with open_cluster(f"127.0.0.1:{port}"):
            pass


def test_command_line_runs_pca_on_dask(mixed, tmp_path):
    _, whole = mixed
    out = tmp_path / "pca.json"
    done = subprocess.run(
        [sys.executable, "-m", "analysis", "project", str(whole), "--method", "pca",
         "--features", "a,b,c,d", "--engine", "dask", "--json", str(out)],
        cwd=ROOT, capture_output=True, text=True, timeout=180)
    assert done.returncode == 0, done.stderr
    assert "PCA of 1199 rows" in done.stdout
    assert "ran on a Dask cluster" in done.stdout
    import json

    payload = json.loads(out.read_text())
    assert len(payload["coordinates"]) == 1199
    assert len(payload["explained_variance_ratio"]) == 4


def test_command_line_inspect_reports_marked_numbers_as_in_memory(tmp_path):
    import csv
    import json

    table = ROOT / "sample_tables" / "graphs_as_downloaded.csv"
    payloads = {}
    for engine in ("local", "dask"):
        out = tmp_path / f"{engine}.json"
        done = subprocess.run(
            [sys.executable, "-m", "analysis", "inspect", str(table), "--engine", engine,
             "--json", str(out)], cwd=ROOT, capture_output=True, text=True, timeout=180)
        assert done.returncode == 0, done.stderr
        payload = json.loads(out.read_text())
        payloads[engine] = {c["name"]: c for c in payload["columns"]}
        payloads[engine + " warnings"] = payload["warnings"]
    # labels written with stray spaces are merged, with the same warning, on both engines
    assert payloads["dask warnings"] == payloads["local warnings"]
    assert any("'family'" in w for w in payloads["dask warnings"])
    payloads = {"local": payloads["local"], "dask": payloads["dask"]}
    facts = ("dtype", "role", "intervals", "markers", "missing")
    assert list(payloads["dask"]) == list(payloads["local"])
    for name in payloads["local"]:
        assert [payloads["dask"][name][k] for k in facts] == \
            [payloads["local"][name][k] for k in facts], name
    with table.open(newline="", encoding="utf-8") as handle:
        cells = list(csv.DictReader(handle))   # the csv module as the independent count
    girth, chromatic = payloads["dask"]["girth"], payloads["dask"]["chromatic_number"]
    assert girth["markers"] == {"infty": sum(r["girth"] == "infty" for r in cells)}
    assert chromatic["intervals"] == sum(r["chromatic_number"].startswith("[") for r in cells)
    assert (girth["dtype"], chromatic["dtype"]) == ("integer", "integer")


# ----------------------------------------------------------------------------------------
# Objects to look at


def test_objects_to_look_at_equal_in_memory_and_find_planted_rows(client, tmp_path):
    from analysis.outliers import OutliersStep

    rng = np.random.default_rng(5)
    frame = pd.DataFrame(rng.normal(size=(600, 3)), columns=["p", "q", "r"])
    planted = [77, 310, 555]
    frame.loc[planted, ["p", "q"]] = [[9.0, -9.0], [-8.5, 8.0], [10.0, 10.0]]
    folder, whole = write_parts(frame, tmp_path / "far")
    step = OutliersStep(k=2, relations=False, top=10)
    result = run_distributed(step, folder, client=client)
    expected = step.run(load_table(whole))
    # rows placed far from a standard normal cloud come first (by construction)
    assert sorted(o.row for o in result.outliers[:3]) == planted
    assert [o.row for o in result.outliers] == [o.row for o in expected.outliers]
    np.testing.assert_array_equal(result.row_ids, expected.row_ids)
    # scores are standings (ranks over 599 other rows); k-means run to scikit-learn's
    # tolerance on each engine may move a row by a few ranks, no more
    moved = np.abs(result.scores - expected.scores).max() * 599
    assert moved <= 5, f"a row's standing moved by {moved:.1f} ranks"


def _relations_json(table, folder, *options) -> dict:
    """The relations step's JSON as the command line writes it for ``table``."""
    import json

    out = folder / "out.json"
    done = subprocess.run(
        [sys.executable, "-m", "analysis", "relations", str(table), *options,
         "--json", str(out)], cwd=ROOT, capture_output=True, text=True, timeout=600)
    assert done.returncode == 0, done.stderr
    return json.loads(out.read_text())


def test_sample_table_relations_with_big_integers_and_rationals_equal_in_memory(tmp_path):
    # lattice polygons: the areas are rationals (7/2) and the lattice point counts of the
    # dilated polygons lie far past 64 bits; the Dask engine searches every column and finds
    # what the in-memory engine finds, statement for statement
    table = ROOT / "sample_tables" / "lattice_polygons.csv"
    partitioned = _relations_json(table, tmp_path, "--engine", "dask")
    memory = _relations_json(table, tmp_path)
    assert partitioned["columns"] == memory["columns"]
    assert {"area", "points_in_dilate_1e12"} <= set(partitioned["columns"])
    for key in ("relations", "bounds", "congruences"):
        assert partitioned[key] == memory[key], key
    texts = {r["text"] for r in partitioned["relations"] if not r["violations"]}
    # Pick's theorem (Pick, 1899): 2A = 2I + B - 2, with 2A the twice_area column
    assert "twice_area - 2*interior_points - boundary_points = -2" in texts
    assert "2*area - twice_area = 0" in texts
    # Ehrhart's theorem for a lattice polygon (from memory): the dilate by t holds
    # A t^2 + (B/2) t + 1 lattice points; at t = 10**12, with A = twice_area / 2
    assert (f"{10**24 // 2}*twice_area + {10**12 // 2}*boundary_points - "
            "points_in_dilate_1e12 = -1") in texts
    assert not any("left out" in n for n in partitioned["notes"])


def test_sample_table_pca_with_the_matrix_column_left_out_equals_in_memory(tmp_path):
    # networkx's graph atlas: the adjacency matrices are left out on Dask, said so; the PCA of
    # the other columns equals the in-memory PCA of the same columns
    import json

    table = ROOT / "sample_tables" / "graphs_up_to_7.csv"

    def run(*options):
        out = tmp_path / "out.json"
        done = subprocess.run(
            [sys.executable, "-m", "analysis", "project", str(table), "--method", "pca",
             *options, "--json", str(out)], cwd=ROOT, capture_output=True, text=True,
            timeout=300)
        assert done.returncode == 0, done.stderr
        return json.loads(out.read_text())

    partitioned = run("--engine", "dask")
    assert any("adjacency" in n and "left out" in n for n in partitioned["notes"])
    columns = sorted({name.split("=")[0] for name in partitioned["features"]})
    assert "adjacency" not in columns
    memory = run("--features", ",".join(columns))
    assert sorted(memory["features"]) == sorted(partitioned["features"])
    assert memory["n_projected"] == partitioned["n_projected"]
    assert memory["explained_variance_ratio"] == pytest.approx(
        partitioned["explained_variance_ratio"], abs=1e-9)


@pytest.mark.parametrize("name", ["elliptic_curves.csv", "quadratic_fields.csv",
                                  "graphs_as_downloaded.csv"])
def test_sample_table_relations_are_the_same_on_both_engines(tmp_path, name):
    # the command line as a user runs it, on each engine: the same relations, bounds and
    # congruences, with the same breakers, on the columns the Dask engine searched
    table = ROOT / "sample_tables" / name
    partitioned = _relations_json(table, tmp_path, "--engine", "dask")
    memory = _relations_json(table, tmp_path, "--columns", ",".join(partitioned["columns"]))
    assert partitioned["relations"] or partitioned["bounds"], "something was found"
    for key in ("relations", "bounds", "congruences"):
        assert [(r["text"], r["violations"]) for r in partitioned[key]] == \
            [(r["text"], r["violations"]) for r in memory[key]], key


def test_the_separators_reasons_name_only_labels_its_sample_had(client, tmp_path,
                                                                 monkeypatch):
    import analysis.distributed.outliers as engine
    from analysis.outliers import OutliersStep
    from analysis.projection import sample_positions

    monkeypatch.setattr(engine, "SAMPLE_ROWS", 200)
    rng = np.random.default_rng(8)
    frame = pd.DataFrame(rng.normal(size=(600, 2)), columns=["p", "q"])
    frame["label"] = np.where(frame.p > 0, "b", "c")
    # three rows labelled 'a', none of them in the sample the separator is fitted on (the
    # engine draws it with seed + 1)
    outside = np.setdiff1d(np.arange(600), sample_positions(600, 200, 1))[:3]
    frame.loc[outside, "label"] = "a"
    folder, _ = write_parts(frame, tmp_path / "rare")
    result = run_distributed(OutliersStep(target="label", relations=False, top=600),
                             folder, client=client)
    said = [re.search(r"predicts label = (\w+)", reason).group(1)
            for o in result.outliers for reason in o.reasons if "predicts label =" in reason]
    # a model cannot predict a label it never saw: only b and c (by construction)
    assert said and set(said) <= {"b", "c"}, sorted(set(said))
    assert any(o.row in outside.tolist() for o in result.outliers[:10])
