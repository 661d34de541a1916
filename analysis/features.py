"""From a Table to a feature matrix whose every feature names the column it came from.

Numeric invariants are used in the table's own units (so an equation found later reads in
them), optionally on the signed log scale ``sign(x) * log10(1 + |x|)`` for heavy tails and
integers beyond 64 bits. Categories are one-hot encoded, flags become 0/1, and array columns
are encoded by choice: padded flattening, or features that do not change when the rows or
columns of a matrix are permuted.

Canonical keys name a matrix up to row and column permutations; objects with equal keys form
a group, and groups never straddle a train/test split.
"""

from __future__ import annotations

import hashlib
import itertools
import math
from dataclasses import dataclass
from fractions import Fraction

import numpy as np
import pandas as pd

from analysis.errors import StepError, TableError
from analysis.notes import Note
from analysis.table import Table

# "invariant": the full permutation-invariant features for small matrices and the compact
# ones (analysis/matrix_features.py) past COMPACT_FROM_ENTRIES entries; "full": the full ones
# at any size; "compact": the compact ones at any size; "flat": padded entries; "both":
# invariant and flat.
ARRAY_ENCODINGS = ("invariant", "compact", "full", "flat", "both")
# A default feature column missing in more than this share of the rows is left out.
MISSING_SHARE_LIMIT = 0.30
# Dropping more than this share of the rows for missing values is a warning, not a note.
DROPPED_ROWS_WARNING = 0.10
LOG_SCALES = ("auto", "never", "always")
MISSING_POLICIES = ("drop", "impute")
# How an interval cell [low, high] of a number column becomes a feature value: a missing cell
# (dropped or filled in like any other), its low end, its high end or its midpoint.
INTERVAL_READINGS = ("missing", "low", "high", "midpoint")
# Most row orders the exact canonical key will try before it falls back to invariants.
EXACT_KEY_ORDERS = 5040
# Most one-hot levels of a category column.
MAX_LEVELS = 200


@dataclass(frozen=True)
class Feature:
    """One column of the feature matrix: its name, the table column it came from, and how."""

    name: str
    column: str
    kind: str
    detail: str = ""


@dataclass(frozen=True)
class FeatureMatrix:
    """Features for the kept rows of a table.

    ``values`` is float64, one row per kept row and one column per feature; it is usually
    stored column by column (Fortran order), as it is built a column at a time. Steps that
    need rows contiguous make their own copy.
    """

    values: np.ndarray
    features: tuple[Feature, ...]
    rows: np.ndarray
    row_ids: np.ndarray
    notes: tuple[str, ...] = ()
    # default feature columns left out for being mostly empty: (column, share missing)
    left_out: tuple[tuple[str, float], ...] = ()
    # what a reader must not miss: columns left out, many rows dropped
    warnings: tuple[str, ...] = ()

    @property
    def names(self) -> list[str]:
        return [f.name for f in self.features]

    @property
    def exact_columns(self) -> tuple[bool, ...]:
        """True for features that are exact integers in the table's own units."""
        # whole rows at a time, in blocks: one pass over the matrix in memory order, rather
        # than a strided pass per column (seconds on a million rows)
        whole = np.ones(self.values.shape[1], dtype=bool)
        for start in range(0, len(self.values), 65_536):
            block = self.values[start:start + 65_536]
            whole &= np.all(block == np.round(block), axis=0)
            whole &= np.all(np.abs(block) < 2**53, axis=0)
        return tuple(feature.kind in ("value", "flag", "onehot") and bool(whole[j])
                     for j, feature in enumerate(self.features))

    @property
    def columns(self) -> list[str]:
        """The table columns the features came from, each once, in order."""
        return list(dict.fromkeys(f.column for f in self.features))


def mostly_empty_columns(table: Table, columns: list[str],
                         intervals: str = "missing") -> list[tuple[str, float]]:
    """The columns missing in more than ``MISSING_SHARE_LIMIT`` of the rows, with that share.

    Empty cells and marker words count as missing, and so do interval cells unless
    ``intervals`` reads them as a value. Such a column is left out of the default features
    before any row is dropped, so that one mostly-empty column does not take most of the
    table with it.
    """
    n = max(table.n_rows, 1)

    def share(name: str) -> float:
        info = table.column(name)
        read = 0 if intervals == "missing" else (info.intervals or 0)
        return (info.missing - read) / n

    return [(name, share(name)) for name in columns if share(name) > MISSING_SHARE_LIMIT]


def without_mostly_empty(table: Table, columns: list[str], intervals: str = "missing"):
    """(``columns`` without the mostly-empty ones, those left out with their share missing):
    the default features leave out :func:`mostly_empty_columns` unless every column is one."""
    left_out = mostly_empty_columns(table, columns, intervals)
    if len(left_out) == len(columns):
        return columns, []
    return [name for name in columns if name not in dict(left_out)], left_out


def default_feature_columns(table: Table, *, target: str | None = None,
                            exclude: tuple[str, ...] = ()) -> list[str]:
    """Every invariant, flag, category and array column, but the target and excluded ones."""
    return [c.name for c in table.columns
            if c.role in ("invariant", "flag", "category", "array")
            and c.name != target and c.name not in exclude and c.dtype != "empty"]


