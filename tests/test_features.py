"""Feature matrices: names, encodings, missing values, signed log, canonical keys.

Numbers are checked against independent computations: numpy.linalg (eigvalsh, svd,
matrix_rank), sympy's exact characteristic polynomial, Python's math.log10 on exact
integers, and a brute-force search over permutations for what canonical keys claim.
"""

from __future__ import annotations

import itertools
import json
import math
from collections import defaultdict
from fractions import Fraction
from pathlib import Path

import numpy as np
import pytest
import sympy
from conftest import records_table

from analysis.errors import StepError, TableError
from analysis.features import build_features, canonical_key, group_keys, target_values
from analysis.table import load_table, read_table

TABLES = Path(__file__).resolve().parent.parent / "sample_tables"


@pytest.fixture(scope="module")
def small():
    records = [
        {"obj": "a", "n": 3, "q": "1/2", "smooth": True, "kind": "toric", "m": [[1, 2], [3, 4]]},
        {"obj": "b", "n": -1, "q": "5/4", "smooth": False, "kind": "fano", "m": [[0, 1], [1, 0]]},
        {"obj": "c", "n": 10, "q": "-2", "smooth": True, "kind": "toric", "m": [[2, 2], [2, 2]]},
        {"obj": "d", "n": 0, "q": "7/3", "smooth": False, "kind": "other", "m": [[5, 0], [0, 1]]},
    ]
    return records_table(records, "small.json")


# ------------------------------------------------------------------------------------------
# Names and simple encodings


def test_every_feature_names_its_column(small):
    fm = build_features(small, array_encoding="both")
    columns = {c.name for c in small.columns}
    for feature in fm.features:
        assert feature.column in columns
        assert feature.column in feature.name, f"{feature.name} does not name {feature.column}"
    assert fm.columns == ["n", "q", "smooth", "kind", "m"]
    assert fm.values.shape == (4, len(fm.names))
    # raw values are named exactly as their column
    assert fm.names[:3] == ["n", "q", "smooth"]
    assert [f.kind for f in fm.features[:3]] == ["value", "value", "flag"]


def test_values_are_in_the_tables_own_units(small):
    fm = build_features(small, columns=["n", "q"])
    assert fm.values[:, 0].tolist() == [3.0, -1.0, 10.0, 0.0]
    assert fm.values[:, 1].tolist() == [0.5, 1.25, -2.0, 7 / 3]
    assert fm.exact_columns == (True, False)
    assert list(fm.row_ids) == ["a", "b", "c", "d"] and list(fm.rows) == [0, 1, 2, 3]


def test_one_hot_has_one_level_per_row(small):
    fm = build_features(small, columns=["kind"])
    assert fm.names == ["kind=fano", "kind=other", "kind=toric"]
    assert all(f.kind == "onehot" for f in fm.features)
    assert fm.values.sum(axis=1).tolist() == [1.0] * 4
    labels = small.frame["kind"].tolist()
    for i, label in enumerate(labels):
        assert fm.values[i, fm.names.index(f"kind={label}")] == 1.0


def test_flags_are_zero_and_one(small):
    fm = build_features(small, columns=["smooth"])
    assert fm.features[0].kind == "flag"
    assert fm.values[:, 0].tolist() == [float(v) for v in small.exact("smooth")] == [1, 0, 1, 0]


def test_flag_from_two_words_after_an_override():
    table = read_table(b"k,parity\n1,odd\n2,even\n3,odd\n", "t.csv").with_roles(
        {"parity": "flag"})
    fm = build_features(table, columns=["parity"])
    assert fm.values[:, 0].tolist() == [1.0, 0.0, 1.0]  # "odd" sorts after "even"


def test_text_and_id_columns_are_not_features(small):
    with pytest.raises(StepError, match=r"small\.json: column 'obj' has the role id and cannot "
                                        r"be a feature"):
        build_features(small, columns=["obj"])
    with pytest.raises(StepError, match=r"target 'n' cannot also be a feature"):
        build_features(small, columns=["n"], target="n")


