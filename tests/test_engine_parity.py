"""Both engines give the same exact figures for every step kind on the same table.

The table is the start of networkx's graph atlas (graphs G1 to G300, up to 7 vertices), with
cells of every kind a user's table holds: integers, decimals (a density written as a float),
rationals written as text like ``7/2``, exact Parquet decimals, integers past 2**63, missing
cells (the girth of a forest), a mostly-empty column (the diameter of a disconnected graph),
a matrix column (the adjacency matrix) and a flag. It is read whole in memory and, written as
four Parquet files, in partitions by the Dask engine on one local cluster.

Where the Dask engine refuses something the test names it and checks its message (arrays,
big integers and rationals named as features, arrays asked to be text); everything else is
compared figure by figure.
"""

from __future__ import annotations

import re
from decimal import Decimal
from fractions import Fraction
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

pytest.importorskip("dask.dataframe")
pytest.importorskip("distributed")
nx = pytest.importorskip("networkx")

from conftest import write_parts  # noqa: E402

from analysis.distributed import (  # noqa: E402
    open_cluster,
    read_partitioned,
    run_distributed,
    sample_table,
)
from analysis.errors import StepError, TableError  # noqa: E402
from analysis.notes import note_code  # noqa: E402
from analysis.steps import make_step  # noqa: E402
from analysis.table import load_table  # noqa: E402

# dask's Parquet reader calls a pandas method pandas 3.1 deprecates; not ours to change
pytestmark = pytest.mark.filterwarnings("ignore:The inplace keyword in DataFrame.reset_index")

GRAPHS = 300
# integer invariants with no gap but girth's (missing for the forests)
NUMBERS = ["vertices", "edges", "degree_sum", "components", "cycle_rank", "max_degree", "girth"]
# plane graphs: faces (missing for the 15 graphs that are not planar) and odd degrees
EULER = ["vertices", "edges", "faces", "components", "odd_degree_vertices"]
FEW = {"permutations": 10, "repeats": 2}


def atlas_frame() -> pd.DataFrame:
    """Graphs G1..G300 of networkx's atlas (graph_atlas_g) and their invariants, computed by
    networkx: the cycle rank is the size of networkx's cycle basis."""
    rows = []
    for k, graph in enumerate(nx.graph_atlas_g()[1:GRAPHS + 1], start=1):
        v, e = graph.number_of_nodes(), graph.number_of_edges()
        degrees = [d for _, d in graph.degree()]
        components = nx.number_connected_components(graph)
        girth = nx.girth(graph)
        rows.append({
            "graph": f"G{k:04d}", "vertices": v, "edges": e, "degree_sum": sum(degrees),
            "components": components, "cycle_rank": len(nx.cycle_basis(graph)),
            "max_degree": max(degrees),
            "density": nx.density(graph) if v > 1 else None,
            "mean_degree": str(Fraction(2 * e, v)),            # rationals written like 7/2
            "half_edges": Decimal(e) / 2,                       # an exact Parquet decimal
            "power": str(v**24 + e),                            # past 2**63 from 7 vertices
            "girth": None if girth == float("inf") else girth,  # missing for a forest
            "diameter": nx.diameter(graph) if components == 1 else None,   # mostly empty
            "faces": _faces(graph),                             # missing if not planar
            "odd_degree_vertices": sum(d % 2 for d in degrees),
            "adjacency": nx.to_numpy_array(graph, dtype=int).tolist(),
            "bipartite": nx.is_bipartite(graph),
        })
    return pd.DataFrame(rows)


def _faces(graph) -> int | None:
    """The faces of a graph drawn in the plane, counted on networkx's planar embedding of
    each component (each face traversed once), the components' outer faces being one face;
    None for a graph that is not planar."""
    planar, embedding = nx.check_planarity(graph)
    if not planar:
        return None
    faces = 1
    for part in nx.connected_components(graph):
        if len(part) < 2:
            continue
        _, drawn = nx.check_planarity(graph.subgraph(part))
        seen: set = set()
        for u, v in drawn.edges():
            if (u, v) not in seen:
                drawn.traverse_face(u, v, mark_half_edges=seen)
                faces += 1
        faces -= 1   # its outer face is the one outer face
    return faces


@pytest.fixture(scope="module")
def client():
    with open_cluster(n_workers=1) as active:
        yield active


@pytest.fixture(scope="module")
def atlas(tmp_path_factory):
    frame = atlas_frame()
    folder, whole = write_parts(frame, tmp_path_factory.mktemp("parity") / "atlas")
    return frame, folder, load_table(whole)


def _said(texts) -> list[str]:
    """Warnings without the table's name in front (a file in memory, a folder on Dask)."""
    return [re.sub(r"^[a-z_]+(\.parquet)?: ", "", text) for text in texts]


# ----------------------------------------------------------------------------------------
# Typing


