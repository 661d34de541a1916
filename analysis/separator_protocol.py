"""The separator's splits and samples: train/test splits (stratified, or keeping groups
together), seeded samples of rows, test rows identical to training rows, permuted copies of a
matrix column for the training side, and the worker threads that fit splits at once.

Every function here is seeded by its arguments alone, so the same seed gives the same rows.
"""

from __future__ import annotations

import dataclasses
import warnings as _warnings
from typing import TYPE_CHECKING

import numpy as np

from analysis.errors import StepError
from analysis.features import build_features
from analysis.table import Table
from analysis.threads import one_thread_each, refit_workers

if TYPE_CHECKING:
    from analysis.separation import SeparatorStep

# Refits of a kernel machine cost about the square of the rows; the permutation test and the
# learning curve run kernel machines on a sample of this many rows.
KERNEL_PERMUTATION_ROWS = 1000
KERNEL_CURVE_ROWS = 3000
KERNEL_PERMUTATION_TEST_ROWS = 2000
# On a large table each permutation refit uses at most this many training rows (the observed
# score is refitted on the same rows): 50 refits then cost about one fit on 250000 rows.
LARGE_PERMUTATION_ROWS = 5000


# ----------------------------------------------------------------------------------------
# Splits


def make_splits(n: int, strata: np.ndarray | None, groups: np.ndarray | None, fraction: float,
            count: int, seed: int, table_name: str) -> tuple[list, str]:
    """``count`` (train, test) index pairs over ``n`` rows, and a sentence saying how.

    ``strata`` are class codes (None for a regression); ``groups`` keep rows together.
    """
    from sklearn.model_selection import ShuffleSplit, StratifiedShuffleSplit

    if groups is not None:
        return _group_splits(strata, groups, fraction, count, seed, table_name)
    index = np.zeros(n)
    if strata is None:
        splitter = ShuffleSplit(n_splits=count, train_size=fraction, random_state=seed)
        method = f"random split, training fraction {fraction}"
        return [(np.sort(a), np.sort(b)) for a, b in splitter.split(index)], method
    splitter = StratifiedShuffleSplit(n_splits=count, train_size=fraction, random_state=seed)
    try:
        pairs = [(np.sort(a), np.sort(b)) for a, b in splitter.split(index, strata)]
    except ValueError as exc:
        raise StepError(f"{table_name}: cannot split {n} rows at training fraction "
                        f"{fraction} with every class on both sides ({exc}). Use a training "
                        "fraction nearer 0.5 or a target with fewer rare classes.") from None
    return pairs, f"stratified random split, training fraction {fraction}"


def _group_splits(strata, groups, fraction, count, seed, table_name):
    from sklearn.model_selection import GroupShuffleSplit, StratifiedGroupKFold

    codes = np.unique(groups.astype(str), return_inverse=True)[1]
    n_groups = int(codes.max()) + 1
    index = np.zeros(len(codes))
    train_is_fold = fraction < 0.5
    folds = max(2, round(1 / fraction) if train_is_fold else round(1 / (1 - fraction)))
    achieved = 1 / folds if train_is_fold else 1 - 1 / folds
    pairs = []
    classification = strata is not None
    if classification and abs(achieved - fraction) <= 0.05 and n_groups >= folds:
        for r in range(count * 4):
            splitter = StratifiedGroupKFold(n_splits=folds, shuffle=True,
                                            random_state=seed + r)
            with _warnings.catch_warnings():
                _warnings.simplefilter("ignore")
                fold_pairs = list(splitter.split(index, strata, codes))
            a, b = fold_pairs[r % folds]
            train, test = (b, a) if train_is_fold else (a, b)
            if len(np.unique(strata[train])) == len(np.unique(strata)) and len(test):
                pairs.append((np.sort(train), np.sort(test)))
            if len(pairs) == count:
                trained_on = "one fold" if train_is_fold else f"{folds - 1} of {folds} folds"
                return pairs, (f"stratified group split ({folds} folds, training on "
                               f"{trained_on}: training fraction about {achieved:.2f}), "
                               f"{n_groups} groups")
    pairs = []
    for r in range(count * 20):
        splitter = GroupShuffleSplit(n_splits=1, train_size=fraction, random_state=seed + r)
        try:
            a, b = next(splitter.split(index, None, codes))
        except ValueError as exc:
            raise StepError(f"{table_name}: cannot split {n_groups} groups at training "
                            f"fraction {fraction} ({exc}). Use a fraction nearer 0.5.") from None
        if classification and (len(np.unique(strata[a])) < len(np.unique(strata))
                               or len(b) == 0):
            continue
        pairs.append((np.sort(a), np.sort(b)))
        if len(pairs) == count:
            return pairs, (f"group split, training fraction {fraction} of the "
                           f"{n_groups} groups")
    raise StepError(f"{table_name}: no split of the {n_groups} groups at training fraction "
                    f"{fraction} puts every class on the training side. Use a fraction nearer "
                    "0.5, fewer classes, or a group column with more groups.")