def chosen_feature_columns(table, *, columns: list[str] | None = None,
                           target: str | None = None, exclude: tuple[str, ...] = (),
                           array_encoding: str = "invariant", log_scale: str = "auto",
                           missing: str = "drop", intervals: str = "missing") -> list[str]:
    """Check the feature settings and return the feature columns (StepError if unusable).

    Shared by the in-memory and the partitioned feature builders, so both refuse the same
    settings with the same words.
    """
    # the feature settings' records judge their values (analysis.settings imports this
    # module for the choices, so it is imported here)
    from analysis.settings import ARRAY_ENCODING, INTERVALS, LOG_SCALE, MISSING

    for record, value in ((ARRAY_ENCODING, array_encoding), (LOG_SCALE, log_scale),
                          (MISSING, missing), (INTERVALS, intervals)):
        record.check(value)
    if columns is None:
        columns = default_feature_columns(table, target=target, exclude=exclude)
    else:
        for name in columns:
            info = table.column(name)
            if info.role in ("id", "text"):
                raise StepError(
                    f"{table.name}: column {name!r} has the role {info.role} and cannot be a "
                    "feature. Give it the role invariant, category, flag or array first."
                )
        if target is not None and target in columns:
            raise StepError(f"{table.name}: the target {target!r} cannot also be a feature.")
    if not columns:
        raise StepError(f"{table.name}: no feature columns. Mark some columns as invariant, "
                        "flag, category or array.")
    return list(columns)


def build_features(table: Table, *, columns: list[str] | None = None, target: str | None = None,
                   array_encoding: str = "invariant", log_scale: str = "auto",
                   missing: str = "drop", exclude: tuple[str, ...] = (),
                   intervals: str = "missing") -> FeatureMatrix:
    """Build the feature matrix of ``table``.

    Parameters
    ----------
    columns: table columns to use; default every invariant, flag, category and array column
        except ``target`` and ``exclude``.
    target: a column whose missing cells also drop (or cannot be imputed in) a row.
    array_encoding: "invariant" (sorted entries, sorted row and column sums, singular values,
        eigenvalues or characteristic polynomial), "flat" (padded flattening) or "both".
    log_scale: "auto" (signed log for integers beyond 64 bits), "never" or "always".
    missing: "drop" rows with a missing feature or target, or "impute" (median / most common).
    intervals: how interval cells of number columns are read (``INTERVAL_READINGS``):
        "missing" (default), or their "low" end, "high" end or "midpoint".
    """
    chosen_by_default = columns is None
    columns = chosen_feature_columns(table, columns=columns, target=target, exclude=exclude,
                                     array_encoding=array_encoding, log_scale=log_scale,
                                     missing=missing, intervals=intervals)
    blocks: list[np.ndarray] = []
    features: list[Feature] = []
    notes: list[str] = []
    warnings: list[str] = []
    left_out: list[tuple[str, float]] = []
    if chosen_by_default:
        columns, left_out = without_mostly_empty(table, columns, intervals)
        if left_out:
            warnings.append(left_out_warning(left_out))
    run: list[str] = []         # consecutive plain number columns, converted together
    for name in columns + [None]:
        if name is not None and _is_plain_number(table, name, log_scale):
            run.append(name)
            continue
        if run:
            blocks.append(table.frame[run].to_numpy(dtype=np.float64, na_value=np.nan))
            features.extend(Feature(c, c, "value" if table.column(c).role == "invariant"
                                    else "flag") for c in run)
            run = []
        if name is not None:
            block, names = _encode_column(table, name, array_encoding, log_scale, notes)
            blocks.append(block)
            features.extend(names)
    values = _stacked(blocks, table.n_rows)
    if intervals != "missing":
        _read_intervals(table, values, features, intervals, notes)
    bad = ~np.isfinite(values)
    target_missing = np.zeros(table.n_rows, dtype=bool)
    if target is not None:
        target_missing = _missing_mask(table, target)
    rows = np.arange(table.n_rows)
    if bad.any() or target_missing.any():
        infinite = int(np.isinf(values).any(axis=1).sum())   # before any cell is filled
        if missing == "drop":
            keep = ~(bad.any(axis=1) | target_missing)
            filled = 0
        else:
            filled = _impute(values, bad, features)
            keep = ~target_missing
        said, warned = missing_said(
            missing, table.n_rows, infinite=infinite,
            dropped=int((~keep).sum()), in_features=int(bad.any(axis=1).sum()),
            in_target=int(target_missing.sum()), filled=filled,
            hint=_interval_hint(table, columns, bad.any(axis=1), intervals)
            if missing == "drop" else "")
        notes.extend(said)
        warnings.extend(warned)
        values = values[keep]
        rows = rows[keep]
    if len(rows) == 0:
        raise StepError(f"{table.name}: no rows left after removing missing values. Choose "
                        "other columns or impute missing values.")
    row_ids = table.row_ids[rows]
    return FeatureMatrix(values=values, features=tuple(features),
                         rows=rows, row_ids=row_ids, notes=tuple(notes),
                         left_out=tuple(left_out), warnings=tuple(warnings))