@pytest.mark.parametrize("written", ["parquet parts", "csv blocks"])
def test_every_column_is_typed_alike(client, atlas, tmp_path, written):
    frame, folder, in_memory = atlas
    if written == "csv blocks":
        folder = tmp_path / "atlas.csv"
        frame.to_csv(folder, index=False)
        in_memory = load_table(folder)
        # decimals written as text are decimals: 7/2 is written 3.5 and read as a real
        assert in_memory.column("half_edges").dtype == "real"
    table = read_partitioned(folder, client, blocksize=6_000)
    assert table.npartitions > 2
    assert table.columns == in_memory.columns
    assert _said(table.warnings) == _said(in_memory.warnings)
    kinds = {c.name: (c.dtype, c.role) for c in table.columns}
    assert {name: kinds[name] for name in ("density", "mean_degree", "power",
                                           "girth", "adjacency", "bipartite")} == {
        "density": ("real", "invariant"), "mean_degree": ("rational", "invariant"),
        "power": ("big integer", "invariant"),
        "girth": ("integer", "invariant"), "adjacency": ("array", "array"),
        "bipartite": ("boolean", "flag")}
    # counted independently by pandas on the frame written from networkx
    assert {c.name: c.missing for c in table.columns} == frame.isna().sum().to_dict()
    assert table.column("adjacency").distinct == len({str(a) for a in frame.adjacency})
    assert table.column("mean_degree").distinct == frame.mean_degree.nunique()


def test_true_false_words_in_several_spellings_are_warned_of_alike(client, tmp_path):
    # Y beside True: the same category of four labels and the same warning on both engines
    frame = pd.DataFrame({"k": range(40), "cm": ["Y", "N", "True", "False"] * 10})
    folder, whole = write_parts(frame, tmp_path / "spellings", parts=2)
    table = read_partitioned(folder, client)
    expected = load_table(whole)
    assert table.columns == expected.columns and table.column("cm").role == "category"
    said = [w for w in _said(table.warnings) if "'cm'" in w]
    assert said == [w for w in _said(expected.warnings) if "'cm'" in w]
    assert len(said) == 1 and "in more than one spelling (False, N, True, Y)" in said[0]


def _cells(table, name: str) -> list:
    """A column's values as comparable Python values: exact numbers, lists for arrays."""
    info = table.column(name)
    if info.dtype in ("integer", "big integer", "rational", "boolean"):
        return table.exact(name)
    if info.dtype == "array":
        return [None if v is None else (v.shape, v.tolist()) for v in table.frame[name]]
    if info.dtype == "real":
        return [None if np.isnan(v) else float(v) for v in table.frame[name]]
    return table.frame[name].tolist()


def test_typed_rows_equal_the_in_memory_frame(client, atlas):
    frame, folder, in_memory = atlas
    table = read_partitioned(folder, client)
    rows, positions = sample_table(table, client, len(frame))
    assert positions.tolist() == list(range(len(frame)))
    for info in in_memory.columns:
        assert _cells(rows, info.name) == _cells(in_memory, info.name), info.name
    # networkx's own adjacency matrix of G7 (the triangle), as the independent reference
    assert rows.frame["adjacency"][6].tolist() == nx.to_numpy_array(
        nx.graph_atlas(7), dtype=int).tolist() == [[0, 1, 1], [1, 0, 1], [1, 1, 0]]


@pytest.mark.parametrize("roles", [
    {"mean_degree": "text"}, {"half_edges": "category"}, {"power": "text"},
    {"bipartite": "invariant"}, {"girth": "category", "graph": "text"},
], ids=["rational as text", "decimal as category", "big integer as text", "flag as number",
        "number as category"])
def test_roles_asked_for_type_columns_alike(client, atlas, roles):
    _, folder, in_memory = atlas
    whole = Path(str(folder) + ".parquet")
    expected = load_table(whole, roles=roles)
    table = read_partitioned(folder, client, roles=roles)
    assert table.columns == expected.columns
    rows = sample_table(table, client, table.n_rows)[0]
    for name in roles:
        assert _cells(rows, name) == _cells(expected, name), name
    assert [table.column(name).role for name in roles] == list(roles.values())


def test_the_role_id_given_to_one_column_moves_the_id_alike(client, tmp_path):
    # the rule of analysis.table.requested_roles (giving one column the role id makes it the
    # id column, as id_column= does); the Dask engine once refused two id columns instead
    frame = pd.DataFrame({"name": [f"K{k}" for k in range(40)], "code": range(100, 140),
                          "genus": [k % 5 for k in range(40)]})
    folder, whole = write_parts(frame, tmp_path / "codes")
    expected = load_table(whole, roles={"code": "id"})
    table = read_partitioned(folder, client, roles={"code": "id"})
    assert expected.id_column == table.id_column == "code"
    assert table.columns == expected.columns
    assert table.column("name").role == "text"


