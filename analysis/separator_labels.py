"""The separator's target: class labels and the positive class, or a numeric target.

A flag or category target becomes class codes (a positive class against the rest when one is
chosen or when there are two classes); a many-valued invariant target stays a number for a
regression. The step and the Dask engine share these rules (``class_label``, ``same_label``).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from analysis.errors import StepError
from analysis.notes import Note


@dataclass(frozen=True, eq=False)
class Target:
    """The target of one run, lined up with the feature rows that are kept.

    ``y`` holds class codes (or the numeric values of a regression); ``keep`` is None when
    every row given is kept, else the rows to keep (classes with a single row are left out);
    ``notes`` are the sentences the result reports, in order.
    """

    y: np.ndarray
    classes: tuple
    positive_class: object
    n_classes: int
    integer_target: bool
    keep: np.ndarray | None
    notes: tuple[str, ...]


def class_target(raw: np.ndarray, step, table_name: str, why=None) -> Target:
    """The class codes of ``raw`` (the target's values on the feature rows) for ``step``;
    ``why()``, when given, words why rows of other classes are missing (see
    analysis.features.lost_classes) for the refusal of a single class."""
    from pandas.api.types import infer_dtype

    notes = []
    keep = None
    # a flag's labels are its bools already: count and code them without a loop over
    # the rows (a million rows took seconds); the outcome is the same
    flags = raw.astype(bool) if len(raw) and \
        infer_dtype(raw, skipna=False) == "boolean" else None
    labels = raw if flags is not None else np.array([class_label(v) for v in raw], dtype=object)
    values, counts = count_labels(labels, flags)
    if len(values) < 2:
        only = values[0] if values else None
        raise StepError(f"{table_name}: the target {step.target!r} has one class "
                        f"({only!r}) on all {len(labels)} rows used; a separator needs at "
                        "least two classes. Choose another target or other rows."
                        + (why() if why else ""))
    rare = [v for v, c in zip(values, counts) if c < 2]
    if rare and step.positive_class is None:
        keep = ~np.isin(labels, np.array(rare, dtype=object))
        notes.append(Note("single_row_classes", f"left out {int((~keep).sum())} rows of "
                          f"classes with a single row ({', '.join(map(repr, rare[:10]))}): a "
                          "split cannot put them on both sides.", rows=int((~keep).sum()),
                          classes=tuple(rare)))
        labels = labels[keep]
        flags = None if flags is None else flags[keep]
        values, counts = count_labels(labels, flags)
        if len(values) < 2:
            raise StepError(f"{table_name}: the target {step.target!r} has only one "
                            "class with more than one row. Choose another target.")
    positive = _resolve_positive(values, counts, step.positive_class, step.target, table_name)
    if positive is None:
        lookup = {repr(v): i for i, v in enumerate(values)}
        y = np.array([lookup[repr(v)] for v in labels], dtype=np.int64)
        return Target(y=y, classes=tuple(values), positive_class=None, n_classes=len(values),
                      integer_target=False, keep=keep, notes=tuple(notes))
    negative = values[0] if len(values) == 2 and values[1] == positive else (
        values[1] if len(values) == 2 else f"not {positive}")
    if len(values) > 2:
        notes.append(Note("one_against_rest", f"{len(values)} classes: {positive!r} against "
                          "the rest.", classes=len(values), positive=positive))
    if flags is not None and isinstance(positive, bool):
        y = (flags == positive).astype(np.int64)
    else:
        y = positive_rows(labels, positive).astype(np.int64)
    if len(values) > 2 and min(int(y.sum()), int(len(y) - y.sum())) < 2:
        raise StepError(f"{table_name}: class {positive!r} of {step.target!r} "
                        "has fewer than two rows; choose another positive class.")
    return Target(y=y, classes=(negative, positive), positive_class=positive, n_classes=2,
                  integer_target=False, keep=keep, notes=tuple(notes))


def numeric_target(raw: np.ndarray, step, table_name: str) -> Target:
    """The values of a numeric target read as a number (a regression) for ``step``."""
    if step.model in ("logistic", "lda"):
        raise StepError(f"{table_name}: the target {step.target!r} is a numeric "
                        f"invariant with many values, and the model {step.model!r} needs "
                        "classes. Use model linear, rbf or poly2 for a regression, or "
                        "give the target the role category.")
    if step.positive_class is not None:
        raise StepError(f"{table_name}: positive_class applies to class targets; "
                        f"{step.target!r} is a numeric invariant with many values.")
    y = np.asarray(raw, dtype=np.float64)
    if np.ptp(y) == 0:
        raise StepError(f"{table_name}: the target {step.target!r} takes one value on "
                        "every row used; there is nothing to predict.")
    from analysis.integer_target import is_integer_target

    notes = []
    integer_target = is_integer_target(y)
    if integer_target:
        notes.append(Note("whole_target", f"{step.target!r} takes whole values: the share of "
                          "test rows whose rounded prediction is exactly right (exact) is "
                          "reported beside R^2, against the most common training value and "
                          "the closest formula.", target=step.target))
    notes.append(Note("regression", f"{step.target!r} is a numeric invariant with many "
                      "values: fitted as a regression.", target=step.target))
    return Target(y=y, classes=(), positive_class=None, n_classes=0,
                  integer_target=integer_target, keep=None, notes=tuple(notes))


def class_label(value):
    """A class label as a plain value: bool, int for whole numbers, else str."""
    if isinstance(value, (bool, np.bool_)):
        return bool(value)
    if isinstance(value, (int, np.integer)):
        return int(value)
    if isinstance(value, (float, np.floating)):
        return int(value) if float(value).is_integer() else float(value)
    return str(value)


def count_labels(labels: np.ndarray, flags: np.ndarray | None = None) -> tuple[list, list[int]]:
    if flags is not None:
        # the same as below for labels that are all bools, counted by numpy
        positives = int(np.count_nonzero(flags))
        pairs = [(False, len(flags) - positives), (True, positives)]
        return [v for v, c in pairs if c], [c for _, c in pairs if c]
    counts: dict = {}
    for v in labels.tolist():
        counts[v] = counts.get(v, 0) + 1
    values = sorted(counts, key=lambda v: (type(v).__name__, v))
    return values, [counts[v] for v in values]


def same_label(a, b) -> bool:
    return type(a) is type(b) and a == b


def positive_rows(values, positive) -> np.ndarray:
    """Whether each of ``values`` (a target's cells, or their labels) is of the class
    ``positive``, both read as :func:`class_label` reads a label."""
    want = class_label(positive)
    return np.array([same_label(class_label(v), want) for v in values], dtype=bool)


def _resolve_positive(values: list, counts: list[int], requested, target: str,
                      table_name: str):
    """The positive class: the one asked for, True for flags, 1 for 0/1 labels, else the
    rarer of two."""
    if requested is not None:
        for v in values:
            if same_label(v, class_label(requested)) or str(v).lower() == str(requested).lower():
                return v
        shown = ", ".join(repr(v) for v in values[:20])
        raise StepError(f"{table_name}: positive class {requested!r} is not a value of "
                        f"{target!r}; its values are {shown}.")
    if len(values) != 2:
        return None
    if set(values) == {False, True}:
        return True
    if values == [0, 1] and all(type(v) is int for v in values):
        return 1
    # the rarer class is usually the property asked about; ties go to the later value
    return values[0] if counts[0] < counts[1] else values[1]
