"""The benchmark's own tables: integer invariants with planted structure, as CSV and Parquet.

Every table has 20 columns and is generated from a seed, so two runs measure the same data:

* ``c01`` .. ``c16``: integer invariants of four kinds of object (four clusters with their
  own centres and spreads; some columns small, some in the hundreds, two skewed);
* ``c17 = 2*c01 - c02 + 3*c05 + 7`` and ``c18 = c03 + c04``: exact linear relations;
* ``c19``: an independent wide-ranged integer;
* ``label``: 0/1, the planted linear rule ``3*c01 - 2*c03 + c06 >= t`` (``t`` near the
  median, so the two classes are about equally common). A separator on integer data should
  find this equation exactly, with no violating rows.

The files go into a folder the caller gives (a temporary folder, never the repository).
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np

COLUMNS = 20
TARGET = "label"
RULE = {"c01": 3, "c03": -2, "c06": 1}
RELATIONS = ("c17 = 2*c01 - c02 + 3*c05 + 7", "c18 = c03 + c04")
# Bump when the generator changes, so cached files are not reused across versions.
VERSION = 1


def make_frame(rows: int, seed: int = 0):
    """The table as a pandas frame of int64 columns (see the module docstring)."""
    import pandas as pd

    rng = np.random.default_rng([seed, rows])
    kind = rng.integers(0, 4, size=rows)
    centres = rng.integers(5, 60, size=(4, 16))
    spreads = rng.integers(2, 9, size=(4, 16))
    base = centres[kind] + np.rint(rng.normal(size=(rows, 16)) * spreads[kind]).astype(np.int64)
    scale = np.array([1, 1, 1, 1, 1, 1, 3, 10, 1, 1, 25, 1, 1, 2, 1, 1])
    values = base * scale
    # two skewed columns: counts with a long right tail
    values[:, 8] = rng.geometric(0.05, size=rows) + kind
    values[:, 12] = rng.poisson(3.0 + 2 * kind)
    data = {f"c{j + 1:02d}": values[:, j].astype(np.int64) for j in range(16)}
    data["c17"] = 2 * data["c01"] - data["c02"] + 3 * data["c05"] + 7
    data["c18"] = data["c03"] + data["c04"]
    data["c19"] = rng.integers(-10**6, 10**6, size=rows)
    score = sum(coef * data[name] for name, coef in RULE.items())
    threshold = int(np.median(score)) + 1
    data[TARGET] = (score >= threshold).astype(np.int64)
    frame = pd.DataFrame(data)
    assert frame.shape[1] == COLUMNS
    frame.attrs["threshold"] = threshold
    return frame


def rule_text(threshold: int) -> str:
    terms = " ".join(f"{'+' if c > 0 else '-'} {abs(c)}*{n}" for n, c in RULE.items())
    return f"{TARGET} = 1 exactly when {terms.lstrip('+ ')} >= {threshold}"


def ensure_tables(folder: Path, rows: int, seed: int = 0) -> dict:
    """Write (or reuse) ``T{rows}.csv`` and ``T{rows}.parquet`` in ``folder``.

    Returns {"csv": path, "parquet": path, "rows": rows, "threshold": t, "frame_bytes": n},
    where frame_bytes is the in-memory size of the frame pandas reads from the Parquet file.
    """
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    csv_path = folder / f"T{rows}.csv"
    parquet_path = folder / f"T{rows}.parquet"
    info_path = folder / f"T{rows}.json"
    if info_path.exists():
        info = json.loads(info_path.read_text())
        if info.get("version") == VERSION and info.get("seed") == seed \
                and csv_path.exists() and parquet_path.exists():
            return {**info, "csv": csv_path, "parquet": parquet_path}
    frame = make_frame(rows, seed)
    frame.to_csv(csv_path, index=False)
    frame.to_parquet(parquet_path, index=False, engine="pyarrow")
    info = {"version": VERSION, "seed": seed, "rows": rows,
            "threshold": frame.attrs["threshold"],
            "frame_bytes": int(frame.memory_usage(index=True, deep=True).sum()),
            "csv_bytes": csv_path.stat().st_size,
            "parquet_bytes": parquet_path.stat().st_size}
    info_path.write_text(json.dumps(info))
    return {**info, "csv": csv_path, "parquet": parquet_path}


# ----------------------------------------------------------------------------------------
# A table of integer matrices

MATRIX_ROWS = 13_000
MATRIX_SIZE = 16
MATRIX_COLUMN = "m"
MATRIX_TARGET = "low_rank"
# the flag is true exactly when the matrix's rank is at most this
MATRIX_RANK_CUT = 13
MATRIX_VERSION = 1


def make_matrices(rows: int = MATRIX_ROWS, seed: int = 0):
    """Integer matrices of planted rank, and the flag ``rank <= MATRIX_RANK_CUT``.

    Each matrix is A @ B with A of shape 16 x r and B of shape r x 16, entries from -3 to 3,
    and r drawn from 10 to 16, so its rank is at most r (almost always exactly r). The flag is
    computed from numpy's rank of the product, not from r, so it is right for every row.
    Returns (matrices as an int64 array rows x 16 x 16, ranks, flags, extra integer columns).
    """
    rng = np.random.default_rng([seed, rows, MATRIX_SIZE])
    n = MATRIX_SIZE
    matrices = np.empty((rows, n, n), dtype=np.int64)
    inner = rng.integers(10, n + 1, size=rows)
    for i, r in enumerate(inner.tolist()):
        left = rng.integers(-3, 4, size=(n, r))
        right = rng.integers(-3, 4, size=(r, n))
        matrices[i] = left @ right
    ranks = np.linalg.matrix_rank(matrices.astype(np.float64))
    flags = ranks <= MATRIX_RANK_CUT
    # two plain integer columns beside the matrix: its trace and a number unrelated to it
    extra = {"trace": np.trace(matrices, axis1=1, axis2=2),
             "noise": rng.integers(0, 100, size=rows)}
    return matrices, ranks, flags, extra


def ensure_matrix_table(folder: Path, rows: int = MATRIX_ROWS, seed: int = 0) -> dict:
    """Write (or reuse) ``M{rows}.csv``: an object id, the matrix as JSON-array text, the two
    integer columns and the flag. Returns {"csv": path, "parquet": path (the same CSV: the
    matrix table has no Parquet form), "rows": rows, "frame_bytes": n, "true_rows": k}."""
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    csv_path = folder / f"M{rows}.csv"
    info_path = folder / f"M{rows}.json"
    if info_path.exists():
        info = json.loads(info_path.read_text())
        if info.get("version") == MATRIX_VERSION and info.get("seed") == seed \
                and csv_path.exists():
            return {**info, "csv": csv_path, "parquet": csv_path}
    matrices, ranks, flags, extra = make_matrices(rows, seed)
    with csv_path.open("w", encoding="utf-8") as out:
        out.write(f"object,{MATRIX_COLUMN},trace,noise,{MATRIX_TARGET}\n")
        for i in range(rows):
            cell = json.dumps(matrices[i].tolist(), separators=(",", ":"))
            out.write(f'o{i},"{cell}",{extra["trace"][i]},{extra["noise"][i]},'
                      f'{"true" if flags[i] else "false"}\n')
    info = {"version": MATRIX_VERSION, "seed": seed, "rows": rows,
            "frame_bytes": int(csv_path.stat().st_size), "true_rows": int(flags.sum()),
            "ranks": {int(r): int(c) for r, c in zip(*np.unique(ranks, return_counts=True))}}
    info_path.write_text(json.dumps(info))
    return {**info, "csv": csv_path, "parquet": csv_path}