@pytest.mark.parametrize("keys, in_memory, partitioned", [
    ([0, 1, 2, 3, 4, 5, 6, 3, 8, 9, 10, 11],
     r"keys\.parquet: column 'key' cannot be the id: the value 3 appears in rows 4, 8\. "
     r"Choose a column with unique values\.",
     r"keys: column 'key' cannot be the id: it has 11 distinct values in 12 rows\. "
     r"Choose a column with unique values\."),
    ([0, 1, None, 3, 4, None, 6, 7, 8, 9, 10, 11],
     r"keys\.parquet, row 3: the id column 'key' is empty there\. Every row needs an id\.",
     r"keys: the id column 'key' is empty in 2 rows\. Every row needs an id\."),
], ids=["repeated value", "empty cells"])
def test_a_column_that_cannot_be_the_id_is_refused_alike(client, tmp_path, keys, in_memory,
                                                         partitioned):
    # one refusal, worded once in analysis.table, on both engines: a user who switches engine
    # on the same file meets the same problem and the same remedy (the in-memory engine,
    # holding the cells, names the rows); empty cells are checked first on both
    frame = pd.DataFrame({"key": keys, "v": range(12)})
    folder, whole = write_parts(frame, tmp_path / "keys")
    with pytest.raises(TableError, match=f"^{in_memory}$"):
        load_table(whole, id_column="key")
    with pytest.raises(TableError, match=f"^{partitioned}$"):
        read_partitioned(folder, client, id_column="key")


def test_arrays_asked_to_be_text_are_refused_by_name(client, atlas):
    _, folder, _ = atlas
    with pytest.raises(StepError, match="column 'adjacency': turning arrays into text is not "
                                        "done on the dask engine"):
        read_partitioned(folder, client, roles={"adjacency": "text"})


def test_matrix_cells_asked_to_be_text_in_memory(atlas):
    _, folder, _ = atlas
    adjacency = load_table(Path(str(folder) + ".parquet"),
                           roles={"adjacency": "text"}).column("adjacency")
    assert (adjacency.dtype, adjacency.role) == ("text", "text")


@pytest.mark.parametrize("whole, later", [
    (["1", "2", "3", "4"], ["7/2", "-5/3"]),
    ([Decimal("1.0"), Decimal("2.0"), Decimal("3.0"), Decimal("4.0")], [Decimal("3.5"), None]),
], ids=["text", "parquet decimals"])
def test_rationals_after_whole_numbers_in_earlier_parts_are_rationals(client, tmp_path, whole,
                                                                     later):
    # the first of three parts holds whole numbers only: the column is still rational
    frame = pd.DataFrame({"ratio": whole * 5 + later * 5, "v": range(30)})
    folder, file = write_parts(frame, tmp_path / "late", parts=3)
    table = read_partitioned(folder, client)
    assert table.column("ratio").dtype == "rational"
    assert table.columns == load_table(file).columns
    values = sample_table(table, client, len(frame))[0].exact("ratio")
    assert values == load_table(file).exact("ratio")
    # the exact sum of the cells, by Python's fractions
    assert sum(v for v in values if v is not None) == \
        sum(Fraction(str(c)) for c in whole + later if c is not None) * 5


def test_a_nullable_integer_column_is_counted_alike(client, tmp_path):
    frame = pd.DataFrame({"girth": pd.array([3, None, 4, None, 5, 3] * 10, dtype="Int64"),
                          "v": range(60)})
    folder, whole = write_parts(frame, tmp_path / "nullable", parts=3)
    girth = read_partitioned(folder, client).column("girth")
    assert (girth.missing, girth.distinct) == (20, 3)   # counted from the frame above
    assert load_table(whole).column("girth") == girth


# ----------------------------------------------------------------------------------------
# Steps: the exact figures of each kind


def _overview(result):
    return {"rows": result.rows, "id": result.id_column,
            "warnings": _said(result.warnings),
            "columns": [{**c.to_json(), "mean": _rounded(c.mean)}
                        for c in result.columns if c.dtype != "rational"],
            "correlations": [(a, b, _rounded(r)) for a, b, r in result.correlations]}


def _rounded(value: float | None) -> float | None:
    """A float sum to 12 significant digits: partitions add in another order."""
    return None if value is None else float(f"{value:.12g}")


def _rational_ranges(result):
    return [(c.name, c.minimum, c.maximum) for c in result.columns if c.dtype == "rational"]


def _projection(result):
    return {"features": list(result.features), "rows": list(result.row_ids),
            "ratios": [round(float(r), 12) for r in result.explained_variance_ratio]}


def _clustering(result):
    return {"k": result.k, "rows": len(result.labels),
            "sizes": sorted(p.size for p in result.profiles)}


def _separator(result):
    equation = result.to_json()["equation"]
    keys = ("terms", "relation", "constant", "positive_class", "text", "violations",
            "violating_rows", "positives", "rows_checked")
    return {"equation": {k: equation[k] for k in keys}, "rows": result.equation.n_rows}


def _relations(result):
    data = result.to_json()
    return {"relations": data["relations"], "congruences": data["congruences"],
            "exact bounds": [b for b in data["bounds"] if not b["violations"]],
            "rows": result.n_rows}


def _near_bounds(result):
    return {"bounds": [b["text"] for b in result.to_json()["bounds"] if b["violations"]],
            "said": [n for n in result.notes if n.startswith("the best ")]}


def _outliers(result):
    by_statements = [[r for r in o["reasons"] if r.startswith(("breaks", "attains"))]
                     for o in result.to_json()["outliers"]]
    return {"rows": [o["row"] for o in result.to_json()["outliers"]],
            "statements": by_statements}


def _feature_warnings(result):
    return {"features": list(result.features), "warnings": _said(result.warnings)}


def _mostly_empty(result):
    return {"diameter is a feature": "diameter" in result.features,
            "said": [w for w in result.warnings if "being missing in more than" in w]}


