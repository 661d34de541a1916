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

__all__ = ["IMPORTANCE_REPEATS", "Importance", "permutation_importances"]

IMPORTANCE_REPEATS = 5
# Test rows used for importance at most (a seeded sample past it), so that it stays a small
# share of the step's time on a large table.
IMPORTANCE_ROWS = 5000
# Features scored one by one at most; past it the step scores the columns they come from.
IMPORTANCE_FEATURES = 200


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
    return tuple(sorted(found, key=lambda r: (-r.mean, r.feature)))


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