@pytest.mark.parametrize("setting, value, message", [
    ("array_encoding", "sideways",
     r"array encoding 'sideways': use one of invariant, compact, full, flat, both"),
    ("log_scale", "sometimes", r"log scale 'sometimes': use one of auto, never, always"),
    ("missing", "guess", r"missing-value policy 'guess': use drop or impute"),
])
def test_unknown_settings_are_rejected(small, setting, value, message):
    with pytest.raises(StepError, match=message):
        build_features(small, **{setting: value})


# ------------------------------------------------------------------------------------------
# Signed log scale


def _signed_log(x: int) -> float:
    # Reference: math.log10 takes Python integers of any size exactly (no float overflow).
    return math.copysign(math.log10(1 + abs(x)), x) if x else 0.0


def test_big_integers_use_the_signed_log_and_say_so():
    values = [2**200 + 1, -(10**40), 17, 0]
    table = records_table([{"k": i, "big": v} for i, v in enumerate(values)])
    fm = build_features(table, columns=["big"])
    assert fm.names == ["slog(big)"] and fm.features[0].kind == "log"
    assert np.allclose(fm.values[:, 0], [_signed_log(v) for v in values], rtol=1e-12)
    assert any("'big' holds integers beyond 64 bits" in note and "sign(x)*log10(1+|x|)" in note
               for note in fm.notes)
    assert fm.exact_columns == (False,)


def test_log_scale_never_and_always():
    values = [2**70, -5, 999]
    table = records_table([{"k": i, "big": v, "small": i * 10 - 5} for i, v in enumerate(values)])
    never = build_features(table, columns=["big"], log_scale="never")
    assert never.names == ["big"]
    assert never.values[:, 0].tolist() == [float(v) for v in values]
    assert not any("log10" in note for note in never.notes)
    always = build_features(table, columns=["small"], log_scale="always")
    assert always.names == ["slog(small)"]
    assert np.allclose(always.values[:, 0], [_signed_log(v) for v in (-5, 5, 15)], rtol=1e-12)


def test_integers_past_2_53_with_a_gap_use_the_log_and_say_how_big():
    table = records_table([{"n": 2**60 + 1}, {"n": None}, {"n": 5}])
    fm = build_features(table, columns=["n"], missing="impute")
    assert fm.names == ["slog(n)"]
    assert any("beyond 2**53" in note for note in fm.notes)


# ------------------------------------------------------------------------------------------
# Missing values, NaN and infinity


@pytest.fixture(scope="module")
def gappy():
    # feature a: one empty cell (row 2); b: "inf" in row 4; target t: empty in row 3
    data = b"k,a,b,c,t\n1,1,10,x,p\n2,,20,y,q\n3,3,30,x,\n4,5,inf,x,p\n5,7,50,,q\n6,9,60,y,p\n"
    return read_table(data, "gappy.csv")


def test_missing_drop_counts_rows_in_a_warning(gappy):
    fm = build_features(gappy, columns=["a", "b", "c"], target="t", missing="drop")
    # rows 2 (a empty), 4 (b infinite), 5 (c empty) in features; row 3 in the target: more
    # than a tenth of the rows, so a warning rather than a note
    assert list(fm.rows) == [0, 5]
    assert fm.warnings[0].startswith(
        "Dropped 4 of 6 rows with a missing value (3 in features, 1 in the target): more than "
        "10% of the table.")
    assert "1 rows have an infinite feature value; treated as missing." in fm.notes
    assert np.isfinite(fm.values).all()


def test_missing_impute_fills_and_counts(gappy):
    fm = build_features(gappy, columns=["a", "b", "c"], target="t", missing="impute")
    assert list(fm.rows) == [0, 1, 3, 4, 5]  # only the row with no target is dropped
    assert any(note.startswith("filled 4 missing feature cells") and
               "dropped 1 rows with no target value" in note for note in fm.notes)
    a, b = fm.values[:, 0], fm.values[:, 1]
    # medians over the known values (numpy.median as reference), not over the filled ones
    assert a[1] == np.median([1, 3, 5, 7, 9])
    assert b[2] == np.median([10, 20, 30, 50, 60])
    # the row with no category gets the most common level ("x": 3 of 5) and only that one
    onehot = fm.values[:, 2:]
    assert fm.names[2:] == ["c=x", "c=y"]
    assert onehot[3].tolist() == [1.0, 0.0]
    assert onehot.sum(axis=1).tolist() == [1.0] * 5