def _auto_clustering(result):
    return {"method": result.method, "k": result.k, "rows": len(result.labels),
            "sizes": sorted(p.size for p in result.profiles),
            "runs": [(run["method"], run["k"], run["clusters"])
                     for run in result.to_json()["sweep"]]}



CASES = [
    pytest.param("overview", {}, _overview, id="overview"),
    # a rational column's exact smallest and largest value ('0' and '15/2', say)
    pytest.param("overview", {}, _rational_ranges, id="overview-rational-ranges"),
    pytest.param("projection", {"method": "pca", "columns": NUMBERS + ["density"]},
                 _projection, id="projection-pca"),
    pytest.param("clustering", {"method": "kmeans", "k": 3, "columns": NUMBERS},
                 _clustering, id="clustering-kmeans"),
    pytest.param("clustering", {"method": "auto", "columns": NUMBERS}, _auto_clustering,
                 id="clustering-auto"),
    pytest.param("separator", {"target": "bipartite", "columns": NUMBERS, "model": "linear",
                               **FEW}, _separator, id="separator-linear"),
    pytest.param("relations", {"columns": NUMBERS}, _relations, id="relations"),
    pytest.param("relations", {"columns": EULER}, _relations, id="relations-euler"),
    # the bounds a few rows break, chosen with the breakers a share of every row allows
    pytest.param("relations", {"columns": NUMBERS}, _near_bounds, id="relations-near-bounds"),
    pytest.param("outliers", {"columns": NUMBERS, "top": 10}, _outliers, id="outliers"),
    # no graph of the last part (G226..G300) is connected with a cycle: no row of it has
    # every feature
    pytest.param("projection", {"method": "pca", "columns": NUMBERS + ["diameter"]},
                 _projection, id="projection-a-part-with-no-complete-row"),
    pytest.param("outliers", {"columns": NUMBERS + ["diameter"], "top": 10}, _outliers,
                 id="outliers-a-part-with-no-complete-row"),
    # rows dropped past features.DROPPED_ROWS_WARNING are a warning on both engines
    pytest.param("projection", {"method": "pca", "columns": NUMBERS}, _feature_warnings,
                 id="dropped-rows-warning"),
    # 'diameter' is missing in 49% of rows: left out of the default features, with a warning
    pytest.param("projection", {"method": "pca"}, _mostly_empty, id="mostly-empty-column"),
    # a target only colours a PCA picture: the forests, with no girth, are still drawn
    pytest.param("projection", {"method": "pca", "columns": NUMBERS[:-1], "target": "girth"},
                 _projection, id="projection-coloured-by-a-column-with-gaps"),
]


@pytest.mark.parametrize("kind, params, figures", CASES)
def test_every_step_kind_gives_the_same_exact_figures(client, atlas, kind, params, figures):
    frame, folder, in_memory = atlas
    step = make_step(kind, params)
    expected = step.run(in_memory)
    result = run_distributed(step, folder, client=client)
    assert figures(result) == figures(expected)
    _check_reference(kind, params, result, frame)
    # notes and warnings are records on both engines: code that tells them apart reads codes
    said = (*result.notes, *getattr(result, "warnings", ()))
    plain = [str(n) for n in said if note_code(n) is None]
    assert plain == [], plain


def _check_reference(kind: str, params: dict, result, frame: pd.DataFrame) -> None:
    """What the Dask result must say whatever the in-memory one says, from outside."""
    kept = frame.dropna(subset=NUMBERS)
    if kind == "overview":
        assert result.rows == GRAPHS
    elif kind == "projection" and list(result.features) == NUMBERS + ["density"]:
        # PCA of standardized features: the eigenvalues of the correlation matrix (common
        # practice), computed with numpy on the rows with every value
        rows = frame.dropna(subset=NUMBERS + ["density"])[NUMBERS + ["density"]]
        eigen = np.sort(np.linalg.eigvalsh(np.corrcoef(rows.to_numpy(float), rowvar=False)))
        np.testing.assert_allclose(result.explained_variance_ratio, eigen[::-1] / eigen.sum(),
                                   atol=1e-9)
    elif kind == "projection" and params.get("target") == "girth":
        # every graph of the atlas has the other numbers; 20 forests have no girth
        assert len(result.row_ids) == GRAPHS > int(frame.girth.notna().sum())
    elif kind == "clustering":
        assert sum(p.size for p in result.profiles) == len(kept)
    elif kind == "separator":
        # every listed row is one where the equation, evaluated exactly, disagrees with the
        # target (the positive class is predicted exactly when the relation holds)
        equation = result.equation
        ids = list(frame.graph)
        for row in equation.violating_rows:
            cells = frame.iloc[ids.index(row)]
            total = sum(Fraction(t.coef) * int(cells[t.feature]) for t in equation.terms)
            holds = total >= equation.constant if equation.relation == ">=" \
                else total <= equation.constant
            assert holds != (cells["bipartite"] == equation.positive_class), row
    elif kind == "relations" and params["columns"] == EULER:
        # Euler's formula for a plane graph with C components: V - E + F = 1 + C (common
        # practice); by the handshake lemma the number of odd-degree vertices is even
        assert {r.text for r in result.relations} == {"vertices - edges - components + faces = 1"}
        assert [c.text for c in result.congruences] == ["odd_degree_vertices ≡ 0 (mod 2)"]
        assert result.congruences[0].holds_on == GRAPHS
        planar = int(frame.faces.notna().sum())
        assert result.relations[0].holds_on == planar < GRAPHS
    elif kind == "relations":
        texts = {r.text for r in result.relations}
        # the handshake lemma (Euler, 1736): the degrees add up to twice the edges
        assert "2*edges - degree_sum = 0" in texts
        # the cycle rank of a graph is edges - vertices + components (Kirchhoff; the size
        # of networkx's cycle basis)
        assert any(set(t.split(" = ")[0].replace("-", "+").split(" + ")) >=
                   {"vertices", "edges", "components", "cycle_rank"} for t in texts), texts


