"""Whether a whole-number target is predicted as a number or each value as a class.

A small whole-number invariant (a Hodge number, a rank, a genus) can be predicted either way:
as a number, rounded to the nearest whole one, or as classes, one per value. Neither reading
is right in general: a number reading sees that 3 lies between 2 and 4, a class reading can
follow values that are not in order. With ``reading="auto"`` the separator lets a learning
curve decide: on a seeded sample of the rows used, for training fractions
``CURVE_FRACTIONS``, a scaled ridge fit (rounded) and a scaled logistic regression are fitted
on the training side and scored by the share of test rows predicted exactly right; the
reading with the higher share at the largest fraction wins (its curve's end is where more
data would take it), the number reading on a tie. The result says which was chosen, why, and
with which models.

Targets that are not whole numbers, or whose count of distinct values is outside
``[CURVE_MIN_VALUES, CURVE_MAX_VALUES]``, keep the rule of
:func:`analysis.features.is_numeric_target`.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np

from analysis.features import is_numeric_target
from analysis.notes import Note

# Training fractions of the curve that chooses a reading, and seeded repeats at each.
CURVE_FRACTIONS = (0.25, 0.5, 0.75)
CURVE_REPEATS = 2
# Rows of the sample the curve runs on, at most.
CURVE_ROWS = 3000
# Whole-number targets with this many distinct values (inclusive) are read by the curve.
CURVE_MIN_VALUES = 3
CURVE_MAX_VALUES = 50
WHOLE_DTYPES = ("integer", "big integer")
MODELS = ("a ridge fit rounded to whole numbers for the number reading, a logistic regression "
          "for the class reading, both on scaled features")


@dataclass(frozen=True)
class Reading:
    """The reading a separator uses: ``number`` (a regression) or not (classes).

    ``chosen_by``: "setting" (the step's ``reading``), "rule" (the distinct-count rule) or
    "learning curve"; ``curve``: for the learning curve, ``{"fractions", "number",
    "classes"}`` with the mean share exactly right at each fraction; ``text``: why, in words.
    """

    number: bool
    chosen_by: str
    text: str
    curve: dict | None = None

    def to_json(self) -> dict:
        return {"used": "number" if self.number else "classes", "chosen_by": self.chosen_by,
                "text": self.text, "curve": self.curve}


def choose_reading(table, target: str, reading: str, values: np.ndarray,
                   truth: np.ndarray, seed: int) -> Reading:
    """The reading of ``target`` for features ``values`` and target values ``truth`` (the rows
    used). ``reading`` is the step's setting: "number", "classes" or "auto"."""
    number = is_numeric_target(table, target, reading)
    if reading != "auto":
        return Reading(number, "setting", Note("target_reading", f"{target!r} read as "
                       f"{'a number' if number else 'classes'}, as the step's setting asks.",
                       target=target, number=number))
    info = table.column(target)
    known = np.asarray(truth, dtype=float) if info.role == "invariant" \
        and info.dtype in WHOLE_DTYPES else None
    distinct = 0 if known is None else len(np.unique(known))
    if known is None or not CURVE_MIN_VALUES <= distinct <= CURVE_MAX_VALUES:
        return Reading(number, "rule", "")
    curve = _curve(values, known, seed)
    if curve is None:
        return Reading(number, "rule", "")
    as_number = curve["number"][-1] >= curve["classes"][-1]
    largest = f"{CURVE_FRACTIONS[-1]:.0%}"
    text = Note("target_reading", f"{target!r} ({distinct} whole-number values) read as "
                f"{'a number' if as_number else 'classes'}: on a learning curve scored by the "
                f"share exactly right on held-out rows ({MODELS}), training on {largest} of "
                f"the rows, the number reading got {curve['number'][-1]:.1%} right and the "
                f"class reading {curve['classes'][-1]:.1%}. Choose the reading to use the "
                "other.", target=target, number=bool(as_number), values=distinct,
                number_share=curve["number"][-1], class_share=curve["classes"][-1])
    return Reading(as_number, "learning curve", text, curve)


def _curve(values: np.ndarray, truth: np.ndarray, seed: int) -> dict | None:
    from sklearn.linear_model import LogisticRegression, Ridge
    from sklearn.model_selection import ShuffleSplit
    from sklearn.pipeline import make_pipeline

    from analysis.scaling import TrainingRangeScaler

    rng = np.random.default_rng([seed, 59])
    rows = np.arange(len(truth))
    if len(rows) > CURVE_ROWS:
        rows = np.sort(rng.choice(rows, CURVE_ROWS, replace=False))
    X, y = values[rows], truth[rows]
    shares = {"number": [], "classes": []}
    for k, fraction in enumerate(CURVE_FRACTIONS):
        splits = ShuffleSplit(n_splits=CURVE_REPEATS, train_size=fraction,
                              random_state=seed + 7 * (k + 1))
        got = {"number": [], "classes": []}
        for train, test in splits.split(X):
            if len(np.unique(y[train])) < 2 or not len(test):
                continue
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                ridge = make_pipeline(TrainingRangeScaler(), Ridge(alpha=1.0)).fit(
                    X[train], y[train])
                logistic = make_pipeline(TrainingRangeScaler(),
                                         LogisticRegression(max_iter=500)).fit(
                    X[train], y[train])
            got["number"].append(float(np.mean(np.round(ridge.predict(X[test])) == y[test])))
            got["classes"].append(float(np.mean(logistic.predict(X[test]) == y[test])))
        if not got["number"]:
            return None
        for reading in shares:
            shares[reading].append(float(np.mean(got[reading])))
    return {"fractions": list(CURVE_FRACTIONS), **shares}