def _read_intervals(table: Table, values: np.ndarray, features: list[Feature], end: str,
                    notes: list[str]) -> None:
    """Write each interval cell's ``end`` ("low", "high", "midpoint") into the features of
    its number column, in place (on the same scale as the column's other values)."""
    for j, feature in enumerate(features):
        if feature.kind not in ("value", "log"):
            continue
        marks = table.intervals(feature.column)
        if not len(marks):
            continue
        read = marks.numeric(end)
        values[marks.positions, j] = read if feature.kind == "value" \
            else signed_log(read.tolist())
        notes.append(Note("intervals_read", f"{len(marks)} interval cells of "
                          f"{feature.column!r} read as their "
                          f"{'midpoint' if end == 'midpoint' else end + ' end'}.",
                          cells=len(marks), column=feature.column, end=end))


def _interval_hint(table: Table, columns: list[str], dropped: np.ndarray,
                   intervals: str) -> str:
    """A sentence for a drop that interval cells of the features caused in part: reading them
    by one value would keep those rows."""
    if intervals != "missing":
        return ""
    marked = np.zeros(table.n_rows, dtype=bool)
    for name in columns:
        marked[table.intervals(name).positions] = True
    count = int((marked & dropped).sum())
    if not count:
        return ""
    return (f" {count} of these rows are known by an interval in a feature column; reading "
            "intervals by their low end, high end or midpoint (intervals) keeps them.")


def missing_said(missing: str, n_rows: int, *, infinite: int, dropped: int, in_features: int,
                 in_target: int, filled: int, hint: str = "") -> tuple[list, list]:
    """(notes, warnings) of the features of a table of ``n_rows`` rows with missing values:
    ``infinite`` rows with an infinite value; under ``missing="drop"`` the ``dropped`` rows
    (``in_features`` missing a feature, ``in_target`` the target); under "impute" the
    ``filled`` cells and the ``in_target`` rows dropped. Both engines say it here."""
    notes, warnings = [], []
    if infinite:
        notes.append(infinite_note(infinite))
    if missing == "drop":
        text, serious = dropped_rows_text(n_rows, dropped, in_features, in_target, hint)
        (warnings if serious else notes).append(text)
    else:
        notes.append(filled_note(filled, in_target))
    return notes, warnings


def dropped_rows_text(n_rows: int, dropped: int, in_features: int, in_target: int,
                      hint: str = "") -> tuple[str, bool]:
    """What dropping rows with a missing value says, and whether it is a warning (more than
    DROPPED_ROWS_WARNING of the table) rather than a note. Both engines word it here."""
    text = (f"dropped {dropped} of {n_rows} rows with a missing value ({in_features} in "
            f"features, {in_target} in the target).")
    figures = dict(dropped=dropped, rows=n_rows, in_features=in_features, in_target=in_target)
    if dropped <= DROPPED_ROWS_WARNING * n_rows:
        return Note("rows_dropped", text + hint, **figures), False
    advice = []
    if in_features:
        advice.append("Leave out the feature columns with most missing cells, or fill in "
                      "missing values (missing: impute).")
    if in_target:
        advice.append("Rows with no known target value cannot be learned from; the separator "
                      "predicts them for checking by hand.")
    return Note("rows_dropped", text[0].upper() + text[1:-1] + f": more than "
                f"{DROPPED_ROWS_WARNING:.0%} of the table. " + " ".join(advice) + hint,
                **figures), True


def left_out_warning(left_out: list[tuple[str, float]]) -> Note:
    """The warning for mostly-empty columns left out of the default features."""
    named = ", ".join(f"{name!r} (missing in {share:.0%} of rows)" for name, share in left_out)
    return Note("columns_left_out", f"Left out of the features, being missing in more than "
                f"{MISSING_SHARE_LIMIT:.0%} of the rows: {named}. Name the columns (columns) "
                "to use them anyway; rows missing them would then be dropped or filled in.",
                columns=tuple(name for name, _ in left_out),
                shares=tuple(share for _, share in left_out))


def _stacked(blocks: list[np.ndarray], n_rows: int) -> np.ndarray:
    """The blocks side by side as one float64 matrix, each block released once copied.

    Filled a feature at a time into a (features, rows) array, where each write is contiguous,
    and returned as its transpose (column order, no further copy).
    """
    if len(blocks) == 1:
        return np.asarray(blocks.pop(), dtype=np.float64)
    width = sum(block.shape[1] for block in blocks)
    by_feature = np.empty((width, n_rows), dtype=np.float64)
    start = 0
    for i, block in enumerate(blocks):
        by_feature[start:start + block.shape[1]] = block.T
        start += block.shape[1]
        blocks[i] = None
    return by_feature.T


def _impute(values: np.ndarray, bad: np.ndarray, features: list[Feature]) -> int:
    """Fill ``bad`` cells in place with :func:`fills`; returns how many were filled."""
    gaps = {f.column for j, f in enumerate(features) if bad[:, j].any()}
    chosen = [j for j, f in enumerate(features) if f.column in gaps]   # whole one-hot blocks
    fill = fills([features[j] for j in chosen], [value_counts(values[:, j]) for j in chosen])
    return fill_cells(values, bad, features, fill, chosen)