def test_impute_gives_a_flag_its_most_common_value():
    table = read_table(b"k,f\n1,true\n2,\n3,false\n4,false\n5,false\n", "t.csv")
    fm = build_features(table, columns=["f"], missing="impute")
    assert fm.values[:, 0].tolist() == [1.0, 0.0, 0.0, 0.0, 0.0]


def test_a_target_with_nan_and_infinity_drops_those_rows():
    table = read_table(b"k,x,y\n1,1,2.5\n2,2,nan\n3,3,inf\n4,4,-1e400\n5,5,7\n", "t.csv")
    fm = build_features(table, columns=["x"], target="y")
    assert list(fm.rows) == [0, 4]
    assert fm.warnings[0].startswith(
        "Dropped 3 of 5 rows with a missing value (0 in features, 3 in the target)")
    assert target_values(table, "y", fm.rows).tolist() == [2.5, 7.0]


def test_nothing_left_is_a_step_error():
    table = read_table(b"k,x,y\n1,1,\n2,,3\n", "t.csv")
    with pytest.raises(StepError, match=r"t\.csv: no rows left after removing missing values"):
        build_features(table, columns=["x", "y"])


def test_a_target_with_one_class_builds_features():
    # one class cannot be separated; that is the separator's to say, not the feature builder's
    table = read_table(b"k,x,t\n1,1,yes\n2,2,yes\n3,4,yes\n", "t.csv")
    fm = build_features(table, columns=["x"], target="t")
    assert fm.values[:, 0].tolist() == [1.0, 2.0, 4.0]


# ------------------------------------------------------------------------------------------
# Array encodings


@pytest.fixture(scope="module")
def ragged():
    return records_table([{"k": 0, "m": [[1, 2, 3]]}, {"k": 1, "m": [[4], [5]]},
                   {"k": 2, "m": [[1, 0], [0, 1]]}])


def test_flat_encoding_pads_with_zero_and_says_so(ragged):
    fm = build_features(ragged, columns=["m"], array_encoding="flat")
    assert fm.names == ["m[0,0]", "m[0,1]", "m[0,2]", "m[1,0]", "m[1,1]", "m[1,2]"]
    assert all(f.kind == "flat" for f in fm.features)
    assert fm.values.tolist() == [[1, 2, 3, 0, 0, 0], [4, 0, 0, 5, 0, 0], [1, 0, 0, 0, 1, 0]]
    assert "'m': arrays of different shapes padded with 0 to 2x3 for flattening." in fm.notes


def test_invariant_encoding_kinds_and_values():
    m = [[3, 0, 1], [1, 1, 1]]
    table = records_table([{"k": 0, "m": m}, {"k": 1, "m": [[0, 0, 0], [2, 2, 2]]}])
    fm = build_features(table, columns=["m"], array_encoding="invariant")
    kinds = {f.kind for f in fm.features}
    assert kinds == {"sorted", "row_sums", "column_sums", "singular"}
    row = dict(zip(fm.names, fm.values[0]))
    assert [row[f"sorted{k}(m)"] for k in range(1, 7)] == [3, 1, 1, 1, 1, 0]
    assert [row["rowsum1(m)"], row["rowsum2(m)"]] == [4, 3]
    assert [row[f"colsum{k}(m)"] for k in (1, 2, 3)] == [4, 2, 1]
    # reference: numpy.linalg.svd
    assert np.allclose([row["sv1(m)"], row["sv2(m)"]],
                       np.linalg.svd(np.array(m, float), compute_uv=False), atol=1e-12)


def test_both_encoding_is_flat_then_invariant(ragged):
    flat = build_features(ragged, columns=["m"], array_encoding="flat")
    invariant = build_features(ragged, columns=["m"], array_encoding="invariant")
    both = build_features(ragged, columns=["m"], array_encoding="both")
    assert both.names == flat.names + invariant.names
    assert np.array_equal(both.values, np.hstack([flat.values, invariant.values]))
    assert any("padded with 0" in note for note in invariant.notes)


