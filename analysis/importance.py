"""What a prediction rests on: permutation importance of each feature on the test rows.

For a fitted separator, each feature in turn is shuffled among the test rows and the drop in
the score measured (scikit-learn's ``permutation_importance``, its repeats seeded). Features
made from one matrix or list column are also summed under that column's name, since a
reader asks "does the model use the matrix?" before "does it use entry (2, 3)?".
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np

__all__ = ["IMPORTANCE_REPEATS", "Importance", "ShuffledKernelRows", "permutation_importances"]

IMPORTANCE_REPEATS = 5
# Test rows used for importance at most (a seeded sample past it), so that it stays a small
# share of the step's time on a large table.
IMPORTANCE_ROWS = 5000
# Features scored one by one at most; past it the step scores the columns they come from.
IMPORTANCE_FEATURES = 200
# Distinct values (times outputs) of the shuffled columns up to which ShuffledKernelRows
# scores a shuffle by a lookup in one table of partial sums per column.
TABLE_VALUES = 256


@dataclass(frozen=True)
class Importance:
    """The drop in score when ``feature`` is shuffled: mean and spread over the repeats.

    ``column`` is the table column the feature comes from; ``whole_column`` is True for the
    sum over a column's features (only for columns that give more than one feature).
    """

    feature: str
    column: str
    mean: float
    std: float
    whole_column: bool = False

    def to_json(self) -> dict:
        return {"feature": self.feature, "column": self.column, "mean": float(self.mean),
                "std": float(self.std), "whole_column": self.whole_column}


def permutation_importances(model, X: np.ndarray, y: np.ndarray, features: Sequence[str],
                            columns: Sequence[str], scorer: Callable, *, seed: int,
                            repeats: int = IMPORTANCE_REPEATS) -> tuple[Importance, ...]:
    """Permutation importance of every feature, and of every column with several features.

    model: a fitted estimator with ``predict``; X, y: the test rows; features: the name of
    each column of X; columns: the table column each feature comes from; scorer: a callable
    ``scorer(estimator, X, y) -> float`` (larger is better); seed: seeds the shuffles.
    Returns the records, largest mean first.
    """
    from sklearn.inspection import permutation_importance

    X = np.asarray(X, dtype=float)
    if len(X) > IMPORTANCE_ROWS:
        rows = np.sort(np.random.default_rng([seed, 41]).choice(len(X), IMPORTANCE_ROWS,
                                                                 replace=False))
        X, y = X[rows], np.asarray(y)[rows]
    groups: dict[str, list[int]] = {}
    for index, column in enumerate(columns):
        groups.setdefault(column, []).append(index)
    found: list[Importance] = []
    if len(features) <= IMPORTANCE_FEATURES:
        single = permutation_importance(model, X, y, scoring=scorer, n_repeats=repeats,
                                        random_state=seed)
        found += [Importance(feature=name, column=column, mean=float(m), std=float(s))
                  for name, column, m, s in zip(features, columns, single.importances_mean,
                                                single.importances_std)]
    several = {column: indices for column, indices in groups.items() if len(indices) > 1}
    if several:
        found += _column_importances(model, X, y, several, scorer, seed, repeats)
    # means equal to 12 decimals are a tie, ordered by name: rounding in the last digits
    # (two copies of one feature, say) must not decide the order
    return tuple(sorted(found, key=lambda r: (-round(r.mean, 12), r.feature)))


def _column_importances(model, X, y, groups: dict[str, list[int]], scorer, seed: int,
                        repeats: int) -> list[Importance]:
    """Shuffle all of a column's features together (the same row order for each), repeats
    seeded, and measure the drop in score."""
    rng = np.random.default_rng([seed, 43])
    base = float(scorer(model, X, y))
    found = []
    for column, indices in groups.items():
        drops = []
        for _ in range(repeats):
            shuffled = X.copy()
            order = rng.permutation(len(X))
            shuffled[:, indices] = X[order][:, indices]
            drops.append(base - float(scorer(model, shuffled, y)))
        found.append(Importance(feature=column, column=column, mean=float(np.mean(drops)),
                                std=float(np.std(drops)), whole_column=True))
    return found


class ShuffledKernelRows:
    """Predictions of an RBF machine (``expansion``: an
    :class:`analysis.separator_models.KernelExpansion`) on fixed ``rows`` and on copies of
    them with some columns shuffled among the rows, as permutation importance asks for.

    The kernel is a product over columns: exp(-gamma |z - c|^2) = exp(-gamma d_rest(z, c))
    * exp(-gamma d_C(z, c)), d_C the squared distance over the shuffled columns C and d_rest
    over the others. A shuffle keeps every row's other columns, so the first factor (times
    the weights) is computed once per set of shuffled columns; the second takes only the
    distinct values the shuffled columns hold. With few of them (integer invariants) one
    matrix product gives every row's score for every value it may receive, and a shuffle is
    scored by a lookup; else by one product per shuffle. Rows whose shuffled values are not
    values of ``rows`` are scored directly. The scores are the machine's up to rounding.
    """

    def __init__(self, expansion, rows: np.ndarray) -> None:
        self.expansion = expansion
        self.rows = np.asarray(rows, dtype=np.float64)
        self.scaled = np.asarray(expansion.scaler.transform(self.rows), dtype=np.float64)
        self.cached: tuple | None = None

    def predict(self, X: np.ndarray) -> np.ndarray:
        """The machine's predictions on ``X`` (the rows, with some columns shuffled)."""
        X = np.asarray(X, dtype=np.float64)
        if X.shape != self.rows.shape:
            return self._direct(X)
        changed = tuple(np.flatnonzero(np.any(X != self.rows, axis=0)).tolist())
        if not changed:
            return self._direct(X)
        parts = self._parts(changed)
        index = None if parts is None else parts.locate(X)
        if index is None:
            return self._direct(X)
        return self.expansion.predictions(parts.scores(index) + self.expansion.intercept)

    def _direct(self, X: np.ndarray) -> np.ndarray:
        from sklearn.metrics.pairwise import rbf_kernel

        e = self.expansion
        scaled = e.scaler.transform(X)
        return e.predictions(rbf_kernel(scaled, e.centres, gamma=e.gamma) @ e.weights
                             + e.intercept)

    def _parts(self, changed: tuple):
        """The work done once for the shuffled columns ``changed`` (one set kept), or None
        when their distinct values cannot be numbered in 64 bits."""
        if self.cached is not None and self.cached[0] == changed:
            return self.cached[1]
        parts = _ShuffleParts.make(self.expansion, self.rows, self.scaled, list(changed))
        self.cached = (changed, parts)
        return parts