# ----------------------------------------------------------------------------------------
# Relations among integers past 64 bits and rationals, with missing cells


FIBONACCI_ROWS = 240


def exact_frame() -> pd.DataFrame:
    """Fibonacci and Lucas numbers F(n), F(n+1), L(n) from sympy (``sympy.fibonacci``,
    ``sympy.lucas``) for n = 1..240, written as text (past 2**64 from n = 94 on); halves of n
    written like 7/2; the mean of F(n) and F(n+1), a rational with a numerator past 64 bits;
    and n squared. Some cells of L(n), of the halves and of the means are blank."""
    sympy = pytest.importorskip("sympy")
    rows = []
    for n in range(1, FIBONACCI_ROWS + 1):
        fib, following = int(sympy.fibonacci(n)), int(sympy.fibonacci(n + 1))
        rows.append({
            "n": n, "n_squared": n * n,
            "fib": str(fib),
            "fib_next": str(following),
            "lucas": None if n % 13 == 6 else str(int(sympy.lucas(n))),
            "half": None if n % 7 == 2 else str(Fraction(n, 2)),
            "mean": None if n % 11 == 5 else str(Fraction(fib + following, 2)),
        })
    return pd.DataFrame(rows)


@pytest.fixture(scope="module")
def fibonacci(tmp_path_factory):
    frame = exact_frame()
    folder, whole = write_parts(frame, tmp_path_factory.mktemp("parity") / "fibonacci")
    return frame, folder, load_table(whole)


EXACT_CASES = {
    "every column": {},
    "big integers named": {"columns": ["fib", "fib_next", "lucas", "n"]},
    "a congruence of big integers": {"columns": ["fib", "lucas", "n"]},
    "rationals named": {"columns": ["n", "half", "mean", "fib_next", "n_squared"]},
    "no robust search": {"robust": False, "triples": False},
}


@pytest.mark.parametrize("params", list(EXACT_CASES.values()), ids=list(EXACT_CASES))
def test_relations_among_big_integers_and_rationals_are_the_same(client, fibonacci, params):
    frame, folder, in_memory = fibonacci
    table = read_partitioned(folder, client)
    assert table.column("fib").dtype == "big integer" and table.column("half").dtype == \
        "rational"
    step = make_step("relations", params)
    expected = step.run(in_memory)
    result = run_distributed(step, folder, client=client)
    assert result.columns == expected.columns
    data, wanted = result.to_json(), expected.to_json()
    for key in ("relations", "bounds", "congruences"):
        assert data[key] == wanted[key], key
    texts = {r.text for r in result.relations if not r.violations}
    names = set(result.columns)
    # L(n) = F(n-1) + F(n+1) = 2 F(n+1) - F(n) (common practice); each holds on the rows
    # where its columns are present, counted by pandas
    if {"fib", "fib_next", "lucas"} <= names:
        lucas = next(r for r in result.relations if {n for n, _ in r.terms} == {
            "fib", "fib_next", "lucas"})
        assert lucas.text in {"fib - 2*fib_next + lucas = 0", "2*fib_next - fib - lucas = 0"}
        assert lucas.holds_on == int(frame.lucas.notna().sum())
    elif {"fib", "lucas"} <= names:
        # L(n) = F(n) + 2 F(n-1), so L(n) and F(n) have one parity (from memory)
        parity = next(c for c in result.congruences if c.text == "fib + lucas ≡ 0 (mod 2)")
        assert (parity.holds_on, parity.violations) == (int(frame.lucas.notna().sum()), ())
    # n (n + 1) is even (common practice)
    if {"n", "n_squared"} <= names:
        assert "n + n_squared ≡ 0 (mod 2)" in {c.text for c in result.congruences}
    if {"n", "half"} <= names:
        assert "n - 2*half = 0" in texts or "2*half - n = 0" in texts, texts
    if {"fib", "fib_next", "mean"} <= names:
        assert any({n for n, _ in r.terms} == {"fib", "fib_next", "mean"} for r in
                   result.relations), texts
    assert not any("left out on the dask engine" in str(n) for n in result.notes)


# ----------------------------------------------------------------------------------------
# What the Dask engine refuses, by name, while the in-memory engine uses it