def subsample(rows: np.ndarray, strata: np.ndarray | None, size: int, seed: int, *,
               groups: np.ndarray | None = None) -> np.ndarray:
    """A seeded sample of ``size`` of ``rows`` (stratified by ``strata`` when given).

    With ``groups``, whole groups are drawn so the sample's splits still keep them apart.
    """
    rows = np.asarray(rows)
    if len(rows) <= size:
        return rows
    rng = np.random.default_rng([seed, 5])
    if groups is not None:
        labels = groups[rows]
        unique, inverse = np.unique(labels.astype(str), return_inverse=True)
        order = rng.permutation(len(unique))
        sizes = np.bincount(inverse)[order]
        take = order[: max(2, int(np.searchsorted(np.cumsum(sizes), size)) + 1)]
        return rows[np.isin(inverse, take)]
    if strata is None:
        return np.sort(rng.choice(rows, size, replace=False))
    from sklearn.model_selection import train_test_split

    try:
        chosen, _ = train_test_split(rows, train_size=size, stratify=strata,
                                     random_state=int(rng.integers(2**31)))
    except ValueError:
        chosen = rng.choice(rows, size, replace=False)
    return np.sort(chosen)


def share_sample(rows: np.ndarray, strata: np.ndarray | None, size: int,
                  seed: int) -> np.ndarray:
    """A seeded sample of about ``size`` of ``rows``, each class in its share and at least once.

    ``strata`` are class codes lined up with ``rows`` (None: a plain random sample). Drawn
    with numpy a class at a time, which on half a million rows is many times faster than
    scikit-learn's stratified splitter.
    """
    rows = np.asarray(rows)
    if len(rows) <= size:
        return rows
    rng = np.random.default_rng([seed, 7])
    if strata is None:
        return np.sort(rng.choice(rows, size, replace=False))
    order = np.argsort(strata, kind="stable")
    counts = np.bincount(strata)
    chosen = []
    start = 0
    for count in counts:
        if count:
            members = rows[order[start:start + count]]
            take = min(int(count), max(1, round(size * int(count) / len(rows))))
            chosen.append(rng.choice(members, take, replace=False))
        start += count
    return np.sort(np.concatenate(chosen))


def identical_across(X: np.ndarray, train: np.ndarray, test: np.ndarray) -> int:
    """How many test rows have the same feature values as some training row.

    Values are compared to about nine significant digits: features computed in floating
    point (eigenvalues, singular values) of the same matrix written with its rows permuted
    differ in the last bits.
    """
    import pandas as pd

    # adding 0.0 turns -0.0 into 0.0. Integers below 2**30 already have at most 30
    # significant bits, so only the other columns need their mantissas rounded
    rounded = X + 0.0
    whole = np.ones(X.shape[1], dtype=bool)
    for start in range(0, len(X), 65_536):
        block = X[start:start + 65_536]
        whole &= np.all((block == np.round(block)) & (np.abs(block) < 2.0**30), axis=0)
    for j in np.flatnonzero(~whole):
        mantissa, exponent = np.frexp(X[:, j])
        rounded[:, j] = np.ldexp(np.round(mantissa * 2.0**30) / 2.0**30, exponent) + 0.0
    hashes = pd.util.hash_pandas_object(pd.DataFrame(rounded), index=False).to_numpy()
    # a hash table lookup: the same count as np.isin, without sorting a million hashes
    return int(pd.Series(hashes[test]).isin(hashes[train]).sum())


# ----------------------------------------------------------------------------------------
# Worker threads


