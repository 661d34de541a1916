"""Compact features of a matrix cell: a few dozen numbers that describe it, whatever its size.

A 16x16 matrix padded and flattened gives 256 features per cell (thousands when cells differ
in shape), and its sorted entries are hard to read on an axis. The compact encoding keeps
what a mathematician would look at first: the size, the rank, the trace and determinant, the
singular values, the eigenvalues of the symmetrised form (M + M^T)/2, and the moduli of the
eigenvalues of M. Every one of them is unchanged when the rows and columns are permuted
together (and the size, rank, singular values and |det| under any row and column
permutations).

Lists (1-d cells) are treated as matrices with one row.
"""

from __future__ import annotations

import numpy as np

__all__ = ["COMPACT_FROM_ENTRIES", "COMPACT_SPECTRUM", "SCALAR_TITLES", "SPECTRUM_TITLES",
           "compact_invariants"]

# A matrix column whose largest cell has more entries than this gets the compact features by
# default; smaller ones keep the full permutation-invariant encoding.
COMPACT_FROM_ENTRIES = 36
# The largest values of each spectrum kept (the rest are small by construction, or zero).
COMPACT_SPECTRUM = 16

SCALAR_TITLES = {
    "rows": "number of rows",
    "columns": "number of columns",
    "rank": "rank",
    "trace": "trace",
    "determinant": "determinant",
    "nonzero": "nonzero entries",
    "entry_sum": "sum of entries",
}
SPECTRUM_TITLES = {
    "singular": "singular value",
    "symmetric_eigen": "eigenvalue of (M + M^T)/2",
    "eigen_modulus": "eigenvalue modulus",
}


def compact_invariants(cell: np.ndarray) -> dict[str, float | np.ndarray]:
    """The compact features of one finite matrix (or list) as floats.

    Scalars (keys of ``SCALAR_TITLES``) are floats; spectra (keys of ``SPECTRUM_TITLES``) are
    arrays sorted from the largest, at most ``COMPACT_SPECTRUM`` long. A non-square matrix
    has NaN trace and determinant and no eigenvalues (empty arrays).

    >>> found = compact_invariants(np.array([[2, 1], [1, 2]]))
    >>> found["rank"], found["determinant"], found["symmetric_eigen"].tolist()
    (2.0, 3.0, [3.0, 1.0])
    """
    m = np.asarray(cell, dtype=np.float64)
    if m.ndim == 1:
        m = m.reshape(1, -1)
    rows, columns = m.shape
    square = rows == columns and rows > 0
    singular = np.linalg.svd(m, compute_uv=False) if m.size else np.zeros(0)
    tolerance = (singular.max() if singular.size else 0.0) * max(rows, columns) \
        * np.finfo(np.float64).eps
    found: dict[str, float | np.ndarray] = {
        "rows": float(rows),
        "columns": float(columns),
        "rank": float(np.sum(singular > tolerance)),
        "trace": float(np.trace(m)) if square else np.nan,
        "determinant": _determinant(m) if square else np.nan,
        "nonzero": float(np.count_nonzero(m)),
        "entry_sum": float(m.sum()),
        "singular": singular[:COMPACT_SPECTRUM],
    }
    if square:
        symmetric = np.linalg.eigvalsh((m + m.T) / 2)[::-1]
        moduli = np.sort(np.abs(np.linalg.eigvals(m)))[::-1]
    else:
        symmetric = moduli = np.zeros(0)
    found["symmetric_eigen"] = symmetric[:COMPACT_SPECTRUM]
    found["eigen_modulus"] = moduli[:COMPACT_SPECTRUM]
    return found


def _determinant(m: np.ndarray) -> float:
    """The determinant; exact (rounded) for integer matrices, whose determinant is a whole
    number."""
    value = float(np.linalg.det(m))
    if np.all(m == np.round(m)) and abs(value) < 2**52:
        return float(np.round(value))
    return value
