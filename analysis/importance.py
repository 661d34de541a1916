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
        self.base = np.asarray(expansion.scaler.transform(rows), dtype=np.float64)
        self.cached: tuple | None = None

    def predict(self, X: np.ndarray) -> np.ndarray:
        """The machine's predictions on ``X`` (the rows, with some columns shuffled)."""
        scaled = np.asarray(self.expansion.scaler.transform(X), dtype=np.float64)
        if scaled.shape != self.base.shape:
            return self.expansion.predictions(self._direct(scaled))
        changed = tuple(np.flatnonzero(np.any(scaled != self.base, axis=0)).tolist())
        if not changed:
            return self.expansion.predictions(self._direct(scaled))
        parts = self._parts(changed)
        lookup, rest, distinct, table = parts
        try:
            index = np.array([lookup[row.tobytes()] for row in scaled[:, list(changed)]])
        except KeyError:
            return self.expansion.predictions(self._direct(scaled))
        if table is not None:
            scores = table[np.arange(len(index)), index]
        else:
            gathered = distinct[index]
            scores = np.column_stack([np.einsum("ij,ij->i", part, gathered)
                                      for part in rest])
        return self.expansion.predictions(scores + self.expansion.intercept)

    def _direct(self, scaled: np.ndarray) -> np.ndarray:
        from sklearn.metrics.pairwise import rbf_kernel

        e = self.expansion
        return rbf_kernel(scaled, e.centres, gamma=e.gamma) @ e.weights + e.intercept

    def _parts(self, changed: tuple) -> tuple:
        """For the shuffled columns ``changed``: the index of each distinct value (row of
        those columns, as bytes), the weighted first factor per output, the second factor
        for each distinct value, and the table of partial sums (None with many values)."""
        if self.cached is not None and self.cached[0] == changed:
            return self.cached[1]
        from sklearn.metrics.pairwise import euclidean_distances

        e = self.expansion
        columns = list(changed)
        others = [j for j in range(self.base.shape[1]) if j not in changed]
        if others:
            rest_distance = euclidean_distances(self.base[:, others], e.centres[:, others],
                                                squared=True)
            first = np.exp(-e.gamma * rest_distance)
        else:
            first = np.ones((len(self.base), len(e.centres)))
        values = np.unique(np.ascontiguousarray(self.base[:, columns]), axis=0)
        lookup = {row.tobytes(): k for k, row in enumerate(values)}
        second = np.exp(-e.gamma * euclidean_distances(values, e.centres[:, columns],
                                                       squared=True))
        outputs = e.weights.shape[1]
        if len(values) * outputs <= TABLE_VALUES:
            # every row's score for each value it may receive: rows x values x outputs
            weighted = second.T[:, :, None] * e.weights[:, None, :]
            table = (first @ weighted.reshape(len(e.centres), -1)).reshape(
                len(self.base), len(values), outputs)
            parts = (lookup, None, None, table)
        else:
            rest = [first * e.weights[:, k] for k in range(outputs)]
            parts = (lookup, rest, second, None)
        self.cached = (changed, parts)
        return parts
