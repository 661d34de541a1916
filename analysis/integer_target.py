"""Targets whose values are whole numbers: predicted as integers and judged by exact hits.

A Hodge number, a rank or a count is a small whole number; what people report when they
predict one is the share of objects whose prediction is exactly right, not R^2 alone. This
module holds the one rule that says when a target is such an integer target, and the figures
of merit that go with it: the share of test rows whose rounded prediction equals the true
value, with a Wilson score interval, and the same share for the most common training value.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["INTEGER_TARGET_SPAN", "ExactShare", "exact_share", "is_integer_target",
           "most_common_value"]

# A target is predicted as an integer when its values are whole numbers spanning at most this
# many consecutive values (and taking at least three distinct ones: two are a class target).
INTEGER_TARGET_SPAN = 1000
INTEGER_TARGET_DISTINCT = 3
INTERVAL_LEVEL = 0.95


def is_integer_target(values) -> bool:
    """True when ``values`` (NaN for missing) are whole numbers in a modest range.

    >>> is_integer_target([1, 2, 5, 3])
    True
    >>> is_integer_target([0.5, 1, 2])
    False
    """
    values = np.asarray(values, dtype=float)
    values = values[np.isfinite(values)]
    if len(values) == 0 or not np.all(values == np.round(values)):
        return False
    span = values.max() - values.min() + 1
    return bool(span <= INTEGER_TARGET_SPAN
                and len(np.unique(values)) >= INTEGER_TARGET_DISTINCT)


@dataclass(frozen=True)
class ExactShare:
    """Share of rows predicted exactly, with its Wilson score interval."""

    share: float
    low: float
    high: float
    hits: int
    rows: int

    def to_json(self) -> dict:
        return {"share": self.share, "interval": [self.low, self.high], "hits": self.hits,
                "rows": self.rows}


def exact_share(y_true, y_predicted) -> ExactShare:
    """The share of rows whose rounded prediction equals the true whole number.

    The interval is Wilson's score interval at 95% (Wilson 1927, J. Amer. Statist. Assoc. 22,
    209-212), which stays inside [0, 1] and is sound for shares near 0 or 1.
    """
    y_true = np.asarray(y_true, dtype=float)
    rounded = np.round(np.asarray(y_predicted, dtype=float))
    rows = len(y_true)
    hits = int(np.sum(rounded == y_true))
    low, high = wilson_interval(hits, rows)
    return ExactShare(share=hits / rows if rows else float("nan"), low=low, high=high,
                      hits=hits, rows=rows)


def most_common_value(train_values) -> float:
    """The most common training value (the smallest one on a tie): the exact baseline."""
    values, counts = np.unique(np.asarray(train_values, dtype=float), return_counts=True)
    return float(values[np.argmax(counts)])


def wilson_interval(hits: int, rows: int) -> tuple[float, float]:
    """Wilson's score interval at INTERVAL_LEVEL for a share of ``hits`` in ``rows``."""
    if rows == 0:
        return float("nan"), float("nan")
    from scipy.stats import norm

    z = float(norm.ppf(0.5 + INTERVAL_LEVEL / 2))
    share = hits / rows
    centre = (share + z * z / (2 * rows)) / (1 + z * z / rows)
    half = z * np.sqrt(share * (1 - share) / rows + z * z / (4 * rows * rows)) / (1 + z * z / rows)
    return float(max(0.0, centre - half)), float(min(1.0, centre + half))
