"""Compact matrix features checked against sympy's exact linear algebra and numpy."""

import numpy as np
import pytest
import sympy

from analysis.matrix_features import COMPACT_SPECTRUM, compact_invariants


@pytest.mark.parametrize("seed", range(6))
def test_rank_determinant_trace_match_sympy(seed):
    # Reference: sympy's exact rank, determinant and trace of integer matrices.
    rng = np.random.default_rng(seed)
    size = int(rng.integers(2, 9))
    m = rng.integers(-3, 4, (size, size))
    if seed % 2:  # a rank-deficient one: a row that is a sum of two others
        m[-1] = m[0] + m[1]
    exact = sympy.Matrix(m.tolist())
    found = compact_invariants(m)
    assert found["rank"] == exact.rank()
    assert found["determinant"] == int(exact.det())
    assert found["trace"] == int(exact.trace())
    assert found["nonzero"] == np.count_nonzero(m) and found["entry_sum"] == m.sum()


def test_spectra_match_numpy_and_ignore_a_simultaneous_permutation():
    # Eigenvalues are similarity invariants (linear algebra, common practice): P M P^T has
    # those of M; singular values are unchanged by any row and column permutations.
    rng = np.random.default_rng(9)
    m = rng.integers(0, 5, (16, 16))
    found = compact_invariants(m)
    assert np.allclose(found["singular"], np.linalg.svd(m, compute_uv=False)[:COMPACT_SPECTRUM])
    p = np.eye(16, dtype=int)[rng.permutation(16)]
    q = np.eye(16, dtype=int)[rng.permutation(16)]
    permuted = compact_invariants(p @ m @ p.T)
    for key in ("symmetric_eigen", "eigen_modulus", "singular"):
        assert np.allclose(found[key], permuted[key]), key
    assert permuted["trace"] == found["trace"]
    assert np.allclose(compact_invariants(p @ m @ q)["singular"], found["singular"])


def test_non_square_and_lists():
    found = compact_invariants(np.array([[1, 0, 2], [0, 1, 3]]))
    assert found["rows"] == 2 and found["columns"] == 3 and found["rank"] == 2
    assert np.isnan(found["trace"]) and np.isnan(found["determinant"])
    assert len(found["symmetric_eigen"]) == 0
    listed = compact_invariants(np.array([3, 4]))
    assert listed["rows"] == 1 and listed["singular"][0] == pytest.approx(5.0)