def test_invariant_features_do_not_change_under_permutations():
    rng = np.random.default_rng(11)
    m = rng.integers(-5, 6, size=(4, 6))
    copies = [m, m[rng.permutation(4)][:, rng.permutation(6)], m[::-1, ::-1]]
    table = records_table([{"k": i, "m": c.tolist()} for i, c in enumerate(copies)])
    fm = build_features(table, columns=["m"], array_encoding="invariant")
    for i in (1, 2):
        assert np.allclose(fm.values[i], fm.values[0], atol=1e-9)


def test_lists_and_matrices_in_one_column():
    table = records_table([{"k": 0, "m": [3, 1, 2]}, {"k": 1, "m": [[1, 2], [3, 4]]}])
    fm = build_features(table, columns=["m"], array_encoding="invariant")
    row = dict(zip(fm.names, fm.values[0]))
    # the list is read as the one-row matrix [[3, 1, 2]]
    assert [row["rowsum1(m)"], row["rowsum2(m)"]] == [6, 0]
    assert any("lists among matrices treated as matrices with one row" in n for n in fm.notes)


def test_arrays_with_nan_entries_have_missing_invariants():
    table = read_table(b'k,m\n1,"[[NaN,1],[1,0]]"\n2,"[[1,1],[1,0]]"\n3,"[[1,2],[2,1]]"\n',
                       "t.csv")
    fm = build_features(table, columns=["m"], array_encoding="invariant")
    assert list(fm.rows) == [1, 2]
    assert any("1 arrays hold NaN or infinite entries" in note for note in fm.notes)
    # the NaN matrix does not stop the others from being read as symmetric
    assert any(f.kind == "eigen" for f in fm.features)


def test_entries_near_the_float_limit_make_missing_invariants():
    table = read_table(b'k,m\n1,"[[1e308,1e308],[1,1]]"\n2,"[[1,2],[3,4]]"\n'
                       b'3,"[[0,1],[2,0]]"\n', "t.csv")
    fm = build_features(table, columns=["m"], array_encoding="invariant")
    assert list(fm.rows) == [1, 2]  # the overflowing row sums count as missing
    assert np.isfinite(fm.values).all()


def test_eigenvalue_features_agree_with_numpy_eigvalsh():
    rng = np.random.default_rng(5)
    matrices = []
    for size in (3, 3, 4, 4, 4):
        a = rng.integers(-6, 7, size=(size, size))
        matrices.append(a + a.T)
    table = records_table([{"k": i, "m": m.tolist()} for i, m in enumerate(matrices)])
    fm = build_features(table, columns=["m"], array_encoding="invariant")
    eig = [j for j, f in enumerate(fm.features) if f.kind == "eigen"]
    assert [fm.names[j] for j in eig] == ["eig1(m)", "eig2(m)", "eig3(m)", "eig4(m)"]
    for i, m in enumerate(matrices):
        expected = np.sort(np.linalg.eigvalsh(m.astype(float)))[::-1]  # reference: numpy
        expected = np.concatenate([expected, np.zeros(4 - len(expected))])
        assert np.allclose(fm.values[i, eig], expected, atol=1e-9)


def test_eigenvalues_of_cycle_graphs():
    # Spectrum of the cycle C_n: 2 cos(2 pi k / n), k = 0..n-1 (standard spectral graph theory,
    # e.g. Brouwer and Haemers, "Spectra of Graphs", section 1.4.3)
    records = []
    for n in (5, 6):
        adjacency = np.zeros((n, n), dtype=int)
        for v in range(n):
            adjacency[v, (v + 1) % n] = adjacency[(v + 1) % n, v] = 1
        records.append({"k": n, "m": adjacency.tolist()})
    fm = build_features(records_table(records), columns=["m"], array_encoding="invariant")
    eig = [j for j, f in enumerate(fm.features) if f.kind == "eigen"]
    for i, n in enumerate((5, 6)):
        expected = sorted((2 * math.cos(2 * math.pi * k / n) for k in range(n)), reverse=True)
        expected += [0.0] * (6 - n)
        assert np.allclose(fm.values[i, eig], expected, atol=1e-9)