def fill_cells(values: np.ndarray, bad: np.ndarray, features, fill: dict,
               columns=None) -> int:
    """Write ``fill[name]`` (0 for a feature it lacks) into the ``bad`` cells of each feature
    column in ``columns`` (default: all), in place; returns how many cells were filled. Both
    engines fill missing cells here (missing="impute")."""
    filled = 0
    for j in range(len(features)) if columns is None else columns:
        column_bad = bad[:, j]
        values[column_bad, j] = fill.get(features[j].name, 0.0)
        filled += int(column_bad.sum())
    return filled


def value_counts(column: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """A feature column's distinct present (finite) values, ascending, and how many rows
    hold each: what :func:`fills` decides from (counts of blocks of rows add up)."""
    return np.unique(column[np.isfinite(column)], return_counts=True)


def merge_value_counts(a: tuple, b: tuple) -> tuple:
    """Two blocks' (distinct values ascending, then one or more counts per value, as
    :func:`value_counts` gives them) as one: the distinct values of both, ascending, and each
    count summed over the two blocks."""
    merged, inverse = np.unique(np.concatenate([a[0], b[0]]), return_inverse=True)
    return (merged, *(np.bincount(inverse.ravel(), weights=np.concatenate([x, y]),
                                  minlength=len(merged)).astype(np.int64)
                      for x, y in zip(a[1:], b[1:])))


def fills(features: list[Feature], counted: list) -> dict[str, float]:
    """What each feature's missing cells are filled with (missing="impute"), by name, from
    its :func:`value_counts`.

    Numbers get the column median and a flag its most common value (:func:`fill_value`). A
    category's one-hot block takes its most common level as a whole (1 there, 0 in the other
    levels), so a filled row still has exactly one level set. A column with no value at all
    is filled with 0.
    """
    out, levels = {}, {}
    for feature, (values, counts) in zip(features, counted):
        if feature.kind == "onehot":
            levels.setdefault(feature.column, []).append(
                (feature.name, int(counts[values == 1.0].sum())))
        else:
            out[feature.name] = fill_value(feature.kind, values, counts)
    for found in levels.values():
        top = int(np.argmax([count for _, count in found]))
        out.update((name, float(j == top)) for j, (name, _) in enumerate(found))
    return out


def fill_value(kind: str, values: np.ndarray, counts: np.ndarray) -> float:
    """What a missing cell of a feature of ``kind`` is filled with (missing="impute"), from
    the feature's distinct present values (ascending) and how many rows hold each: the most
    common value for a flag (the smaller on a tie), else the median; 0 with no value at all.
    A category's one-hot block takes its most common level whole (:func:`fills`)."""
    if not len(values):
        return 0.0
    if kind == "flag":
        return float(values[int(np.argmax(counts))])
    cumulative, total = np.cumsum(counts), int(np.sum(counts))
    low = values[int(np.searchsorted(cumulative, (total - 1) // 2 + 1))]
    high = values[int(np.searchsorted(cumulative, total // 2 + 1))]
    return float((low + high) / 2)


def infinite_note(rows: int) -> Note:
    """The note for ``rows`` rows with an infinite feature value (both engines word it here)."""
    return Note("infinite_values", f"{rows} rows have an infinite feature value; treated as "
                "missing.", rows=rows)


def filled_note(filled: int, no_target: int) -> Note:
    """The note for cells filled in under missing="impute" (both engines word it here)."""
    return Note("cells_filled", f"filled {filled} missing feature cells (the median for "
                "numbers, the most common value for flags and categories); dropped "
                f"{no_target} rows with no target value.", cells=filled, dropped=no_target)


def target_values(table: Table, column: str, rows: np.ndarray | None = None) -> np.ndarray:
    """Values of a target column at ``rows``: numbers for invariants, labels otherwise."""
    info = table.column(column)
    if info.role == "array":
        raise StepError(f"{table.name}: the array column {column!r} cannot be a target.")
    if info.role == "invariant" and info.dtype in ("integer", "real", "big integer", "rational"):
        values = table.numeric(column)
    else:
        values = table.frame[column].to_numpy(dtype=object)
    return values if rows is None else values[rows]


# An invariant target with more distinct values than this is predicted as a number; with
# fewer, each value is a class (the separator's ``reading`` setting can choose either).
CLASS_READING_LIMIT = 12


def is_numeric_target(table: Table, column: str, reading: str = "auto") -> bool:
    """Whether a target is predicted as a number (regression) or by classes.

    reading: "auto" (a number when it is an invariant with more than ``CLASS_READING_LIMIT``
    distinct values), "number" (any numeric invariant), or "classes" (each value a class).
    """
    info = table.column(column)
    if reading == "classes" or info.role != "invariant":
        return False
    if reading == "number":
        return info.dtype in ("integer", "real", "big integer", "rational")
    return info.distinct > CLASS_READING_LIMIT


def group_keys(table: Table, column: str) -> np.ndarray:
    """Group labels: the values of a group column, or canonical keys of an array column."""
    info = table.column(column)
    series = table.frame[column]
    if info.role == "array":
        return np.array([("missing" if v is None else canonical_key(v)) for v in series],
                        dtype=object)
    return np.array([str(v) for v in series.tolist()], dtype=object)


def canonical_key(matrix) -> str:
    """A key equal for a matrix and every matrix obtained by permuting its rows and columns.

    The key is exact when few orderings of the smaller side need trying (at most
    ``EXACT_KEY_ORDERS``, counting only swaps of lines with equal multisets of entries): the
    least, over those orderings, of the matrix with the other side sorted. Other matrices get
    a key from permutation invariants (shape, the multisets of rows and of columns, and the
    sorted entries and diagonals of the two Gram matrices; for matrices with non-integer
    entries the singular values rounded to 8 decimals instead of the Gram matrices), which
    may merge inequivalent matrices but does not split equivalent integer ones. Lists are
    keyed by their sorted entries. Entries are compared as numbers: 1 and 1.0 are equal, and
    -0.0 is 0.
    """
    array = np.asarray(matrix)
    if array.ndim == 1:
        entries = sorted(_key_entry(x) for x in array.tolist())
        return "list:" + _hash(repr((len(entries), entries)))
    if array.ndim != 2:
        raise TableError(f"canonical key: expected a list or a matrix, got {array.ndim} axes.")
    rows, cols = array.shape
    if min(rows, cols) == 0:
        return f"exact:{rows}x{cols}"
    work = array if rows <= cols else array.T
    entries = [[_key_entry(x) for x in line] for line in work.tolist()]
    orders = _row_orders(entries)
    if orders is not None:
        best = None
        for order in orders:
            permuted = [entries[i] for i in order]
            # with the rows fixed, sorting the columns is the canonical column order
            candidate = tuple(sorted(zip(*permuted)))
            if best is None or candidate < best:
                best = candidate
        return f"exact:{rows}x{cols}:" + _hash(repr(best))
    summary = [
        array.shape,
        sorted(tuple(sorted(line)) for line in entries),
        sorted(tuple(sorted(line)) for line in zip(*entries)),
    ]
    if all(kind == 0 and isinstance(value, int) for line in entries for kind, value in line):
        # exact for integers: the Gram matrices W W^T and W^T W change only by a simultaneous
        # permutation of their rows and columns, so their entries and diagonals, sorted, are
        # invariants computed without rounding
        exact = np.array([[value for _, value in line] for line in entries], dtype=object)
        for gram in (exact.dot(exact.T), exact.T.dot(exact)):
            summary.append(sorted(gram.ravel().tolist()))
            summary.append(sorted(gram.diagonal().tolist()))
    else:
        values = work.astype(np.float64)
        finite = np.isfinite(values).all()
        singular = np.linalg.svd(values, compute_uv=False) if finite else []
        summary.append([round(float(v), 8) + 0.0 for v in singular])
    return f"invariants:{rows}x{cols}:" + _hash(repr(summary))


def _key_entry(value) -> tuple:
    """An entry as a sortable, exactly printed pair: (0, number) or (1, 0) for NaN."""
    if isinstance(value, (float, np.floating)):
        value = float(value)
        if math.isnan(value):
            return (1, 0)
        if value.is_integer():
            return (0, int(value))
        return (0, value)
    if isinstance(value, (bool, np.bool_)):
        return (0, int(value))
    if isinstance(value, (int, np.integer)):
        return (0, int(value))
    return (0, value)


def _row_orders(entries: list[list]):
    """Row orders worth trying, or None when there are too many for an exact key.

    A row's multiset of entries survives any permutation, so rows only need reordering
    among rows with the same multiset; blocks of such rows are taken in a fixed order.
    """
    blocks: dict[tuple, list[int]] = {}
    for i, row in enumerate(entries):
        blocks.setdefault(tuple(sorted(row)), []).append(i)
    groups = [blocks[key] for key in sorted(blocks)]
    count = 1
    for group in groups:
        count *= math.factorial(len(group))
    if count > EXACT_KEY_ORDERS:
        return None
    per_group = [list(itertools.permutations(group)) for group in groups]
    return (tuple(i for part in combo for i in part) for combo in itertools.product(*per_group))


def _hash(text: str) -> str:
    return hashlib.sha256(text.encode()).hexdigest()[:20]


# ----------------------------------------------------------------------------------------


def _missing_mask(table: Table, column: str) -> np.ndarray:
    series = table.frame[column]
    mask = series.isna().to_numpy()
    info = table.column(column)
    if info.dtype in ("integer", "real", "big integer", "rational"):
        mask = mask | ~np.isfinite(table.numeric(column))
    return mask


def signed_log(values) -> np.ndarray:
    """sign(x)*log10(1+|x|) of each value (None or NaN: NaN), exact enough for any integer."""
    out = np.empty(len(values), dtype=np.float64)
    for i, v in enumerate(values):
        if v is None or (isinstance(v, float) and math.isnan(v)):
            out[i] = np.nan
        elif isinstance(v, int) and abs(v) > 2**53:
            # log10 of a Python int is exact enough at any size, with no float overflow
            out[i] = math.copysign(math.log10(abs(v)) + math.log10(1 + 1 / abs(v)), v)
        else:
            x = float(v)
            out[i] = math.copysign(math.log10(1 + abs(x)), x)
    return out


def signed_log_threshold(q, relation: str, whole: bool) -> int | None:
    """The number T with ``sign(x)*log10(1+|x|) relation q`` exactly when ``x relation T``
    (``relation`` ">=" or "<="), so that an equation on a log-scaled feature reads in the
    column's own values; None when no such T is exact.

    The signed log is strictly increasing and takes the value n at sign(n)*(10^|n| - 1), so a
    whole q gives that T for any x. For a q that is not whole, 10^|q| is irrational and T is
    exact only for whole-number x (``whole``): with r the integer part of 10^|q|, x >= r-1
    keeps 1+|x| below 10^|q| and x >= r puts it above.

    >>> signed_log_threshold(0, ">=", False), signed_log_threshold(2, "<=", False)
    (0, 99)
    >>> signed_log_threshold(Fraction(1, 2), ">=", True)  # sqrt(10) = 3.16...
    3
    """
    from sympy import integer_nthroot

    q = Fraction(q)
    if q.denominator == 1:
        n = int(q)
        return 10**n - 1 if n >= 0 else -(10**-n - 1)
    if not whole:
        return None
    root = integer_nthroot(10**abs(q.numerator), q.denominator)[0]  # root < 10^|q| < root+1
    if q > 0:
        return int(root) if relation == ">=" else int(root) - 1
    return -(int(root) - 1) if relation == ">=" else -int(root)


def _is_plain_number(table: Table, name: str, log_scale: str) -> bool:
    """True for a column whose feature is its own value as a float: an integer or real
    invariant not on a log scale, or a true/false flag held as booleans with no gap."""
    info = table.column(name)
    if info.role == "invariant" and info.dtype in ("integer", "real"):
        return log_scale != "always"
    return info.role == "flag" and info.dtype == "boolean" \
        and table.frame[name].dtype != object


def _encode_column(table: Table, name: str, array_encoding: str, log_scale: str,
                   notes: list[str]) -> tuple[np.ndarray, list[Feature]]:
    info = table.column(name)
    series = table.frame[name]
    if info.role == "invariant" or (info.role == "flag" and info.dtype != "boolean"):
        if info.role == "flag":
            return _flag_block(table, name, notes)
        use_log = log_scale == "always" or (log_scale == "auto" and info.dtype == "big integer")
        if use_log:
            values = signed_log(series.tolist()) if info.dtype in ("big integer", "rational") \
                else signed_log(table.numeric(name).tolist())
            if log_scale == "auto":
                beyond = "64 bits" if any(
                    v is not None and not isinstance(v, float) and abs(v) > 2**63 - 1
                    for v in series.tolist()) else "2**53"
                notes.append(Note("signed_log", f"{name!r} holds integers beyond {beyond}: "
                                  "used as sign(x)*log10(1+|x|).", column=name, beyond=beyond))
            return values[:, None], [invariant_feature(name, log=True)]
        return table.numeric(name)[:, None], [invariant_feature(name, log=False)]
    if info.role == "flag":
        return _flag_block(table, name, notes)
    if info.role == "category":
        labels = series.astype(object).where(series.notna(), None).tolist()
        levels = category_levels(labels)
        features = level_features(table.name, name, levels)
        return one_hot(labels, levels), features
    if info.role == "array":
        return _array_block(table, name, array_encoding, notes)
    raise StepError(f"{table.name}: column {name!r} with role {info.role} is not a feature.")


def invariant_feature(name: str, *, log: bool) -> Feature:
    """The feature of an invariant column: its own value, or sign(x)*log10(1+|x|) of it."""
    if log:
        return Feature(f"slog({name})", name, "log", "sign(x)*log10(1+|x|)")
    return Feature(name, name, "value")


def category_levels(values) -> list[str]:
    """The levels of a category column: its distinct present values as text, sorted."""
    return sorted({str(v) for v in values if v is not None})


def level_features(table_name: str, name: str, levels: list[str]) -> list[Feature]:
    """The one-hot features ``name=level`` of a category column with ``levels`` (its values
    as text, sorted); past MAX_LEVELS levels the column is refused (:func:`too_many_levels`)."""
    if len(levels) > MAX_LEVELS:
        raise too_many_levels(table_name, name, len(levels))
    return [Feature(f"{name}={level}", name, "onehot", level) for level in levels]


def one_hot(labels: list, levels: list[str]) -> np.ndarray:
    """One column per level: 1 where a label (read as text) is that level, a row of NaN for a
    missing label (None)."""
    block = np.zeros((len(labels), len(levels)))
    position = {level: j for j, level in enumerate(levels)}
    for i, v in enumerate(labels):
        if v is None:
            block[i, :] = np.nan
        else:
            block[i, position[str(v)]] = 1.0
    return block


def too_many_levels(table_name: str, name: str, count: int) -> StepError:
    """The refusal of a category column with more than MAX_LEVELS values to one-hot encode."""
    return StepError(f"{table_name}: category column {name!r} has {count} values; one-hot "
                     "encoding it would swamp the other features. Give it the role text, or "
                     "group its values first.")


def _flag_block(table: Table, name: str, notes: list[str]):
    values = table.numeric(name) if table.column(name).dtype == "boolean" else None
    if values is None:
        series = table.frame[name]
        levels = sorted({str(v) for v in series.dropna().tolist()})
        if len(levels) > 2:
            raise StepError(f"{table.name}: flag column {name!r} has more than two values.")
        top = levels[-1] if levels else ""
        values = np.array([np.nan if pd.isna(v) else float(str(v) == top)
                           for v in series.tolist()])
    return values[:, None], [Feature(name, name, "flag")]


def _array_block(table: Table, name: str, encoding: str, notes: list[str]):
    cells = table.frame[name].tolist()
    present = [c for c in cells if c is not None]
    if not present:
        raise StepError(f"{table.name}: array column {name!r} is empty.")
    ndims = {c.ndim for c in present}
    shapes = {c.shape for c in present}
    blocks: list[np.ndarray] = []
    features: list[Feature] = []
    if encoding in ("flat", "both"):
        block, names = _flattened(name, cells, shapes)
        if len(shapes) > 1:
            notes.append(Note("arrays_padded", f"{name!r}: arrays of different shapes padded "
                              f"with 0 to {'x'.join(map(str, _max_shape(shapes)))} for "
                              "flattening.", column=name, shape=tuple(_max_shape(shapes))))
        blocks.append(block)
        features.extend(names)
    from analysis.matrix_features import COMPACT_FROM_ENTRIES

    largest = max(int(np.prod(shape)) for shape in shapes)
    compact = encoding == "compact" or (encoding in ("invariant", "both")
                                        and largest > COMPACT_FROM_ENTRIES)
    if compact:
        block, names = _compact(name, cells)
        blocks.append(block)
        features.extend(names)
        if encoding != "compact":
            notes.append(Note("compact_arrays", f"{name!r}: cells of up to {largest} entries: "
                              "compact features (size, rank, trace, determinant, singular "
                              "values, spectra of the matrix and of its symmetrised form) "
                              "instead of every sorted entry; choose the array encoding full "
                              "for those.", column=name, entries=largest))
    elif encoding in ("invariant", "full", "both"):
        block, names = _invariants(name, cells, ndims, shapes)
        blocks.append(block)
        features.extend(names)
        if _symmetric_only(names):
            notes.append(Note("symmetric_sums", f"{name!r}: every matrix is symmetric, so its "
                              "column sums are its row sums and are not features twice.",
                              column=name))
        if len(shapes) > 1:
            notes.append(Note("invariants_padded", f"{name!r}: permutation-invariant features "
                              "of different-sized arrays padded with 0.", column=name))
        if ndims == {1, 2}:
            notes.append(Note("lists_as_matrices", f"{name!r}: lists among matrices treated "
                              "as matrices with one row for the permutation-invariant "
                              "features.", column=name))
    unusable = sum(not np.isfinite(_as_floats(c)).all() for c in present)
    if unusable:
        notes.append(Note("arrays_not_finite", f"{name!r}: {unusable} arrays hold NaN or "
                          "infinite entries; those entries, and every permutation-invariant "
                          "feature of those arrays, count as missing.", column=name,
                          arrays=unusable))
    return np.column_stack(blocks), features


def _symmetric_only(features: list[Feature]) -> bool:
    """Whether permutation-invariant features were read from symmetric matrices only: they
    have eigenvalues, which only symmetric matrices get, and no column sums."""
    kinds = {f.kind for f in features}
    return "eigen" in kinds and "column_sums" not in kinds


def _max_shape(shapes: set) -> tuple:
    ndim = max(len(s) for s in shapes)
    return tuple(max((s[k] if len(s) > k else 1) for s in shapes) for k in range(ndim))


def _flattened(name: str, cells: list, shapes: set):
    target = _max_shape(shapes)
    width = int(np.prod(target))
    block = np.full((len(cells), width), np.nan)
    for i, cell in enumerate(cells):
        if cell is None:
            continue
        padded = np.zeros(target)
        as_float = _as_floats(cell)
        if as_float.ndim < len(target):
            as_float = as_float.reshape(as_float.shape + (1,) * (len(target) - as_float.ndim))
        padded[tuple(slice(0, k) for k in as_float.shape)] = as_float
        block[i] = padded.ravel()
    if len(target) == 1:
        names = [Feature(f"{name}[{k}]", name, "flat") for k in range(width)]
    else:
        names = [Feature(f"{name}[{r},{c}]", name, "flat")
                 for r in range(target[0]) for c in range(target[1])]
    return block, names


def _as_floats(cell: np.ndarray) -> np.ndarray:
    if cell.dtype != object:
        return cell.astype(np.float64)
    return np.array([_big_float(x) for x in cell.ravel()], dtype=np.float64).reshape(cell.shape)


def _big_float(value) -> float:
    try:
        return float(value)
    except OverflowError:  # an integer past the float range
        return math.copysign(math.inf, value)


def _matrix_invariants(m: np.ndarray, square: bool, symmetric: bool) -> dict[str, np.ndarray]:
    values = {"sorted": -np.sort(-m.ravel())}
    if m.ndim == 2:
        values["row_sums"] = -np.sort(-m.sum(axis=1))
        if not symmetric:
            # a symmetric matrix's column sums are its row sums: the same feature twice
            values["column_sums"] = -np.sort(-m.sum(axis=0))
        if not np.isfinite(values["row_sums"]).all():
            # entries near the float limit: the decompositions below would not converge
            nan = np.full(min(m.shape), np.nan)
            values["singular"] = nan
            if square:
                values["eigen" if symmetric else "charpoly"] = np.full(m.shape[0], np.nan)
            return values
        values["singular"] = np.linalg.svd(m, compute_uv=False) if m.size else np.zeros(0)
        if square and symmetric:
            values["eigen"] = np.sort(np.linalg.eigvalsh(m))[::-1]
        elif square:
            values["charpoly"] = np.poly(m)[1:] if m.size else np.zeros(0)
    return values


def _compact(name: str, cells: list):
    """The compact features of every cell (NaN for a missing or non-finite cell)."""
    from analysis.matrix_features import (
        COMPACT_SPECTRUM,
        SCALAR_TITLES,
        SPECTRUM_TITLES,
        compact_invariants,
    )

    floats = [None if c is None else _as_floats(c) for c in cells]
    found = [None if m is None or not np.isfinite(m).all() else compact_invariants(m)
             for m in floats]
    widths = {key: max((len(f[key]) for f in found if f is not None), default=0)
              for key in SPECTRUM_TITLES}
    widths = {key: min(width, COMPACT_SPECTRUM) for key, width in widths.items() if width}
    width = len(SCALAR_TITLES) + sum(widths.values())
    block = np.full((len(cells), width), np.nan)
    for i, f in enumerate(found):
        if f is None:
            continue
        values = [f[key] for key in SCALAR_TITLES]
        for key, size in widths.items():
            vector = np.zeros(size)
            vector[:len(f[key])] = f[key]
            values.extend(vector)
        block[i] = values
    features = [Feature(f"{key}({name})", name, key, title)
                for key, title in SCALAR_TITLES.items()]
    for key, size in widths.items():
        features.extend(Feature(f"{key}{k + 1}({name})", name, key, SPECTRUM_TITLES[key])
                        for k in range(size))
    return block, features


def _invariants(name: str, cells: list, ndims: set, shapes: set):
    """Sorted entries, sorted row/column sums, singular values, eigenvalues or char. poly."""
    parts: dict[str, list] = {}
    if ndims == {1, 2}:
        # a list among matrices is a matrix with one row: permuting its entries permutes the
        # columns, so every invariant below still applies
        cells = [c if c is None or c.ndim == 2 else c.reshape(1, -1) for c in cells]
        shapes = {c.shape for c in cells if c is not None}
    floats = [None if c is None else _as_floats(c) for c in cells]
    # a cell with a NaN or infinite entry has no invariants: its row's invariants are missing
    # (dropped or imputed like any missing value), and it does not decide the encoding
    floats = [None if m is None or not np.isfinite(m).all() else m for m in floats]
    square = all(len(s) == 2 and s[0] == s[1] for s in shapes)
    symmetric = square and all(m is None or np.array_equal(m, m.T) for m in floats)
    for position, m in enumerate(floats):
        if m is None:
            for key in parts:
                parts[key].append(None)
            continue
        with np.errstate(over="ignore", invalid="ignore"):
            # sums past the float range become infinite, which counts as missing later
            values = _matrix_invariants(m, square, symmetric)
        for key, vector in values.items():
            # rows seen before this kind of invariant first appeared have none of it
            parts.setdefault(key, [None] * position).append(vector)
    if not parts:

        return np.empty((len(cells), 0)), []
    blocks = []
    features = []
    titles = {"sorted": "sorted entry", "row_sums": "sorted row sum",
              "column_sums": "sorted column sum", "singular": "singular value",
              "eigen": "eigenvalue", "charpoly": "char. poly coefficient"}
    for key, vectors in parts.items():
        width = max((len(v) for v in vectors if v is not None), default=0)
        block = np.full((len(vectors), width), np.nan)
        for i, v in enumerate(vectors):
            if v is not None:
                block[i, : len(v)] = v
                block[i, len(v):] = 0.0
        blocks.append(block)
        label = {"sorted": "sorted", "row_sums": "rowsum", "column_sums": "colsum",
                 "singular": "sv", "eigen": "eig", "charpoly": "charpoly"}[key]
        features.extend(Feature(f"{label}{k + 1}({name})", name, key, titles[key])
                        for k in range(width))
    return np.column_stack(blocks), features


def lost_classes(table: Table, target: str, fm: FeatureMatrix) -> str:
    """Why a target with several values in the table has fewer on the rows ``fm`` kept:
    the values found only on dropped rows, and the feature columns whose missing cells
    dropped them ('' when no value was lost that way). Said after a step's refusal.
    """
    series = table.frame[target]
    present = series.notna().to_numpy()
    labels = series.astype(str).to_numpy()
    kept = np.zeros(len(series), dtype=bool)
    kept[fm.rows] = True
    found = set(labels[kept & present].tolist())
    lost = [v for v in dict.fromkeys(labels[present].tolist()) if v not in found]
    if not lost:
        return ""
    columns = list(dict.fromkeys(f.column for f in fm.features))
    parts = []
    for value in lost[:3]:
        rows = present & (labels == value)
        blame = sorted(((int(table.frame[c][rows].isna().sum()), c) for c in columns),
                       key=lambda pair: -pair[0])
        named = ", ".join(f"{c!r} is missing in {m}" for m, c in blame[:3] if m)
        parts.append(f"{value!r} ({int(rows.sum())} rows; {named or 'other gaps'})")
    return (f" The table has {'; '.join(parts)}, but every such row was dropped for a "
            "missing feature value. A column missing exactly where the target takes one "
            "value gives the answer away: leave it out of the features, or fill in missing "
            "values (missing: impute).")