class _ShuffleParts:
    """For one set of shuffled columns: the numbering of their distinct values, each row's
    weighted first factor (rows x centres, per output), the second factor of each distinct
    value (values x centres), and, with few values, the table of partial sums."""

    def __init__(self, columns, values, codes, first, second, table) -> None:
        self.columns, self.values, self.codes = columns, values, codes
        self.first, self.second, self.table = first, second, table

    @classmethod
    def make(cls, expansion, rows, scaled, columns: list[int]):
        from sklearn.metrics.pairwise import euclidean_distances

        values = [np.unique(rows[:, c]) for c in columns]
        if float(np.prod([len(v) for v in values], dtype=np.float64)) >= 2.0 ** 62:
            return None
        codes = cls._code(values, [np.searchsorted(v, rows[:, c])
                                   for v, c in zip(values, columns)])
        distinct, first_row = np.unique(codes, return_index=True)
        e = expansion
        others = [j for j in range(rows.shape[1]) if j not in columns]
        if others:
            rest = np.exp(-e.gamma * euclidean_distances(scaled[:, others],
                                                         e.centres[:, others], squared=True))
        else:
            rest = np.ones((len(rows), len(e.centres)))
        second = np.exp(-e.gamma * euclidean_distances(scaled[first_row][:, columns],
                                                       e.centres[:, columns], squared=True))
        outputs = e.weights.shape[1]
        if len(distinct) * outputs <= TABLE_VALUES:
            # every row's score for each value it may receive: rows x values x outputs
            weighted = second.T[:, :, None] * e.weights[:, None, :]
            table = (rest @ weighted.reshape(len(e.centres), -1)).reshape(
                len(rows), len(distinct), outputs)
            return cls(columns, values, distinct, None, None, table)
        first = [rest * e.weights[:, k] for k in range(outputs)]
        return cls(columns, values, distinct, first, second, None)

    @staticmethod
    def _code(values, positions) -> np.ndarray:
        """One number per row for its values in the shuffled columns (mixed radix)."""
        code = np.zeros(len(positions[0]), dtype=np.int64)
        for v, position in zip(values, positions):
            code = code * len(v) + position
        return code

    def locate(self, X: np.ndarray) -> np.ndarray | None:
        """Each row's distinct value of the shuffled columns, or None when some row holds a
        value no row of the fixed rows holds there."""
        positions = []
        for v, c in zip(self.values, self.columns):
            position = np.minimum(np.searchsorted(v, X[:, c]), len(v) - 1)
            if not np.array_equal(v[position], X[:, c]):
                return None
            positions.append(position)
        code = self._code(self.values, positions)
        index = np.minimum(np.searchsorted(self.codes, code), len(self.codes) - 1)
        if not np.array_equal(self.codes[index], code):
            return None
        return index

    def scores(self, index: np.ndarray) -> np.ndarray:
        """The expansion's sums (without the intercept) for rows given their values."""
        if self.table is not None:
            return self.table[np.arange(len(index)), index]
        gathered = self.second[index]
        return np.column_stack([np.einsum("ij,ij->i", part, gathered) for part in self.first])