def test_singular_values_agree_with_numpy_svd_and_gram_eigenvalues():
    rng = np.random.default_rng(8)
    matrices = [rng.integers(-4, 5, size=(3, 5)) for _ in range(4)]
    fm = build_features(records_table([{"k": i, "m": m.tolist()} for i, m in enumerate(matrices)]),
                        columns=["m"], array_encoding="invariant")
    sv = [j for j, f in enumerate(fm.features) if f.kind == "singular"]
    assert len(sv) == 3
    for i, m in enumerate(matrices):
        m = m.astype(float)
        assert np.allclose(fm.values[i, sv], np.linalg.svd(m, compute_uv=False), atol=1e-9)
        # independent route: singular values squared are the eigenvalues of M M^T
        gram = np.sort(np.linalg.eigvalsh(m @ m.T))[::-1]
        assert np.allclose(fm.values[i, sv] ** 2, np.clip(gram, 0, None), atol=1e-8)


def test_characteristic_polynomial_of_non_symmetric_matrices_agrees_with_sympy():
    matrices = [[[1, 2, 0], [0, 1, 3], [4, 0, 1]], [[0, 1, 0], [0, 0, 1], [1, 0, 0]]]
    fm = build_features(records_table([{"k": i, "m": m} for i, m in enumerate(matrices)]),
                        columns=["m"], array_encoding="invariant")
    poly = [j for j, f in enumerate(fm.features) if f.kind == "charpoly"]
    for i, m in enumerate(matrices):
        # reference: sympy's exact characteristic polynomial, leading coefficient dropped
        coefficients = sympy.Matrix(m).charpoly().all_coeffs()[1:]
        assert np.allclose(fm.values[i, poly], [float(c) for c in coefficients], atol=1e-9)


# ------------------------------------------------------------------------------------------
# Canonical keys


def _permuted(m: np.ndarray, rng: np.random.Generator) -> np.ndarray:
    return m[rng.permutation(m.shape[0])][:, rng.permutation(m.shape[1])]


@pytest.mark.parametrize("shape", [(1, 1), (1, 5), (2, 2), (3, 3), (3, 5), (4, 4), (5, 3),
                                   (6, 6), (7, 7), (8, 8), (8, 5)],
                         ids=lambda s: f"{s[0]}x{s[1]}")
@pytest.mark.parametrize("entries", [(-9, 10), (0, 2)], ids=["wide entries", "zero-one"])
def test_canonical_key_agrees_for_permuted_copies(shape, entries):
    rng = np.random.default_rng(hash((shape, entries)) % 2**32)
    for _ in range(8):
        m = rng.integers(*entries, size=shape)
        key = canonical_key(m)
        for _ in range(4):
            assert canonical_key(_permuted(m, rng)) == key
        assert canonical_key(m.tolist()) == key


def test_canonical_key_agrees_when_many_rows_are_alike():
    # 8 rows with one multiset of entries give 8! = 40320 orders, past the exact search
    rng = np.random.default_rng(3)
    cycle = np.eye(8, dtype=int) + np.roll(np.eye(8, dtype=int), 1, axis=1)
    blocks = np.kron(np.eye(4, dtype=int), np.ones((2, 2), dtype=int))
    for m in (cycle, blocks, np.zeros((8, 8), dtype=int), np.ones((9, 8), dtype=int)):
        key = canonical_key(m)
        for _ in range(6):
            assert canonical_key(_permuted(m, rng)) == key


def test_permutation_matrices_share_the_key_of_the_identity():
    identity = np.eye(5, dtype=int)
    for p in itertools.islice(itertools.permutations(range(5)), 0, 120, 7):
        assert canonical_key(identity[list(p)]) == canonical_key(identity)


def test_canonical_key_treats_equal_numbers_as_equal():
    assert canonical_key([[1, 0], [2, 3]]) == canonical_key(np.array([[3.0, 2.0], [-0.0, 1.0]]))
    with_nan = np.array([[np.nan, 1.0, 2.0], [3.0, 4.0, 5.0]])
    rng = np.random.default_rng(0)
    assert all(canonical_key(_permuted(with_nan, rng)) == canonical_key(with_nan)
               for _ in range(10))
    assert canonical_key([3, 1, 2]) == canonical_key(np.array([2.0, 3.0, 1.0]))