@pytest.mark.parametrize("column, message", [
    ("mean_degree", "'mean_degree' holds rationals, which the dask engine does not encode"),
    ("half_edges", "'half_edges' holds rationals, which the dask engine does not encode"),
    ("power", "'power' holds big integers, which the dask engine does not encode"),
    ("adjacency", "'adjacency' holds arrays, which the dask engine does not encode"),
], ids=["rational text", "parquet decimal", "big integer", "matrix"])
def test_features_the_dask_engine_refuses_are_named(client, atlas, column, message):
    _, folder, in_memory = atlas
    step = make_step("projection", {"method": "pca", "columns": ["edges", column]})
    assert step.run(in_memory).features[0] == "edges"
    with pytest.raises(StepError, match=message):
        run_distributed(step, folder, client=client)


# ----------------------------------------------------------------------------------------
# Rules the Dask engine once had its own copy of


def test_imputed_flags_and_categories_take_their_most_common_value(client, tmp_path):
    rng = np.random.default_rng(3)
    n = 240
    x = rng.normal(size=n)
    x[rng.choice(n, 12, replace=False)] = np.nan
    flag = pd.Series(rng.random(n) < 0.3, dtype=object)   # True on about 30% of rows
    flag[rng.choice(n, 15, replace=False)] = None
    kind = pd.Series(rng.choice(["p", "q", "r"], size=n, p=[0.2, 0.5, 0.3]), dtype=object)
    kind[rng.choice(n, 10, replace=False)] = None
    frame = pd.DataFrame({"x": x, "flag": flag, "kind": kind})
    folder, whole = write_parts(frame, tmp_path / "gaps", parts=3)
    step = make_step("projection", {"method": "pca", "columns": ["x", "flag", "kind"],
                                    "missing": "impute"})
    expected = step.run(load_table(whole))
    result = run_distributed(step, folder, client=client)
    np.testing.assert_allclose(result.explained_variance_ratio,
                               expected.explained_variance_ratio, atol=1e-12)
    np.testing.assert_allclose(result.x, expected.x, atol=1e-9)
    assert [n for n in result.notes if n.startswith("filled")] == \
        [n for n in expected.notes if n.startswith("filled")]
    # the reference, from pandas: the median of x, the most common flag (False) and the most
    # common level (q) fill the gaps; PCA of the standardized columns is the eigenvalues of
    # their correlation matrix (common practice)
    filled = pd.concat([frame.x.fillna(frame.x.median()),
                        frame.flag.fillna(frame.flag.mode()[0]).astype(float),
                        pd.get_dummies(frame.kind.fillna(frame.kind.mode()[0])).astype(float)],
                       axis=1).to_numpy()
    eigen = np.sort(np.linalg.eigvalsh(np.corrcoef(filled, rowvar=False)))[::-1]
    np.testing.assert_allclose(result.explained_variance_ratio, (eigen / eigen.sum())[
        :len(result.explained_variance_ratio)], atol=1e-9)


def test_an_equation_in_short_decimals_is_settled_exactly_on_both_engines(client, tmp_path):
    # x in quarters, y whole: the target is 4x - y >= 3 but for a few flipped rows, so the
    # constant sits between two exact scores (a short decimal is exact in memory)
    rng = np.random.default_rng(5)
    n = 400
    x = rng.integers(0, 40, size=n) / 4
    y = rng.integers(0, 20, size=n)
    label = 4 * x - y >= 3
    label[rng.choice(n, 6, replace=False)] ^= True
    frame = pd.DataFrame({"object": [f"o{i}" for i in range(n)], "x": x, "y": y,
                          "label": label})
    folder, whole = write_parts(frame, tmp_path / "quarters", parts=4)
    step = make_step("separator", {"target": "label", "columns": ["x", "y"],
                                   "model": "linear", **FEW})
    expected = step.run(load_table(whole))
    result = run_distributed(step, folder, client=client)
    assert _separator(result) == _separator(expected)
    # every listed row disagrees with the equation evaluated with Python fractions
    equation = result.equation
    for row in equation.violating_rows:
        cells = frame[frame.object == row].iloc[0]
        total = sum(Fraction(t.coef) * Fraction(str(cells[t.feature])) for t in equation.terms)
        holds = total >= equation.constant if equation.relation == ">=" \
            else total <= equation.constant
        assert holds != bool(cells["label"] == equation.positive_class), row


def test_a_target_statement_gives_the_same_derived_flag_and_equation(client, atlas):
    # "breaks: girth - vertices >= 0" for the graphs whose shortest cycle is shorter than
    # their vertex count; the forests, with no girth, are missing in the flag
    frame, folder, in_memory = atlas
    statement = {"terms": [{"column": "girth", "coef": "1"}, {"column": "vertices",
                                                              "coef": "-1"}],
                 "relation": ">=", "constant": "0"}
    step = make_step("separator", {"target_statement": statement, "model": "linear",
                                   "columns": ["edges", "components", "cycle_rank",
                                               "max_degree"], **FEW})
    expected = step.run(in_memory)
    result = run_distributed(step, folder, client=client)
    assert _separator(result) == _separator(expected)
    assert result.to_json()["metrics"] == expected.to_json()["metrics"]
    # the flag, counted partition by partition, against pandas on the frame from networkx
    from analysis.derived import Statement
    from analysis.distributed.source import with_breaks_flag

    flagged = with_breaks_flag(read_partitioned(folder, client), client,
                               Statement.from_json(statement))
    info = flagged.column(Statement.from_json(statement).flag_name)
    assert (info.role, info.missing) == ("flag", int(frame.girth.isna().sum()))
    assert info.note.figures["rows"] == int((frame.girth < frame.vertices).sum())
    assert result.equation.n_rows == int(frame.girth.notna().sum())