def split_workers(kernel_mode: str, fit_rows: int, *, one_at_a_time: bool = False) -> int:
    """Threads for fits on up to ``fit_rows`` rows: one for Nystroem machines on more than
    ``KERNEL_CURVE_ROWS`` rows, whose fits each hold a matrix of up to 50000 x 1000
    features (two at once would double the peak memory), and for fits that must run
    ``one_at_a_time`` (separator_models.shares_process_random); every core otherwise."""
    if one_at_a_time or (kernel_mode == "nystroem" and fit_rows > KERNEL_CURVE_ROWS):
        return 1
    return refit_workers()


def on_workers(work, items, workers: int):
    """``work(item)`` for each item, in order, on ``workers`` threads (each fit on one
    library thread); results are yielded in the order of ``items`` as they are ready."""
    items = list(items)
    if workers <= 1 or len(items) <= 1:
        for item in items:
            yield work(item)
        return
    from concurrent.futures import ThreadPoolExecutor

    with one_thread_each(workers), ThreadPoolExecutor(max_workers=workers) as pool:
        yield from pool.map(work, items)


# ----------------------------------------------------------------------------------------
# Feature columns and augmentation


def excluded_columns(table: Table, step: SeparatorStep) -> tuple[str, ...]:
    """Columns left out of the default features: the group column when it is not a matrix
    (a group label is a name for the object, not an invariant of it), and the columns of the
    statement a derived target comes from (they tell its breakers apart by the statement
    itself; the question is whether the other invariants can)."""
    if step.columns is not None:
        return ()
    left_out: tuple[str, ...] = ()
    if step.groups is not None and table.column(step.groups).role != "array":
        left_out += (step.groups,)
    if step.target_statement is not None:
        from analysis.derived import Statement

        left_out += tuple(name for name, _ in Statement.from_json(step.target_statement).terms)
    return left_out


def augment_column(table: Table, fm, groups: str | None) -> str:
    arrays = [c for c in fm.columns if table.column(c).role == "array"]
    if groups in arrays:
        return groups
    if not arrays:
        raise StepError(f"{table.name}: augment_permutations needs a matrix or list column "
                        "among the features; there is none. Set it to 0.")
    return arrays[0]


def permuted_copies(table: Table, fm, column: str, copies: int, seed: int,
                     array_encoding: str, log_scale: str):
    """Feature rows of ``copies`` permuted versions of each kept row's cell in ``column``.

    Only the features that come from ``column`` change; the rest are copied from the source
    row. Returns (values, source) where source[i] is the kept-row index the copy came from.
    """
    import pandas as pd

    rng = np.random.default_rng([seed, 9])
    cells = table.frame[column].tolist()
    positions = []
    new_cells = []
    for kept, position in enumerate(fm.rows):
        cell = cells[position]
        if cell is None:
            continue
        for _ in range(copies):
            positions.append(kept)
            new_cells.append(_permute_cell(cell, rng))
    source = np.array(positions, dtype=np.int64)
    if len(source) == 0:
        return np.empty((0, fm.values.shape[1])), source
    extra = table.frame.iloc[fm.rows[source]].copy()
    extra[column] = pd.Series(new_cells, index=extra.index, dtype=object)
    frame = pd.concat([table.frame, extra], ignore_index=True)
    derived = dataclasses.replace(table, frame=frame, id_column=None)
    block = build_features(derived, columns=[column], array_encoding=array_encoding,
                           log_scale=log_scale, missing="impute")
    mine = [j for j, f in enumerate(fm.features) if f.column == column]
    if [fm.names[j] for j in mine] != block.names:
        raise StepError(f"{table.name}: permuted copies of {column!r} gave different features "
                        "from the original; use array_encoding 'invariant' or set "
                        "augment_permutations to 0.")
    values = fm.values[source].copy()
    values[:, mine] = block.values[table.n_rows:]
    return values, source


def _permute_cell(cell: np.ndarray, rng: np.random.Generator) -> np.ndarray:
    if cell.ndim == 1:
        return cell[rng.permutation(len(cell))]
    rows, cols = cell.shape
    if rows == cols and np.array_equal(cell, cell.T):
        order = rng.permutation(rows)
        return cell[np.ix_(order, order)]
    return cell[np.ix_(rng.permutation(rows), rng.permutation(cols))]