@pytest.mark.parametrize("first, second, why", [
    ([[1, 2], [3, 4]], [[1, 2], [3, 5]], "different sorted entries"),
    ([[1, 2], [3, 4]], [[1, 3], [2, 4]],
     "same entries, but rows {1,2},{3,4} against {1,3},{2,4}: row multisets are invariant"),
    ([[1, 1], [0, 0]], [[1, 0], [1, 0]], "row multisets {1,1},{0,0} against {0,1},{0,1}"),
    ([[1, 2, 3]], [[1, 2], [3, 4]], "different shapes"),
    ([[1, 2, 3]], [[1], [2], [3]], "a row is not a column"),
    ([[1, 1, 0, 0], [1, 1, 0, 0], [0, 0, 1, 1], [0, 0, 1, 1]],
     [[1, 1, 0, 0], [0, 1, 1, 0], [0, 0, 1, 1], [1, 0, 0, 1]],
     "equal row and column sums, but rank 2 against rank 3 (rank is invariant)"),
], ids=["entries", "row multisets", "zero-one rows", "shape", "transpose", "rank 4x4"])
def test_canonical_key_differs_for_inequivalent_matrices(first, second, why):
    assert canonical_key(first) != canonical_key(second), why


def test_canonical_key_differs_past_the_exact_search():
    # Both 8x8 matrices have every row and column sum 2 and every row the multiset {0^6, 1^2},
    # so the exact search is skipped; the rank (4 against 7, checked with numpy) proves that
    # no row and column permutation maps one to the other.
    cycle = np.eye(8, dtype=int) + np.roll(np.eye(8, dtype=int), 1, axis=1)
    blocks = np.kron(np.eye(4, dtype=int), np.ones((2, 2), dtype=int))
    assert np.linalg.matrix_rank(cycle) == 7 and np.linalg.matrix_rank(blocks) == 4
    assert canonical_key(cycle) != canonical_key(blocks)


def test_canonical_key_rejects_three_axes():
    with pytest.raises(TableError, match="expected a list or a matrix, got 3 axes"):
        canonical_key(np.zeros((2, 2, 2)))


# ------------------------------------------------------------------------------------------
# Group keys on the sample of symmetric matrices


@pytest.fixture(scope="module")
def matrices():
    return load_table(TABLES / "symmetric_matrices.json")


def test_group_keys_keep_every_copy_of_a_source_together(matrices):
    # each copy is P M P^T, a row permutation followed by a column permutation of M
    keys = group_keys(matrices, "matrix")
    assert len(keys) == matrices.n_rows
    by_source = defaultdict(set)
    for source, key in zip(matrices.frame["source_matrix"], keys):
        by_source[source].add(key)
    split = {s: k for s, k in by_source.items() if len(k) > 1}
    assert not split, f"{len(split)} sources split across keys, e.g. {list(split)[:3]}"


def test_equal_group_keys_mean_equivalent_matrices(matrices):
    # Brute force (all row and column permutations of 3x3 and 4x4 matrices) confirms that
    # sources sharing a key are the same matrix up to permutation: the keys here are exact.
    keys = group_keys(matrices, "matrix")
    first_of = {}
    for key, source, m in zip(keys, matrices.frame["source_matrix"], matrices.frame["matrix"]):
        first_of.setdefault(key, {}).setdefault(source, m)
    shared = [list(sources.values()) for sources in first_of.values() if len(sources) > 1]
    for group in shared:
        a = group[0]
        n = a.shape[0]
        for b in group[1:]:
            assert any(np.array_equal(a[list(p)][:, list(q)], b)
                       for p in itertools.permutations(range(n))
                       for q in itertools.permutations(range(n)))
    assert len(set(keys)) >= 0.9 * matrices.frame["source_matrix"].nunique()


def test_group_keys_of_a_plain_column_are_its_values(small):
    assert group_keys(small, "kind").tolist() == ["toric", "fano", "toric", "other"]


