"""One separator run, prepared: the feature matrix, the target read as classes or as a
number, the groups, the kernel method and the permuted copies, held in a frozen
:class:`PreparedRun` that every later part of the protocol takes; and the check whether the
target follows exactly from the features.

Notes, warnings and the seconds of each part go to the run's :class:`RunLog`, in the order
the parts run.
"""

from __future__ import annotations

import dataclasses
import time
from dataclasses import dataclass, field

import numpy as np

from analysis.errors import StepError
from analysis.features import (
    build_features,
    group_keys,
    is_numeric_target,
    lost_classes,
    target_values,
)
from analysis.notes import Note
from analysis.progress import Reporter
from analysis.reading import Reading, choose_reading
from analysis.separator_labels import class_target, numeric_target
from analysis.separator_models import REGRESSION_WORDS, kernel_method
from analysis.separator_protocol import augment_column, excluded_columns, permuted_copies
from analysis.table import Table

# The check that the target follows from the features runs on at most this many rows (a seeded
# sample), and a relation it finds is then checked on every row.
LEAKAGE_SAMPLE_ROWS = 5000


@dataclass(eq=False)
class RunLog:
    """What a run tells as it goes: notes, warnings, the solvers' warnings (reported once
    each), and the seconds of each part of the protocol in the order they ran."""

    notes: list[str] = field(default_factory=list)
    warnings: list[str] = field(default_factory=list)
    fit_warnings: set[str] = field(default_factory=set)
    phase_seconds: dict[str, float] = field(default_factory=dict)

    def clocked(self, name: str, work, *args):
        """``work(*args)``, its seconds added to the part of the protocol called ``name``."""
        started = time.perf_counter()
        try:
            return work(*args)
        finally:
            self.phase_seconds[name] = self.phase_seconds.get(name, 0.0) + (
                time.perf_counter() - started)


@dataclass(frozen=True, eq=False)
class PreparedRun:
    """The settings, features and target of one run, and how its model is fitted.

    ``X`` is the feature matrix in C order (``fm.values`` holds the same values); ``y`` the
    class codes or the numeric target; ``group_labels`` the group of every row (None without
    groups); ``copy_values`` and ``copy_source`` the permuted copies of training rows and the
    row each came from (None without augmentation).
    """

    step: object
    table: Table
    progress: Reporter
    log: RunLog
    fm: object
    X: np.ndarray
    y: np.ndarray
    reading: Reading
    regression: bool
    classes: tuple
    positive_class: object
    n_classes: int
    integer_target: bool
    big: bool
    group_labels: np.ndarray | None
    kernel_mode: str
    kernel_method: str | None
    copy_values: np.ndarray | None
    copy_source: np.ndarray | None
    left_out: tuple[str, ...]


def prepare(step, table: Table, progress: Reporter, log: RunLog) -> PreparedRun:
    """Build the features and the target of ``step`` on ``table`` (StepError on bad input)."""
    fm = build_features(table, columns=step.columns, target=step.target,
                        array_encoding=step.array_encoding, log_scale=step.log_scale,
                        missing=step.missing, exclude=excluded_columns(table, step),
                        intervals=step.intervals)
    log.notes.extend(fm.notes)
    log.warnings.extend(fm.warnings)
    left_out = tuple(name for name, _ in fm.left_out)
    X = np.ascontiguousarray(fm.values, dtype=np.float64)
    # one copy of the matrix, in the row order the solvers want, shared with the features
    fm = dataclasses.replace(fm, values=X)
    raw = target_values(table, step.target, fm.rows)
    reading = _reading(step, table, X, raw, progress)
    if reading.text and reading.chosen_by == "learning curve":
        log.notes.append(reading.text)
    if reading.number:
        target = numeric_target(raw, step, table.name)
    else:
        target = class_target(raw, step, table.name,
                              why=lambda: lost_classes(table, step.target, fm))
    if target.keep is not None:
        keep = target.keep
        fm = dataclasses.replace(fm, values=fm.values[keep], rows=fm.rows[keep],
                                 row_ids=fm.row_ids[keep])
        X = np.ascontiguousarray(X[keep])
    log.notes.extend(target.notes)
    n = len(target.y)
    group_labels = _group_labels(step, table, fm, log)
    kernel_mode, method = kernel_method(step, n, reading.number, table.name)
    if method is not None:
        log.notes.append(Note("kernel", f"kernel: {method}.", mode=kernel_mode))
    copy_values, copy_source = _copies(step, table, fm, log)
    return PreparedRun(
        step=step, table=table, progress=progress, log=log, fm=fm, X=X, y=target.y,
        reading=reading, regression=reading.number, classes=target.classes,
        positive_class=target.positive_class, n_classes=target.n_classes,
        integer_target=target.integer_target, big=n >= step.large_table_rows,
        group_labels=group_labels, kernel_mode=kernel_mode, kernel_method=method,
        copy_values=copy_values, copy_source=copy_source, left_out=left_out)