def test_a_target_statement_no_row_breaks_is_refused_alike(client, atlas):
    # the handshake lemma (Euler, 1736): degree_sum = 2 * edges on every graph
    _, folder, in_memory = atlas
    statement = {"terms": [{"column": "degree_sum", "coef": "1"}, {"column": "edges",
                                                                   "coef": "-2"}],
                 "relation": "=", "constant": "0"}
    step = make_step("separator", {"target_statement": statement, "columns": ["vertices"],
                                   **FEW})
    with pytest.raises(StepError, match="every checked row obeys") as memory:
        step.run(in_memory)
    with pytest.raises(StepError, match="every checked row obeys") as dask:
        run_distributed(step, folder, client=client)
    assert _said([str(dask.value)]) == _said([str(memory.value)])


def _separator_reasons(result) -> dict:
    """{row: the reasons the separator measure gives for it}: a label's doubt or a number's
    residual, each said the same whatever the row's standing."""
    return {o.row: [r for r in o.reasons if r.startswith(("a cross-validated", "density is "))]
            for o in result.outliers}


@pytest.mark.parametrize("target, columns", [
    ("bipartite", NUMBERS), ("density", NUMBERS),
], ids=["a flag", "a number"])
def test_the_separator_measure_of_the_outliers_is_the_same(client, atlas, target, columns):
    # on 300 rows the Dask engine fits the separator on every row (its sample is the whole
    # table), so its cross-validated scores are the in-memory engine's, row by row
    frame, folder, in_memory = atlas
    step = make_step("outliers", {"target": target, "columns": columns, "top": GRAPHS})
    expected = step.run(in_memory)
    result = run_distributed(step, folder, client=client)
    assert "separator" in result.measures and "separator" in expected.measures
    assert _separator_reasons(result) == _separator_reasons(expected)
    doubted = {row for row, said in _separator_reasons(result).items() if said}
    assert doubted, "no row is doubted"
    truth = frame.set_index("graph")[target]
    for row in doubted:
        (said,) = _separator_reasons(result)[row]
        if target == "bipartite":
            # a doubt is a wrong guess: the model says the opposite of networkx's
            # is_bipartite for that graph
            assert said.startswith("a cross-validated logistic regression predicts "
                                   + ("not bipartite" if truth[row] else "bipartite ")), said
        else:
            # the residual states the graph's density as networkx computed it (4 digits)
            stated = float(said.split(" is ")[1].split(" but ")[0])
            assert stated == pytest.approx(truth[row], rel=1e-3), said


def test_cluster_profiles_are_the_same(client, atlas):
    # the profiles of every row's cluster, summed by one rule on both engines; the reference
    # for the means is pandas on the frame from networkx, grouped by the Dask clusters
    frame, folder, in_memory = atlas
    step = make_step("clustering", {"method": "kmeans", "k": 3, "columns": NUMBERS})
    expected = step.run(in_memory)
    result = run_distributed(step, folder, client=client)

    def profiles(found):
        return [(p.cluster, p.size, {k: round(v, 9) for k, v in p.means.items()},
                 p.distinguished_by) for p in found.profiles]

    assert profiles(result) == profiles(expected)
    kept = frame.set_index("graph").loc[list(result.row_ids), NUMBERS].astype(float)
    means = kept.groupby(np.asarray(result.labels)).mean()
    for profile in result.profiles:
        np.testing.assert_allclose([profile.means[n] for n in NUMBERS],
                                   means.loc[profile.cluster].to_numpy(), rtol=1e-9)


def test_interval_cells_are_held_in_memory_and_said_to_be_missing_on_dask(client, tmp_path):
    # the handshake lemma (Euler, 1736): the degree sum is twice the number of edges; some
    # edge counts of networkx's atlas are written as an interval that holds the true count
    lines = ["graph,vertices,degree_sum,edges"]
    opened = []
    for i, graph in enumerate(nx.graph_atlas_g()[1:120]):
        edges = graph.number_of_edges()
        cell = str(edges)
        if i % 11 == 2:
            cell = f'"[{max(edges - 1, 0)},{edges + 1}]"'
            opened.append(f"g{i}")
        lines.append(f"g{i},{graph.number_of_nodes()},{2 * edges},{cell}")
    path = tmp_path / "open_edges.csv"
    path.write_text("\n".join(lines) + "\n")
    step = make_step("relations", {"bounds": False, "congruences": False})
    expected = step.run(load_table(path, id_column="graph"))
    result = run_distributed(step, path, client=client, id_column="graph")

    def handshake(found):
        return next(r for r in found.relations if {n for n, _ in r.terms} ==
                    {"degree_sum", "edges"})

    assert handshake(result).text == handshake(expected).text
    assert sorted(handshake(expected).consistent_with) == sorted(opened)
    said = {note_code(n): n for n in result.notes}
    assert said["dask_intervals_missing"].figures["columns"] == ("edges",)
    assert "interval_rows_held" in {note_code(n) for n in expected.notes}
    # one CSV file under 64 MB is one partition, said in the singular
    assert said["dask_relations_sample"].endswith("across 1 partition.")