def test_large_matrices_get_compact_features_by_default():
    # 16x16 integer matrices: the default encoding gives a few dozen compact features instead
    # of every sorted entry; their rank feature matches numpy's matrix_rank (the reference).

    rng = np.random.default_rng(4)
    cells = []
    for _ in range(30):
        rank = int(rng.integers(1, 17))
        cells.append(rng.integers(-1, 2, (16, rank)) @ rng.integers(-1, 2, (rank, 16)))
    records = [{"name": f"k{i}", "m": c.tolist()} for i, c in enumerate(cells)]
    table = read_table(json.dumps(records).encode(), "knots.json")
    fm = build_features(table)
    assert len(fm.features) <= 7 + 3 * 16, len(fm.features)
    assert any("compact features" in note for note in fm.notes)
    rank = fm.values[:, fm.names.index("rank(m)")]
    assert rank.tolist() == [float(np.linalg.matrix_rank(c)) for c in cells]
    full = build_features(table, array_encoding="full")
    assert len(full.features) > 256


def test_small_matrices_keep_the_full_invariant_features():

    records = [{"m": [[1, 2], [3, 4]]}, {"m": [[0, 1], [1, 0]]}, {"m": [[2, 2], [0, 1]]}]
    table = read_table(json.dumps(records).encode(), "small.json")
    names = build_features(table).names
    assert "sorted1(m)" in names and "rank(m)" not in names
    assert "rank(m)" in build_features(table, array_encoding="compact").names


def _interval_table():
    # worked by hand: x is known exactly on most rows and only as [low, high] on three
    lines = ["obj,x,y", 'a,1,0', 'b,"[2,4]",1', 'c,3,0', 'd,"[5,8]",1', 'e,6,0',
             'f,"[0,1]",1', 'g,7,0', 'h,9,1', 'i,10,0', 'j,11,1']
    return read_table("\n".join(lines).encode(), "marked.csv", id_column="obj")


@pytest.mark.parametrize("end, expected", [("low", [2, 5, 0]), ("high", [4, 8, 1]),
                                           ("midpoint", [3, 6.5, 0.5])])
def test_interval_cells_read_by_a_stated_end(end, expected):
    table = _interval_table()
    assert len(table.intervals("x")) == 3
    dropped = build_features(table, columns=["x", "y"])
    assert list(dropped.row_ids) == ["a", "c", "e", "g", "h", "i", "j"]
    assert any("3 of these rows are known by an interval" in w for w in dropped.warnings)
    read = build_features(table, columns=["x", "y"], intervals=end)
    assert len(read.rows) == 10
    values = dict(zip(read.row_ids, read.values[:, 0]))
    assert [values[r] for r in ("b", "d", "f")] == expected
    assert values["a"] == 1 and values["j"] == 11
    assert any("3 interval cells of 'x' read as their" in n for n in read.notes)


def test_an_unknown_interval_reading_is_refused_by_name():
    with pytest.raises(StepError, match="interval reading 'middle'"):
        build_features(_interval_table(), columns=["x"], intervals="middle")


@pytest.mark.parametrize("kind", ["projection", "clustering", "outliers"])
def test_lost_columns_and_rows_are_warnings_of_every_step(kind):
    # the sample table's independence_number is missing in most rows: every step that builds
    # features says so as a warning (first, in the summary too), not among its notes
    from analysis.steps import make_step

    table = load_table(Path(__file__).resolve().parent.parent / "sample_tables"
                       / "graphs_as_downloaded.csv")
    params = {"method": "pca"} if kind == "projection" else (
        {"k": 2} if kind == "clustering" else {"relations": False})
    result = make_step(kind, params).run(table)
    assert any("independence_number" in w for w in result.warnings)
    assert not any("independence_number" in n for n in result.notes)
    assert result.to_json()["warnings"] == list(result.warnings)
    assert "warning: Left out of the features" in result.summary()


def test_symmetric_matrices_give_row_sums_once():
    # reference: networkx's graph atlas; an adjacency matrix is symmetric and its row sums
    # are the vertex degrees (networkx's degree view)
    import networkx as nx

    graphs = [g for g in nx.graph_atlas_g()[1:60] if g.number_of_nodes() == 4]
    rows = [{"k": i, "m": nx.to_numpy_array(g, dtype=int).tolist()}
            for i, g in enumerate(graphs)]
    fm = build_features(records_table(rows), columns=["m"], array_encoding="invariant")
    kinds = {f.kind for f in fm.features}
    assert "column_sums" not in kinds and {"row_sums", "eigen"} <= kinds
    assert any(getattr(n, "code", None) == "symmetric_sums" for n in fm.notes)
    for g, values in zip(graphs, fm.values):
        row = dict(zip(fm.names, values))
        degrees = sorted((d for _, d in g.degree()), reverse=True)
        assert [row[f"rowsum{k}(m)"] for k in range(1, 5)] == degrees