def _reading(step, table: Table, X: np.ndarray, raw: np.ndarray, progress: Reporter) -> Reading:
    """Whether the target is read as a number or as classes, and why."""
    if step.reading == "auto" and (
            not is_numeric_target(table, step.target, "number")
            or step.model not in REGRESSION_WORDS or step.positive_class is not None):
        # a class-only model, or a positive class, asks for classes: the rule decides
        return Reading(is_numeric_target(table, step.target), "rule", "")
    if step.reading == "auto":
        progress.phase("choosing between the number and class readings")
    return choose_reading(table, step.target, step.reading, X, raw, step.seed)


def _group_labels(step, table: Table, fm, log: RunLog) -> np.ndarray | None:
    """The group of every feature row, from the group column (None without one)."""
    if step.groups is None:
        return None
    labels = group_keys(table, step.groups)[fm.rows]
    distinct = len(set(labels.tolist()))
    if distinct < 2:
        raise StepError(f"{table.name}: the group column {step.groups!r} puts every "
                        "row in one group, so no split can keep groups apart. Choose "
                        "another group column.")
    what = "canonical keys of the matrix column" if \
        table.column(step.groups).role == "array" else "values of the column"
    log.notes.append(Note("groups", f"groups: {distinct} groups from the {what} "
                          f"{step.groups!r}; each group stays on one side of every split.",
                          groups=distinct, column=step.groups))
    return labels


def _copies(step, table: Table, fm, log: RunLog):
    """Permuted copies of a matrix column, for augmenting training sides only."""
    if step.augment_permutations == 0:
        return None, None
    column = augment_column(table, fm, step.groups)
    values, source = permuted_copies(table, fm, column, step.augment_permutations, step.seed,
                                     step.array_encoding, step.log_scale)
    log.notes.append(Note("augmentation", f"augmentation: {step.augment_permutations} "
                          f"permuted copies of {column!r} per training row (rows and columns "
                          "permuted together for symmetric matrices, independently "
                          "otherwise); test rows are never copied.",
                          copies=step.augment_permutations, column=column))
    return values, source


def target_follows(run: PreparedRun):
    """An exact linear relation writing the target through exact feature columns, checked
    on every row used; a finding and a leakage warning when there is one."""
    from analysis.derived import Statement
    from analysis.leakage import target_follows as find_relation

    table, step, fm = run.table, run.step, run.fm
    exact_types = ("integer", "big integer", "rational", "boolean")
    if table.column(step.target).dtype not in exact_types:
        return None
    candidates = [name for name in fm.columns
                  if table.column(name).role in ("invariant", "flag")
                  and table.column(name).dtype in exact_types]
    if not candidates:
        return None
    rows = fm.rows
    if len(rows) > LEAKAGE_SAMPLE_ROWS:
        rows = np.sort(np.random.default_rng([step.seed, 47]).choice(
            rows, LEAKAGE_SAMPLE_ROWS, replace=False))
    exact = {name: table.exact(name) for name in candidates + [step.target]}
    pick = {name: [values[i] for i in rows] for name, values in exact.items()}
    found = find_relation(step.target, pick.pop(step.target), pick)
    if found is None:
        return None
    if len(rows) < len(fm.rows):
        statement = Statement(terms=found.terms, relation="=", constant=found.constant)
        every = {name: [exact[name][i] for i in fm.rows] for name, _ in found.terms}
        if any(statement.breaks(every)):
            return None
        found = dataclasses.replace(found, holds_on=len(fm.rows))
    run.log.warnings.insert(0, (
        f"the target follows exactly from the features: {found.relation} holds on all "
        f"{found.holds_on} rows used, so a separator that predicts it shows nothing new. "
        f"Leave out {', '.join(map(repr, found.columns))} (choose the feature columns) to "
        "ask whether the other invariants predict it."))
    return found