# ----------------------------------------------------------------------------------------
# Typing of delimited text read in blocks: one rule on both engines


BLOCK_CASES = {
    "flags with blanks": "k,f\n" + "".join(f"{k},{'' if k % 7 == 3 else k % 2}\n"
                                           for k in range(600)),
    "past 2**53 with blanks": "k,v\n" + "".join(f"{k},{'' if k % 9 == 4 else 2**60 + k}\n"
                                                for k in range(600)),
    "semicolons": "a;b\n" + "".join(f"{k};{k * k}\n" for k in range(600)),
    "empty unnamed column": "a,b,\n" + "".join(f"{k},{k + 1},\n" for k in range(600)),
    "rationals with blanks": "r\n" + "".join(f"{'' if k % 5 == 2 else f'{k}/7'}\n"
                                            for k in range(600)),
    "infinite reals": "x\n" + "".join(f"{'inf' if k % 11 == 5 else k / 4}\n"
                                      for k in range(600)),
    "numbers with many words": "c\n" + "".join(f"{'-' if k % 5 < 2 else k % 4}\n"
                                               for k in range(2000)),
    "grouped digits": "n\n" + "".join(f'"{k:,}"\n' if k % 9 == 4 else f"{k}\n"
                                      for k in range(900, 2900)),
    "typographic minus": "d\n" + "".join(f"\u2212{k}\n" if k % 13 == 6 else f"-{k}\n"
                                         for k in range(600)),
}


@pytest.mark.parametrize("case", list(BLOCK_CASES))
def test_csv_blocks_are_typed_as_in_memory(client, tmp_path, case):
    path = tmp_path / "cells.csv"
    path.write_text(BLOCK_CASES[case])
    table = read_partitioned(path, client, blocksize=1000)
    assert table.npartitions > 1
    in_memory = load_table(path)
    assert table.columns == in_memory.columns
    assert _said(table.warnings) == _said(in_memory.warnings)


def test_typing_of_blocks_follows_pythons_own_numbers(client, tmp_path):
    path = tmp_path / "cells.csv"
    path.write_text(BLOCK_CASES["past 2**53 with blanks"])
    column = read_partitioned(path, client, blocksize=1000).column("v")
    # 2**60 + k is not a float64 value (IEEE 754 doubles stop at 2**53), so it stays exact
    assert float(2**60 + 1) != 2**60 + 1 and column.dtype == "big integer"
    assert column.missing == sum(1 for k in range(600) if k % 9 == 4)


def test_decimal_text_in_parquet_parts_reads_as_real_numbers(client, tmp_path):
    # a Parquet string column holding decimals, as a database export might write them
    frame = pd.DataFrame({"regulator": pd.array([f"{k / 8}" for k in range(40)], dtype="str"),
                          "k": range(40)})
    folder, whole = write_parts(frame, tmp_path / "decimals", parts=3)
    table = read_partitioned(folder, client)
    in_memory = load_table(whole)
    assert in_memory.column("regulator").dtype == "real"
    assert table.columns == in_memory.columns


def test_nullable_flags_from_parquet_parts_are_flags_with_missing_cells(client, tmp_path):
    frame = pd.DataFrame({"b": pd.array([True, None, False, True] * 10, dtype="boolean"),
                          "k": range(40)})
    folder, whole = write_parts(frame, tmp_path / "flags", parts=3)
    table = read_partitioned(folder, client)
    in_memory = load_table(whole)
    assert table.columns == in_memory.columns
    assert in_memory.column("b").missing == int(frame.b.isna().sum())   # counted by pandas
    assert in_memory.exact("b") == [None if v is pd.NA else int(v) for v in frame.b]


def test_approximate_relations_and_their_trivial_notes_are_the_same(client, tmp_path):
    # sin^2 t + cos^2 t = 1 (the Pythagorean identity) in floating point, and a column that
    # repeats another: the identity is approximate, the copy trivial, on both engines
    rng = np.random.default_rng(11)
    t = rng.uniform(0, 6, 900)
    frame = pd.DataFrame({"sin2": np.sin(t) ** 2, "cos2": np.cos(t) ** 2,
                          "again": np.sin(t) ** 2, "k": rng.integers(0, 9, 900)})
    folder, whole = write_parts(frame, tmp_path / "identity", parts=3)
    step = make_step("relations", {"bounds": False})
    expected = step.run(load_table(whole)).to_json()["approximate_relations"]
    result = run_distributed(step, folder, client=client).to_json()["approximate_relations"]
    assert result == expected
    kinds = {r["text"].split(" (")[0]: r["trivial"] for r in result}
    # the identity is written with either copy of sin^2
    assert {"sin2 - again = 0": True}.items() <= kinds.items(), kinds
    assert kinds.get("sin2 + cos2 = 1", kinds.get("cos2 + again = 1")) is False, kinds
    trivial = next(r for r in result if r["trivial"])
    assert trivial["note"].startswith("trivial: two equal columns")