def test_one_asymmetric_matrix_keeps_column_sums():
    rows = [{"k": 0, "m": [[0, 1], [1, 0]]}, {"k": 1, "m": [[0, 2], [1, 0]]}]
    fm = build_features(records_table(rows), columns=["m"], array_encoding="invariant")
    assert {"row_sums", "column_sums", "charpoly"} <= {f.kind for f in fm.features}
    assert not any(getattr(n, "code", None) == "symmetric_sums" for n in fm.notes)


def test_a_target_value_lost_to_missing_cells_names_the_column_that_lost_it():
    # networkx's graph atlas: the girth of a forest is infinite (networkx.girth), so a
    # table leaves it empty for exactly the forests, and asking whether a graph is a forest
    # drops every forest with its empty girth
    import json

    import networkx as nx

    from analysis.errors import StepError
    from analysis.separation import SeparatorStep
    from analysis.table import read_table

    rows, forests = [], 0
    for graph in nx.graph_atlas_g()[1:300]:
        girth = nx.girth(graph)
        forests += nx.is_forest(graph)
        rows.append({"v": graph.number_of_nodes(), "e": graph.number_of_edges(),
                     "girth": None if girth == float("inf") else girth,
                     "forest": nx.is_forest(graph)})
    table = read_table(json.dumps(rows).encode(), "atlas.json")
    with pytest.raises(StepError) as refused:
        SeparatorStep(target="forest", columns=["v", "e", "girth"]).run(table)
    said = str(refused.value)
    assert "has one class (False)" in said
    assert f"'True' ({forests} rows; 'girth' is missing in {forests})" in said


@pytest.mark.parametrize("q", [0, 1, 2, -1, -3, Fraction(1, 2), Fraction(-1, 2), Fraction(7, 3),
                               Fraction(-22, 7), Fraction(41, 2)])
@pytest.mark.parametrize("relation", [">=", "<="])
def test_a_log_scaled_threshold_reads_in_the_columns_own_values(q, relation):
    # sympy evaluates sign(x)*log10(1+|x|) against q to 60 digits: the reference for each x
    import sympy

    from analysis.features import signed_log_threshold

    fractional = Fraction(q).denominator != 1
    threshold = signed_log_threshold(q, relation, True)
    assert threshold is not None
    if fractional:
        assert signed_log_threshold(q, relation, False) is None
    edge = abs(threshold)
    for x in sorted({0, 1, -1, threshold - 1, threshold, threshold + 1, -edge - 1, -edge,
                     -edge + 1, edge - 1, edge, edge + 1, 10**25, -10**25}):
        value = sympy.sign(x) * sympy.log(1 + abs(x), 10)
        gap = (value - sympy.Rational(q.numerator, q.denominator)
               if isinstance(q, Fraction) else value - q).evalf(60)
        holds = gap >= 0 if relation == ">=" else gap <= 0
        assert bool(holds) == (x >= threshold if relation == ">=" else x <= threshold), x


def test_value_counts_of_blocks_merge_to_the_counts_of_the_whole_column():
    # the merge of two blocks' counts equals numpy's count of the joined column (numpy's
    # unique with return_counts is the reference), with missing cells left out
    from analysis.features import merge_value_counts, value_counts

    rng = np.random.default_rng(2)
    column = rng.integers(-4, 9, 500).astype(float)
    column[rng.choice(500, 40, replace=False)] = np.nan
    merged = merge_value_counts(value_counts(column[:180]), value_counts(column[180:]))
    values, counts = np.unique(column[np.isfinite(column)], return_counts=True)
    np.testing.assert_array_equal(merged[0], values)
    np.testing.assert_array_equal(merged[1], counts)
    assert merged[1].sum() == 460
