"""The separator step: is a target predictable from the other invariants, and by what equation?

A separator is fitted on one side of a split and scored on the other, and the score is always
shown next to what chance would give:

- repeated stratified splits at the chosen training fraction (group-aware when a group column,
  or the canonical key of a matrix column, is given, so an object and its permuted copies
  never sit on both sides);
- accuracy, balanced accuracy and the Matthews correlation with a bootstrap interval, the
  confusion matrix, the majority-class baseline on the same test rows, a permutation p-value
  (labels shuffled within the training side and the model refitted), and a learning curve;
- a verdict in words: the separator beats chance only when the interval of the Matthews
  correlation lies above 0 and the permutation p-value is below 0.05;
- the separating equation in the table's own units with exact rational coefficients, checked
  on every row (linear, logistic, LDA; the expanded polynomial for the degree-2 kernel; a
  readable quadratic surrogate with its agreement rate for the RBF kernel).

A many-valued invariant target is a regression: the same protocol with R^2 and the mean
absolute error, the training mean as the baseline, and an exact formula when one exists.
"""

from __future__ import annotations

import dataclasses
import math
import time
import warnings as _warnings
from dataclasses import dataclass
from typing import ClassVar

import numpy as np

from analysis.errors import StepError
from analysis.features import build_features, group_keys, is_numeric_target, target_values
from analysis.plain import plain, row_id
from analysis.progress import Reporter, quiet
from analysis.reading import Reading, choose_reading
from analysis.table import Table
from analysis.threads import one_thread_each, refit_workers

MODELS = ("linear", "logistic", "lda", "rbf", "poly2")
MODEL_WORDS = {
    "linear": "linear support vector machine",
    "logistic": "logistic regression",
    "lda": "linear discriminant analysis",
    "rbf": "support vector machine with an RBF kernel",
    "poly2": "support vector machine with a degree-2 polynomial kernel",
}
REGRESSION_WORDS = {
    "linear": "linear regression (ridge)",
    "rbf": "support vector regression with an RBF kernel",
    "poly2": "ridge regression on degree-2 monomials",
}
PENALTIES = ("l2", "l1")
KERNEL_APPROXIMATIONS = ("exact", "auto", "nystroem", "sample")
READINGS = ("auto", "number", "classes")
LEARNING_FRACTIONS = (0.1, 0.2, 0.3, 0.4, 0.5, 0.6, 0.7, 0.8)
LEARNING_REPEATS = 3
BOOTSTRAP_RESAMPLES = 1000
INTERVAL_LEVEL = 0.95
CHANCE_LEVEL = 0.05
# Refits of a kernel machine cost about the square of the rows; the permutation test and the
# learning curve run kernel machines on a sample of this many rows.
KERNEL_PERMUTATION_ROWS = 1000
KERNEL_CURVE_ROWS = 3000
KERNEL_PERMUTATION_TEST_ROWS = 2000
# On a large table each permutation refit uses at most this many training rows (the observed
# score is refitted on the same rows): 50 refits then cost about one fit on 250000 rows.
LARGE_PERMUTATION_ROWS = 5000
NYSTROEM_COMPONENTS = 1000
# A Nystroem machine is fitted on at most this many rows (a stratified sample of the training
# rows past it): its features take components x rows x 8 bytes, and the linear solver copies
# them again, about 1.2 GB at this size and 12 GB for half of a million-row table.
NYSTROEM_FIT_ROWS = 50_000
# Rows a fitted pipeline evaluates at once, so that Nystroem features stay small in memory.
PREDICT_BLOCK_ROWS = 20_000
MISPREDICTED_LIMIT = 100
# Objects with an open target value predicted at most.
OPEN_PREDICTION_LIMIT = 5000
# The check that the target follows from the features runs on at most this many rows (a seeded
# sample), and a relation it finds is then checked on every row.
LEAKAGE_SAMPLE_ROWS = 5000
ROW_ID_LIST_LIMIT = 5000
CLASS_RULE = ("beats chance: yes only when the 95% bootstrap interval of the Matthews "
              "correlation on the test rows lies above 0 and the permutation p-value is below "
              "0.05; otherwise no.")
REGRESSION_RULE = ("beats chance: yes only when the 95% bootstrap interval of R^2 on the test "
                   "rows lies above 0 and the permutation p-value is below 0.05; otherwise no.")


@dataclass(frozen=True, eq=False)
class DecisionScores:
    """Per-row decision scores of the separator fitted on all rows, kept for figures.

    ``scores`` is the left side of the equation (or the machine's decision value where there
    is no equation) minus the threshold, so 0 is the boundary; for several classes it has one
    column per class (that class against the rest). ``rows`` are positions in the table's
    frame, ``labels`` the class codes (or the numeric target), ``source`` says what the score
    is.
    """

    rows: np.ndarray
    row_ids: np.ndarray
    scores: np.ndarray
    labels: np.ndarray
    predicted: np.ndarray
    source: str


@dataclass(frozen=True)
class SeparatorResult:
    """What the separator step found; ``to_json()`` follows the `separate` JSON contract."""

    target: str
    model: str
    task: str                       # "classification" or "regression"
    classes: tuple                  # class labels, in code order (binary: negative, positive)
    positive_class: object
    metrics: dict
    baseline: dict
    permutation_p: float | None
    permutation_scores: tuple[float, ...]
    permutation_observed: float | None
    permutation_method: str
    beats_chance: bool
    beats_chance_rule: str
    interval_method: str
    confusion_matrix: dict | None
    repeats: dict
    learning_curve: tuple[dict, ...]
    train_rows: int
    test_rows: int
    train_row_ids: tuple | None
    test_row_ids: tuple | None
    split_method: str
    identical_rows_across_split: int
    equation: object = None         # LinearEquation (binary linear models and poly2)
    equations: tuple = ()           # one per class against the rest (several classes)
    surrogate: object = None        # quadratic surrogate of an RBF machine
    formula: object = None          # exact formula of a numeric target
    kernel_method: str | None = None
    mispredicted: tuple[dict, ...] = ()
    warnings: tuple[str, ...] = ()
    notes: tuple[str, ...] = ()
    decision: DecisionScores | None = dataclasses.field(default=None, repr=False)
    rows_used: int = 0
    permutations_run: int = 0
    left_out_columns: tuple[str, ...] = ()
    target_follows: object = None   # analysis.leakage.TargetFollows: the target is a formula
    importance: tuple = ()          # analysis.importance.Importance records, largest first
    open_predictions: tuple[dict, ...] = ()  # rows with no known target value, predicted
    reading: object = None          # analysis.reading.Reading: number or classes, and why
    elapsed_seconds: float = 0.0
    # seconds of each part of the protocol ("split 1", "later splits", "learning curve", ...),
    # in the order they ran; like elapsed_seconds, not part of the JSON
    phase_seconds: tuple[tuple[str, float], ...] = ()
    kind: ClassVar[str] = "separator"

    def _repr_html_(self) -> str:
        from analysis.notebook import result_html

        return result_html(self)

    def to_frame(self):
        """The result as a pandas frame (see analysis.frames.separator_frame)."""
        from analysis.frames import separator_frame

        return separator_frame(self)

    def open_predictions_frame(self):
        """The predictions for objects whose target is open, as a pandas frame."""
        from analysis.frames import open_predictions_frame

        return open_predictions_frame(self)

    @property
    def beats_chance_text(self) -> str:
        return "yes" if self.beats_chance else "no"

    def to_json(self) -> dict:
        """Plain JSON: the contract's fields first, then everything else the step reports.

        ``elapsed_seconds`` and ``phase_seconds`` are left out so that the same seed gives
        byte-identical JSON.
        """
        return plain({
            "metrics": self.metrics,
            "baseline": self.baseline,
            "permutation_p": self.permutation_p,
            "train_rows": self.train_rows,
            "test_rows": self.test_rows,
            "equation": _json_or_none(self.equation),
            "equations": [_json_or_none(e) for e in self.equations],
            "surrogate": _json_or_none(self.surrogate),
            "formula": _json_or_none(self.formula),
            "beats_chance": self.beats_chance_text,
            "beats_chance_rule": self.beats_chance_rule,
            "target": self.target,
            "model": self.model,
            "task": self.task,
            "classes": list(self.classes),
            "positive_class": self.positive_class,
            "confusion_matrix": self.confusion_matrix,
            "interval_method": self.interval_method,
            "permutation_method": self.permutation_method,
            "permutation_observed": self.permutation_observed,
            "permutation_scores": list(self.permutation_scores),
            "repeats": self.repeats,
            "learning_curve": list(self.learning_curve),
            "split_method": self.split_method,
            "identical_rows_across_split": self.identical_rows_across_split,
            "train_row_ids": None if self.train_row_ids is None
            else [row_id(r) for r in self.train_row_ids],
            "test_row_ids": None if self.test_row_ids is None
            else [row_id(r) for r in self.test_row_ids],
            "kernel_method": self.kernel_method,
            "mispredicted": [m["row"] for m in self.mispredicted],
            "mispredicted_details": list(self.mispredicted),
            "rows_used": self.rows_used,
            "permutations_run": self.permutations_run,
            "left_out_columns": list(self.left_out_columns),
            "target_follows": _json_or_none(self.target_follows),
            "importance": [r.to_json() for r in self.importance],
            "open_predictions": list(self.open_predictions),
            "reading": None if self.reading is None else self.reading.to_json(),
            "warnings": list(self.warnings),
            "notes": list(self.notes),
        })

    def summary(self) -> str:
        """Short human text: scores next to chance, then the equation, then the verdict."""
        words = (REGRESSION_WORDS if self.task == "regression" else MODEL_WORDS)[self.model]
        head = f"separator for {self.target!r}: {words}"
        if self.task == "classification" and self.positive_class is not None:
            head += f", positive class {self.positive_class!r}"
        lines = [head]
        if self.target_follows is not None:
            lines.append(f"  finding: the target follows from the features: "
                         f"{self.target_follows.relation}")
        if self.reading is not None and self.reading.chosen_by == "learning curve":
            lines.append(f"  reading: {self.reading.text}")
        lines += [f"  {self.rows_used} rows; split 1 has {self.train_rows} training and "
                 f"{self.test_rows} test rows ({self.split_method})"]
        m, b = self.metrics, self.baseline
        if self.task == "classification":
            lines.append(f"  accuracy {m['accuracy']:.3f} (majority-class baseline "
                         f"{b['accuracy']:.3f}), balanced accuracy "
                         f"{m['balanced_accuracy']:.3f}")
            low, high = m["mcc_ci"]
            lines.append(f"  Matthews correlation {m['mcc']:.3f}, 95% interval "
                         f"[{low:.3f}, {high:.3f}] ({self.interval_method})")
            spread = self.repeats.get("mean", {}), self.repeats.get("std", {})
            if spread[0]:
                lines.append(f"  over {len(self.repeats['splits'])} splits: Matthews "
                             f"correlation {spread[0]['mcc']:.3f} +- {spread[1]['mcc']:.3f}")
        else:
            low, high = m["r2_ci"]
            lines.append(f"  R^2 {m['r2']:.3f}, 95% interval [{low:.3f}, {high:.3f}] "
                         f"({self.interval_method}); mean absolute error "
                         f"{m['mean_absolute_error']:.4g} (predicting the training mean: "
                         f"R^2 {b['r2']:.3f}, error {b['mean_absolute_error']:.4g})")
            if "exact" in m:
                lines.append("  " + exact_text(self))
            spread = self.repeats.get("mean", {}), self.repeats.get("std", {})
            if spread[0]:
                lines.append(f"  over {len(self.repeats['splits'])} splits: R^2 "
                             f"{spread[0]['r2']:.3f} +- {spread[1]['r2']:.3f}")
        if self.permutation_p is not None:
            lines.append(f"  permutation p-value {self.permutation_p:.4g} "
                         f"({self.permutation_method})")
        else:
            lines.append(f"  no permutation test ({self.permutation_method})")
        lines.extend(f"  warning: {w}" for w in self.warnings)
        if self.kernel_method:
            lines.append(f"  kernel: {self.kernel_method}")
        lines.extend(_equation_lines(self))
        lines.append(f"beats chance: {self.beats_chance_text}")
        return "\n".join(lines)


def exact_text(result: SeparatorResult) -> str:
    """For a whole-number target: the share predicted exactly against both baselines."""
    m, b = result.metrics, result.baseline
    low, high = m["exact_ci"]
    text = (f"exactly right on {m['exact']:.1%} of test rows (95% Wilson interval "
            f"[{low:.1%}, {high:.1%}]); the most common value {b['most_common_value']:g} gets "
            f"{b['exact']:.1%}")
    if "formula_exact" in b:
        text += f", the closest formula {b['formula']} gets {b['formula_exact']:.1%}"
        verdict = "beats both" if m.get("exact_beats_baselines") else "does not clearly beat both"
        text += f": the model {verdict} (the interval's low end against the better baseline)"
    return text


def _target_intervals(table, target: str) -> dict:
    """Position -> (low, high) of the target's interval cells (none for most tables)."""
    reader = getattr(table, "intervals", None)
    if reader is None:
        return {}
    found = reader(target)
    return {int(p): (float(lo), float(hi))
            for p, lo, hi in zip(found.positions, found.low, found.high)}


def _class_confidence(model, X: np.ndarray) -> np.ndarray:
    """The probability the model gives its predicted class, where it gives probabilities;
    else the distance from the boundary in decision units."""
    if hasattr(model, "predict_proba"):
        try:
            return np.asarray(model.predict_proba(X)).max(axis=1)
        except AttributeError:
            pass
    scores = _decision(model, X)
    if scores.ndim == 1:
        return np.abs(scores)
    ordered = np.sort(scores, axis=1)
    return ordered[:, -1] - ordered[:, -2]


def _first_figures(metrics: dict) -> dict:
    """Split 1's figures the page may show before the slower parts end."""
    keys = ("accuracy", "baseline_accuracy", "mcc", "r2", "baseline_r2")
    return {key: metrics[key] for key in keys if metrics.get(key) is not None}


def _json_or_none(value):
    if value is None:
        return None
    return value.to_json() if hasattr(value, "to_json") else plain(value)


def _equation_lines(result: SeparatorResult) -> list[str]:
    lines = []
    if result.formula is not None:
        off = result.formula.rows_off
        word = "formula" if off == 0 else "closest formula"
        lines.append(f"  {word}: {_text(result.formula)} ({off} of "
                     f"{result.formula.n_rows} rows off)")
    if result.equations:
        for eq in result.equations:
            lines.append(f"  equation for {eq.positive_class!r} against the rest: "
                         f"{_text(eq)}{_violations_text(eq)}")
    elif result.equation is not None:
        lines.append(f"  equation: {_text(result.equation)}{_violations_text(result.equation)}")
    if result.surrogate is not None:
        agreement = getattr(result.surrogate, "agreement", None)
        extra = f" (agrees with the machine on {agreement:.1%} of rows)" \
            if agreement is not None else ""
        lines.append(f"  quadratic surrogate: {_text(result.surrogate)}{extra}")
    if not lines:
        lines.append("  equation: none (see notes)")
    return lines


def _text(equation) -> str:
    return str(getattr(equation, "text", equation))


def _violations_text(equation) -> str:
    count = getattr(equation, "violations", None)
    if count is None:
        return ""
    return f" ({count} violating row{'s' if count != 1 else ''})"


# ----------------------------------------------------------------------------------------
# The step


@dataclass(frozen=True, kw_only=True)
class SeparatorStep:
    """Fit a separator for ``target``, validate it against chance, and state its equation.

    Settings
    --------
    target: the column to predict (required): a flag or category (classification), or a
        many-valued invariant (regression).
    model: "linear" (linear support vector machine), "logistic", "lda", "rbf", "poly2".
    penalty: "l2", or "l1" for equations with few terms (linear and logistic).
    c: the support vector machine's C (inverse regularization strength), for every model
        but LDA.
    train_fraction: share of rows (of groups, when ``groups`` is given) used for training,
        0.05 to 0.95.
    repeats: number of random splits; split 1 carries the interval and permutation test,
        all splits give the mean and spread.
    permutations: label permutations for the p-value (0 skips the test).
    groups: a column whose equal values (or, for a matrix column, equal canonical keys)
        must stay on one side of every split.
    augment_permutations: add this many randomly permuted copies of a matrix column's cell
        for every training row (never for test rows).
    positive_class: the class the equation describes; for a target with more classes it
        turns the question into this class against the rest.
    kernel_approximation: for rbf and poly2 past ``kernel_row_limit`` rows: "exact" refuses,
        "auto" and "nystroem" use Nystroem features with a linear machine, "sample" fits
        the exact machine on a sample of ``kernel_row_limit`` rows.
    large_table_rows: from this many rows on, the permutation test makes at most 50
        refits, each on at most 5000 (and ``sample_rows``) training rows, scored on at most
        ``sample_rows`` test rows; splits after the first are fitted on a sample of
        ``sample_rows`` of their training rows; and split 1's separator (not a refit on
        every row) starts the equation search. The equation is searched on a sample of
        ``sample_rows`` rows past that size, then checked on every row.
    max_terms, max_denominator: limits for the exact equation (None: the search's defaults).
    target_statement: a relation, bound, congruence or formula (its JSON, as a result gives
        it); the target is then the derived flag "breaks: <statement>", true on the rows that
        break it, so the step asks whether the breakers can be told apart, and how.
    reading: how an invariant target is read: "auto" (a number past 12 distinct values, else
        each value a class), "number" (a regression; whole-number targets are also judged by
        the share predicted exactly) or "classes" (each value a class).
    """

    target: str | None = None
    model: str = "linear"
    penalty: str = "l2"
    c: float = 1.0
    train_fraction: float = 0.5
    repeats: int = 5
    permutations: int = 200
    groups: str | None = None
    columns: list[str] | None = None
    array_encoding: str = "invariant"
    log_scale: str = "auto"
    missing: str = "drop"
    intervals: str = "missing"
    positive_class: str | int | float | bool | None = None
    augment_permutations: int = 0
    kernel_approximation: str = "exact"
    kernel_row_limit: int = 20_000
    large_table_rows: int = 200_000
    sample_rows: int = 20_000
    max_terms: int | None = None
    max_denominator: int | None = None
    reading: str = "auto"
    target_statement: dict | None = None
    seed: int = 0
    kind: ClassVar[str] = "separator"

    def run(self, table: Table, *, progress=None) -> SeparatorResult:
        """Run the validation protocol on ``table`` and find the separating equation.

        progress: a callable (or :class:`analysis.progress.Reporter`) told of each phase
            ("split 1 of 5", "permutation test 40 of at most 200", ...); it may stop the
            step by raising :class:`analysis.progress.StepStopped`.
        """
        started = time.perf_counter()
        step = self
        if self.target_statement is not None:
            from analysis.derived import Statement, with_breaks_flag

            self.check()
            table, name = with_breaks_flag(table, Statement.from_json(self.target_statement))
            step = dataclasses.replace(self, target=name)
        step._check_settings(table)
        result = _Run(step, table, quiet(progress)).execute()
        return dataclasses.replace(result, elapsed_seconds=time.perf_counter() - started)

    def _check_settings(self, table: Table) -> None:
        if not self.target:
            raise StepError(f"{table.name}: the separator needs a target column; name one "
                            "with target (--target COL on the command line).")
        info = table.column(self.target)
        if info.role in ("id", "text", "array"):
            raise StepError(f"{table.name}: the {info.role} column {self.target!r} cannot be "
                            "a target. Choose a flag, category or invariant column, or change "
                            "its role.")
        self.check()
        if self.groups is not None:
            table.column(self.groups)
            if self.groups == self.target:
                raise StepError(f"{table.name}: the group column cannot be the target "
                                f"{self.target!r}.")

    def check(self) -> None:
        """Check the settings alone (no table needed); StepError names a bad one."""
        if self.model not in MODELS:
            raise StepError(f"model {self.model!r}: use one of {', '.join(MODELS)}.")
        if self.penalty not in PENALTIES:
            raise StepError(f"penalty {self.penalty!r}: use l2, or l1 for equations with few "
                            "terms.")
        if self.penalty == "l1" and self.model not in ("linear", "logistic"):
            raise StepError(f"penalty l1 applies to the linear and logistic models, not to "
                            f"{self.model!r}. Use penalty l2 or another model.")
        fraction = self.train_fraction
        if not isinstance(fraction, (int, float)) or isinstance(fraction, bool) \
                or not 0.05 <= float(fraction) <= 0.95:
            raise StepError(f"train fraction {fraction!r}: use a number from 0.05 to 0.95 "
                            "(the share of rows used for training).")
        for name, value, low in (("repeats", self.repeats, 1),
                                 ("permutations", self.permutations, 0),
                                 ("augment_permutations", self.augment_permutations, 0),
                                 ("kernel_row_limit", self.kernel_row_limit, 100),
                                 ("large_table_rows", self.large_table_rows, 100),
                                 ("sample_rows", self.sample_rows, 100)):
            if not isinstance(value, int) or isinstance(value, bool) or value < low:
                raise StepError(f"{name} {value!r}: use a whole number of at least {low}.")
        if not isinstance(self.c, (int, float)) or isinstance(self.c, bool) or not (
                math.isfinite(self.c) and self.c > 0):
            raise StepError(f"c {self.c!r}: use a positive number (the support vector "
                            "machine's C; larger fits the training rows more tightly).")
        if self.target_statement is not None:
            from analysis.derived import Statement

            statement = Statement.from_json(self.target_statement)
            if self.target is not None and self.target != statement.flag_name:
                raise StepError(f"target {self.target!r} and target_statement "
                                f"{statement.text!r} both name a target; give one of them.")
        if self.reading not in READINGS:
            raise StepError(f"reading {self.reading!r}: use one of {', '.join(READINGS)}.")
        if self.kernel_approximation not in KERNEL_APPROXIMATIONS:
            raise StepError(f"kernel approximation {self.kernel_approximation!r}: use one of "
                            f"{', '.join(KERNEL_APPROXIMATIONS)}.")
        for name, value in (("max_terms", self.max_terms),
                            ("max_denominator", self.max_denominator)):
            if value is not None and (not isinstance(value, int) or isinstance(value, bool)
                                      or value < 1):
                raise StepError(f"{name} {value!r}: use a whole number of at least 1, or "
                                "leave it unset.")


# ----------------------------------------------------------------------------------------
# One run of the protocol


class _Run:
    """The state of one run: features, labels, splits, and the fitting recipe."""

    def __init__(self, step: SeparatorStep, table: Table, progress: Reporter):
        self.step = step
        self.table = table
        self.progress = progress
        self.notes: list[str] = []
        self.warnings: list[str] = []
        self.fit_warnings: set[str] = set()
        self.permutations_run = 0
        self.integer_target = False
        self.phase_seconds: dict[str, float] = {}

    def _clocked(self, name: str, work, *args):
        """``work(*args)``, its seconds added to the part of the protocol called ``name``."""
        started = time.perf_counter()
        try:
            return work(*args)
        finally:
            self.phase_seconds[name] = self.phase_seconds.get(name, 0.0) + (
                time.perf_counter() - started)

    # -- preparation ----------------------------------------------------------------------

    def execute(self) -> SeparatorResult:
        step, table = self.step, self.table
        fm = build_features(table, columns=step.columns, target=step.target,
                            array_encoding=step.array_encoding, log_scale=step.log_scale,
                            missing=step.missing, exclude=excluded_columns(table, step),
                            intervals=step.intervals)
        self.notes.extend(fm.notes)
        self.warnings.extend(fm.warnings)
        self.left_out = tuple(name for name, _ in fm.left_out)
        self.X = np.ascontiguousarray(fm.values, dtype=np.float64)
        # one copy of the matrix, in the row order the solvers want, shared with the features
        self.fm = dataclasses.replace(fm, values=self.X)
        raw = target_values(table, step.target, fm.rows)
        if step.reading == "auto" and (
                not is_numeric_target(table, step.target, "number")
                or step.model not in REGRESSION_WORDS or step.positive_class is not None):
            # a class-only model, or a positive class, asks for classes: the rule decides
            self.reading = Reading(is_numeric_target(table, step.target), "rule", "")
        else:
            if step.reading == "auto":
                self.progress.phase("choosing between the number and class readings")
            self.reading = choose_reading(table, step.target, step.reading, self.X, raw,
                                          step.seed)
        self.regression = self.reading.number
        if self.reading.text and self.reading.chosen_by == "learning curve":
            self.notes.append(self.reading.text)
        if self.regression:
            self._prepare_regression(raw)
        else:
            self._prepare_classes(raw)
        n = len(self.y)
        self.big = n >= step.large_table_rows
        self.group_labels = None
        if step.groups is not None:
            self.group_labels = group_keys(table, step.groups)[fm.rows]
            distinct = len(set(self.group_labels.tolist()))
            if distinct < 2:
                raise StepError(f"{table.name}: the group column {step.groups!r} puts every "
                                "row in one group, so no split can keep groups apart. Choose "
                                "another group column.")
            what = "canonical keys of the matrix column" if \
                table.column(step.groups).role == "array" else "values of the column"
            self.notes.append(f"groups: {distinct} groups from the {what} {step.groups!r}; "
                              "each group stays on one side of every split.")
        self._choose_kernel_method()
        self._prepare_copies()
        self.progress.phase("checking whether the target follows from the features")
        self.follows = self._clocked("target check", self._target_follows)
        return self._protocol()

    def _target_follows(self):
        """An exact linear relation writing the target through exact feature columns, checked
        on every row used; a finding and a leakage warning when there is one."""
        from analysis.derived import Statement
        from analysis.leakage import target_follows

        table, step = self.table, self.step
        exact_types = ("integer", "big integer", "rational", "boolean")
        if table.column(step.target).dtype not in exact_types:
            return None
        candidates = [name for name in self.fm.columns
                      if table.column(name).role in ("invariant", "flag")
                      and table.column(name).dtype in exact_types]
        if not candidates:
            return None
        rows = self.fm.rows
        if len(rows) > LEAKAGE_SAMPLE_ROWS:
            rows = np.sort(np.random.default_rng([step.seed, 47]).choice(
                rows, LEAKAGE_SAMPLE_ROWS, replace=False))
        exact = {name: table.exact(name) for name in candidates + [step.target]}
        pick = {name: [values[i] for i in rows] for name, values in exact.items()}
        found = target_follows(step.target, pick.pop(step.target), pick)
        if found is None:
            return None
        if len(rows) < len(self.fm.rows):
            statement = Statement(terms=found.terms, relation="=", constant=found.constant)
            every = {name: [exact[name][i] for i in self.fm.rows] for name, _ in found.terms}
            if any(statement.breaks(every)):
                return None
            found = dataclasses.replace(found, holds_on=len(self.fm.rows))
        self.warnings.insert(0, (
            f"the target follows exactly from the features: {found.relation} holds on all "
            f"{found.holds_on} rows used, so a separator that predicts it shows nothing new. "
            f"Leave out {', '.join(map(repr, found.columns))} (choose the feature columns) to "
            "ask whether the other invariants predict it."))
        return found

    def _prepare_classes(self, raw: np.ndarray) -> None:
        from pandas.api.types import infer_dtype

        step = self.step
        # a flag's labels are its bools already: count and code them without a loop over
        # the rows (a million rows took seconds); the outcome is the same
        flags = raw.astype(bool) if len(raw) and \
            infer_dtype(raw, skipna=False) == "boolean" else None
        labels = raw if flags is not None else np.array([class_label(v) for v in raw], dtype=object)
        values, counts = _count_labels(labels, flags)
        if len(values) < 2:
            only = values[0] if values else None
            raise StepError(f"{self.table.name}: the target {step.target!r} has one class "
                            f"({only!r}) on all {len(labels)} rows used; a separator needs at "
                            "least two classes. Choose another target or other rows.")
        rare = [v for v, c in zip(values, counts) if c < 2]
        if rare and step.positive_class is None:
            keep = ~np.isin(labels, np.array(rare, dtype=object))
            self.notes.append(f"left out {int((~keep).sum())} rows of classes with a single "
                              f"row ({', '.join(map(repr, rare[:10]))}): a split cannot put "
                              "them on both sides.")
            self._keep_rows(keep)
            labels = labels[keep]
            flags = None if flags is None else flags[keep]
            values, counts = _count_labels(labels, flags)
            if len(values) < 2:
                raise StepError(f"{self.table.name}: the target {step.target!r} has only one "
                                "class with more than one row. Choose another target.")
        positive = _resolve_positive(values, counts, step.positive_class, step.target,
                                     self.table.name)
        if positive is not None:
            self.positive_class = positive
            negative = values[0] if len(values) == 2 and values[1] == positive else (
                values[1] if len(values) == 2 else f"not {positive}")
            if len(values) > 2:
                self.notes.append(f"{len(values)} classes: {positive!r} against the rest.")
            self.classes = (negative, positive)
            if flags is not None and isinstance(positive, bool):
                self.y = (flags == positive).astype(np.int64)
            else:
                self.y = np.array([1 if same_label(v, positive) else 0 for v in labels],
                                  dtype=np.int64)
            if len(values) > 2 and min(int(self.y.sum()), int(len(self.y) - self.y.sum())) < 2:
                raise StepError(f"{self.table.name}: class {positive!r} of {step.target!r} "
                                "has fewer than two rows; choose another positive class.")
        else:
            self.positive_class = None
            self.classes = tuple(values)
            lookup = {repr(v): i for i, v in enumerate(values)}
            self.y = np.array([lookup[repr(v)] for v in labels], dtype=np.int64)
        self.n_classes = len(self.classes)

    def _prepare_regression(self, raw: np.ndarray) -> None:
        step = self.step
        if step.model in ("logistic", "lda"):
            raise StepError(f"{self.table.name}: the target {step.target!r} is a numeric "
                            f"invariant with many values, and the model {step.model!r} needs "
                            "classes. Use model linear, rbf or poly2 for a regression, or "
                            "give the target the role category.")
        if step.positive_class is not None:
            raise StepError(f"{self.table.name}: positive_class applies to class targets; "
                            f"{step.target!r} is a numeric invariant with many values.")
        y = np.asarray(raw, dtype=np.float64)
        if np.ptp(y) == 0:
            raise StepError(f"{self.table.name}: the target {step.target!r} takes one value on "
                            "every row used; there is nothing to predict.")
        self.y = y
        self.classes = ()
        self.positive_class = None
        self.n_classes = 0
        from analysis.integer_target import is_integer_target

        self.integer_target = is_integer_target(y)
        if self.integer_target:
            self.notes.append(f"{step.target!r} takes whole values: the share of test rows whose "
                              "rounded prediction is exactly right (exact) is reported beside "
                              "R^2, against the most common training value and the closest "
                              "formula.")
        self.notes.append(f"{step.target!r} is a numeric invariant with many values: fitted "
                          "as a regression.")

    def _keep_rows(self, keep: np.ndarray) -> None:
        self.fm = dataclasses.replace(self.fm, values=self.fm.values[keep],
                                      rows=self.fm.rows[keep], row_ids=self.fm.row_ids[keep])
        self.X = np.ascontiguousarray(self.X[keep])

    def _choose_kernel_method(self) -> None:
        step = self.step
        n = len(self.y)
        kernel = step.model == "rbf" or (step.model == "poly2" and not self.regression)
        self.kernel_mode = "exact"
        self.kernel_method = None
        if not kernel:
            return
        if n > step.kernel_row_limit:
            if step.kernel_approximation == "exact":
                raise StepError(
                    f"{self.table.name}: model {step.model!r} on {n} rows: an exact kernel "
                    f"machine past {step.kernel_row_limit} rows takes too long and too much "
                    "memory. Set kernel_approximation to 'auto' (Nystroem features with a "
                    "linear machine) or 'sample' (the exact machine on a sample of "
                    f"{step.kernel_row_limit} rows), raise kernel_row_limit, or use the "
                    "linear model.")
            self.kernel_mode = "sample" if step.kernel_approximation == "sample" \
                else "nystroem"
        elif step.kernel_approximation == "nystroem":
            self.kernel_mode = "nystroem"
        if self.kernel_mode == "nystroem":
            self.kernel_method = (f"approximate: Nystroem features ({_components(n)} "
                                  "components on all rows, a quarter of the training rows up "
                                  f"to {NYSTROEM_COMPONENTS} in every fit; seeded) with a "
                                  "linear machine")
            if n > NYSTROEM_FIT_ROWS:
                self.kernel_method += (f", each fit on at most {NYSTROEM_FIT_ROWS} of its "
                                       "training rows (a stratified sample)")
        elif self.kernel_mode == "sample":
            self.kernel_method = (f"exact kernel machine fitted on a stratified sample of at "
                                  f"most {step.kernel_row_limit} training rows")
        else:
            self.kernel_method = "exact kernel machine"
        self.notes.append(f"kernel: {self.kernel_method}.")

    def _prepare_copies(self) -> None:
        """Permuted copies of a matrix column, for augmenting training sides only."""
        step = self.step
        self.copy_values = None
        self.copy_source = None
        if step.augment_permutations == 0:
            return
        column = _augment_column(self.table, self.fm, step.groups)
        values, source = _permuted_copies(self.table, self.fm, column,
                                          step.augment_permutations, step.seed,
                                          step.array_encoding, step.log_scale)
        self.copy_values = values
        self.copy_source = source
        self.notes.append(f"augmentation: {step.augment_permutations} permuted copies of "
                          f"{column!r} per training row (rows and columns permuted "
                          "together for symmetric matrices, independently otherwise); test "
                          "rows are never copied.")

    # -- fitting --------------------------------------------------------------------------

    def _fit(self, train: np.ndarray, labels: np.ndarray | None = None, *, seed_offset: int = 0):
        """Fit the model on ``train`` rows (labels default to the true ones), with copies."""
        step = self.step
        y = self.y if labels is None else labels
        rows = train
        if self.kernel_mode == "sample" and len(rows) > step.kernel_row_limit:
            rows = _subsample(rows, None if self.regression else y[rows],
                              step.kernel_row_limit, step.seed + 17 + seed_offset)
        if self.kernel_mode == "nystroem" and len(rows) > NYSTROEM_FIT_ROWS:
            rows = _subsample(rows, None if self.regression else y[rows],
                              NYSTROEM_FIT_ROWS, step.seed + 19 + seed_offset)
        X_train = self.X[rows]
        y_train = y[rows]
        if self.copy_values is not None:
            chosen = np.isin(self.copy_source, rows)
            X_train = np.vstack([X_train, self.copy_values[chosen]])
            y_train = np.concatenate([y_train, y[self.copy_source[chosen]]])
        estimator = _estimator(step, regression=self.regression, n_classes=self.n_classes,
                               kernel_mode=self.kernel_mode, n_rows=len(y_train),
                               seed=step.seed + seed_offset)
        with _warnings.catch_warnings(record=True) as caught:
            _warnings.simplefilter("always")
            estimator.fit(X_train, y_train)
        for w in caught:
            name = w.category.__name__
            if name == "ConvergenceWarning":
                self.fit_warnings.add("the solver stopped at its iteration limit on some "
                                      "fits; the scores still come from held-out rows.")
            elif "collinear" in str(w.message).lower():
                self.fit_warnings.add("some features are collinear (LDA).")
        return estimator

    def _score(self, y_true: np.ndarray, predicted: np.ndarray) -> float:
        if self.regression:
            return _r2(y_true, predicted)
        return float(_mcc_from_counts(_confusion(y_true, predicted, self.n_classes)))

    # -- the protocol ---------------------------------------------------------------------

    def _protocol(self) -> SeparatorResult:
        step = self.step
        y = self.y
        n = len(y)
        strata = None if self.regression else y
        splits, split_method = _splits(n, strata, self.group_labels,
                                       float(step.train_fraction), step.repeats, step.seed,
                                       self.table.name)
        per_split, first = self._fit_splits(splits, strata)
        if self.big and len(splits) > 1:
            self.notes.append(f"the table is large ({n} rows): splits 2 to {len(splits)} were "
                              f"fitted on a random sample of at most {step.sample_rows} of "
                              "their training rows (split 1 on all of its), and each was "
                              "scored on all its test rows.")
        train, test, model, predicted = first
        self.split_model = model
        repeats = {"splits": per_split, "mean": _mean_of(per_split), "std": _std_of(per_split)}
        identical = _identical_across(self.X, train, test)
        if identical:
            others = sum(1 for tr, te in splits[1:] if _identical_across(self.X, tr, te))
            if self.group_labels is None:
                advice = ("If these are copies of one object, name a group column (groups), "
                          "or the matrix column, so they stay on one side.")
            else:
                advice = ("They belong to other groups than their training twins: the "
                          "features cannot tell these objects apart.")
            self.warnings.append(
                f"{identical} test rows of split 1 have the same feature values as a training "
                f"row (and {others} of the other {len(splits) - 1} splits have such rows): "
                f"the separator is partly scored on rows it has seen. {advice}")
        if self.regression:
            metrics, baseline, interval = self._regression_report(train, test, predicted)
            confusion = None
        else:
            metrics, baseline, interval, confusion = self._class_report(test, predicted)
        self.progress.phase("permutation importance of the features")
        importance = self._clocked("importance", self._importance, model, test)
        p_value, null, observed, permutation_method = self._clocked(
            "permutation test", self._permutation_test, train, test, predicted)
        statistic = metrics["r2_ci"] if self.regression else metrics["mcc_ci"]
        beats = bool(statistic[0] is not None and statistic[0] > 0 and p_value is not None
                     and p_value < CHANCE_LEVEL)
        curve = self._clocked("learning curve", self._learning_curve)
        mispredicted = self._mispredicted(model, test, predicted)
        self.progress.phase("searching the exact equation")
        equation_part = self._clocked("fit on every row and exact equation",
                                      self._equation_part)
        self.progress.phase("predicting the open values")
        open_predictions = self._clocked("open values", self._open_predictions, test,
                                         predicted)
        if self.regression and self.integer_target and equation_part.get("formula"):
            from analysis.integer_target import exact_share

            formula = equation_part["formula"]
            by_formula = exact_share(y[test], formula.predict(self.X[test]))
            baseline["formula_exact"] = by_formula.share
            baseline["formula"] = formula.text
            best = max(baseline["exact"], by_formula.share)
            low = metrics["exact_ci"][0]
            metrics["exact_beats_baselines"] = bool(low > best)
        small = n <= ROW_ID_LIST_LIMIT
        ids = self.fm.row_ids
        carried = "the metrics" if self.regression else "the metrics, the confusion matrix"
        self.notes.append(f"split 1 carries {carried}, the interval and the permutation test; "
                          f"{len(splits)} splits give the mean and spread.")
        self.notes.extend(sorted(self.fit_warnings))
        return SeparatorResult(
            target=step.target, model=step.model,
            task="regression" if self.regression else "classification",
            classes=tuple(self.classes), positive_class=self.positive_class,
            metrics=metrics, baseline=baseline, permutation_p=p_value,
            permutation_scores=tuple(float(v) for v in null),
            permutation_observed=observed, permutation_method=permutation_method,
            beats_chance=beats,
            beats_chance_rule=REGRESSION_RULE if self.regression else CLASS_RULE,
            interval_method=interval, confusion_matrix=confusion, repeats=repeats,
            learning_curve=tuple(curve), train_rows=len(train), test_rows=len(test),
            train_row_ids=tuple(ids[train].tolist()) if small else None,
            test_row_ids=tuple(ids[test].tolist()) if small else None,
            split_method=split_method, identical_rows_across_split=identical,
            kernel_method=self.kernel_method, mispredicted=tuple(mispredicted),
            warnings=tuple(self.warnings), notes=tuple(self.notes), rows_used=n,
            permutations_run=self.permutations_run, left_out_columns=self.left_out,
            target_follows=self.follows, importance=importance,
            open_predictions=tuple(open_predictions), reading=self.reading,
            phase_seconds=tuple(self.phase_seconds.items()), **equation_part,
        )

    def _fit_splits(self, splits, strata) -> tuple[list[dict], tuple]:
        """Fit and score every split; split 1 first (its figures are reported at once), the
        others on worker threads. Each fit is seeded by its split alone, so the numbers do not
        depend on the number of workers."""
        step = self.step

        def one(index):
            train, test = splits[index]
            fit_rows = train
            if self.big and index > 0:
                # a large table: split 1 is fitted on all its training rows; the others,
                # which only give the spread over splits, on a sample of them
                if self.group_labels is None:
                    fit_rows = _share_sample(train, None if strata is None else strata[train],
                                             step.sample_rows, step.seed + 41 + index)
                else:
                    fit_rows = _subsample(train, None if strata is None else strata[train],
                                          step.sample_rows, step.seed + 41 + index,
                                          groups=self.group_labels)
            model = self._fit(fit_rows, seed_offset=index)
            predicted = _predict(model, self.X[test])
            metrics = self._split_metrics(fit_rows, test, predicted)
            record = {"split": index + 1, "train_rows": len(fit_rows), "test_rows": len(test),
                      **metrics}
            return record, (train, test, model, predicted)

        self.progress.phase("fitting the splits", total=len(splits))
        record, first = self._clocked("split 1", one, 0)
        self.progress.first_figures(**_first_figures(record))
        self.progress.advance()
        per_split = [record]
        started = time.perf_counter()
        largest = max((len(train) for train, _ in splits[1:]), default=0)
        for record, _ in self._on_workers(one, range(1, len(splits)),
                                          self._split_workers(largest)):
            per_split.append(record)
            self.progress.advance()
        self.phase_seconds["later splits"] = time.perf_counter() - started
        return per_split, first

    def _split_workers(self, fit_rows: int) -> int:
        """Threads for fits on up to ``fit_rows`` rows: one for Nystroem machines on more than
        ``KERNEL_CURVE_ROWS`` rows, whose fits each hold a matrix of up to 50000 x 1000
        features (two at once would double the peak memory); every core otherwise."""
        if self.kernel_mode == "nystroem" and fit_rows > KERNEL_CURVE_ROWS:
            return 1
        return refit_workers()

    def _on_workers(self, work, items, workers: int):
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

    def _split_metrics(self, train, test, predicted) -> dict:
        y = self.y
        if self.regression:
            mean = float(np.mean(y[train]))
            return {"r2": _r2(y[test], predicted),
                    "mean_absolute_error": float(np.mean(np.abs(y[test] - predicted))),
                    "baseline_r2": _r2(y[test], np.full(len(test), mean)),
                    "baseline_mean_absolute_error": float(np.mean(np.abs(y[test] - mean)))}
        counts = _confusion(y[test], predicted, self.n_classes)
        return {"accuracy": float(np.trace(counts) / counts.sum()),
                "balanced_accuracy": _balanced_accuracy(counts),
                "mcc": float(_mcc_from_counts(counts)),
                "baseline_accuracy": float(counts.sum(axis=1).max() / counts.sum())}

    def _class_report(self, test, predicted):
        counts = _confusion(self.y[test], predicted, self.n_classes)
        low, high = _mcc_interval(counts, BOOTSTRAP_RESAMPLES, self.step.seed)
        metrics = {"accuracy": float(np.trace(counts) / counts.sum()),
                   "balanced_accuracy": _balanced_accuracy(counts),
                   "mcc": float(_mcc_from_counts(counts)),
                   "mcc_ci": [low, high]}
        baseline = {"accuracy": float(counts.sum(axis=1).max() / counts.sum())}
        interval = (f"bootstrap, {BOOTSTRAP_RESAMPLES} resamples of the {counts.sum()} test "
                    "rows, percentile 95% interval, seeded (resampled rows drawn as "
                    "multinomial counts over the confusion matrix, which is the same thing)")
        confusion = {"labels": list(self.classes), "counts": counts.tolist(),
                     "rows": "actual class", "columns": "predicted class"}
        return metrics, baseline, interval, confusion

    def _regression_report(self, train, test, predicted):
        y = self.y
        mean = float(np.mean(y[train]))
        sample = np.arange(len(test))
        limit = self.step.sample_rows
        if len(test) > limit:
            sample = np.sort(np.random.default_rng([self.step.seed, 3]).choice(
                len(test), limit, replace=False))
        low, high = _r2_interval(y[test][sample], predicted[sample], BOOTSTRAP_RESAMPLES,
                                 self.step.seed)
        metrics = {"r2": _r2(y[test], predicted), "r2_ci": [low, high],
                   "mean_absolute_error": float(np.mean(np.abs(y[test] - predicted)))}
        baseline = {"r2": _r2(y[test], np.full(len(test), mean)),
                    "mean_absolute_error": float(np.mean(np.abs(y[test] - mean))),
                    "prediction": mean}
        if self.integer_target:
            from analysis.integer_target import exact_share, most_common_value

            found = exact_share(y[test], predicted)
            metrics["exact"] = found.share
            metrics["exact_ci"] = [found.low, found.high]
            common = most_common_value(y[train])
            baseline["exact"] = exact_share(y[test], np.full(len(test), common)).share
            baseline["most_common_value"] = common
        interval = (f"bootstrap, {BOOTSTRAP_RESAMPLES} resamples of "
                    f"{len(sample)} test rows, percentile 95% interval, seeded")
        if len(sample) < len(test):
            interval += f" (a sample of the {len(test)} test rows)"
        return metrics, baseline, interval

    def _permutation_test(self, train, test, predicted):
        """The sequential permutation test on split 1 (``predicted``: its model's predictions
        on ``test``)."""
        from analysis.permutation import sequential_test

        step = self.step
        count = step.permutations
        if count == 0:
            return None, (), None, "skipped (permutations = 0)"
        kernel = self.kernel_method is not None
        train_limit = KERNEL_PERMUTATION_ROWS if kernel else step.sample_rows
        if self.big:
            count = min(count, 50)
            train_limit = min(train_limit, LARGE_PERMUTATION_ROWS)
        rng = np.random.default_rng([step.seed, 11])
        strata = None if self.regression else self.y
        # a large table's few thousand rows are drawn class by class with numpy (see
        # _share_sample); scikit-learn's stratified splitter takes longer than the refits
        sampler = _share_sample if self.big else _subsample
        train_part = train if len(train) <= train_limit else sampler(
            train, None if strata is None else strata[train], train_limit, step.seed + 23)
        test_limit = KERNEL_PERMUTATION_TEST_ROWS if kernel else step.sample_rows
        test_part = test if len(test) <= test_limit else np.sort(
            rng.choice(test, test_limit, replace=False))
        if len(train_part) == len(train) and len(test_part) == len(test) \
                and self._fit_ignores_seed():
            # the same rows and a fit that does not use its seed: split 1's model is the
            # refit, so its predictions give the observed score
            observed = self._score(self.y[test], predicted)
        else:
            observed_model = self._fit(train_part, seed_offset=1000)
            observed = self._score(self.y[test_part], _predict(observed_model,
                                                               self.X[test_part]))
        score_of, shortcut = self._shuffled_scorer(train_part, test_part)
        self.progress.phase("permutation test", total=count)
        workers = 1 if shortcut else refit_workers()
        with one_thread_each(workers):
            test_result = sequential_test(observed, score_of, cap=count, workers=workers,
                                          reporter=self.progress)
        statistic = ("R^2" if self.regression else "Matthews correlation") + " on the test rows"
        method = test_result.method(statistic)
        if shortcut:
            method += f"; refits in closed form ({shortcut})"
        if len(train_part) < len(train) or len(test_part) < len(test):
            method += (f"; on a sample of {len(train_part)} training and {len(test_part)} "
                       f"test rows, with the observed score {observed:.3f} refitted on the "
                       "same sample")
        if count < step.permutations:
            method += f" (at most 50 shuffles, fewer than the {step.permutations} asked: the " \
                      "table is large)"
        if test_result.smallest_possible >= CHANCE_LEVEL:
            self.notes.append(f"at most {count} permutations: the smallest possible p-value "
                              f"is {test_result.smallest_possible:.3f}, so the verdict cannot "
                              "be yes.")
        self.permutations_run = test_result.count
        return (float(test_result.p_value), test_result.scores, float(observed), method)

    def _fit_ignores_seed(self) -> bool:
        """Whether two fits on the same rows give the same model whatever their seeds: the
        linear machine (liblinear's primal solver), ridge, lasso, LDA and exact kernel
        machines do; Nystroem features, samples of the training rows and logistic regression
        (its solvers may shuffle) take the seed."""
        step = self.step
        if self.kernel_mode != "exact" or step.model == "logistic":
            return False
        return step.model in ("linear", "lda", "rbf", "poly2")

    def _shuffled_scorer(self, train_part, test_part):
        """``score_of(i)``: the score of a refit on the i-th shuffle of the training labels,
        seeded by ``i`` alone, and the closed form used for the refits (None: real refits).

        Ridge regression and two-class LDA without copies refit in closed form
        (analysis/refits.py); every other model is refitted.
        """
        from analysis.refits import LdaShuffles, RidgeShuffles

        step = self.step
        y = self.y
        truth = y[test_part]

        def shuffled(i):
            labels = y.copy()
            labels[train_part] = np.random.default_rng([step.seed, 11, i]).permutation(
                y[train_part])
            return labels

        plain_fit = self.copy_values is None and self.kernel_mode == "exact"
        if plain_fit and step.model == "linear" and self.regression and step.penalty == "l2":
            closed = RidgeShuffles(self.X[train_part], self.X[test_part], alpha=1.0 / step.c)
            return (lambda i: self._score(truth, closed.predict(shuffled(i)[train_part])),
                    "ridge regression is a linear smoother")
        if plain_fit and step.model == "lda" and not self.regression and self.n_classes == 2:
            closed = LdaShuffles(self.X[train_part], self.X[test_part])
            if closed.usable:
                return (lambda i: self._score(truth, closed.predict(shuffled(i)[train_part])),
                        "two-class LDA through one solve with the total scatter matrix")

        def refit(i):
            model = self._fit(train_part, shuffled(i), seed_offset=1000)
            return self._score(truth, _predict(model, self.X[test_part]))

        return refit, None

    def _importance(self, model, test) -> tuple:
        """Permutation importance of every feature on split 1's test rows (seeded).

        The scorer is the protocol's own (Matthews correlation from the confusion counts, or
        R^2), the same numbers as scikit-learn's scorers to rounding, without their checks of
        every call's input, which took most of the time (a 16 x 16 matrix column gives dozens
        of features, each scored five times)."""
        from analysis.importance import permutation_importances

        rows = test
        limit = KERNEL_PERMUTATION_TEST_ROWS if self.kernel_method is not None else None
        if limit and len(rows) > limit:
            rows = np.sort(np.random.default_rng([self.step.seed, 43]).choice(
                rows, limit, replace=False))

        def scorer(estimator, X, y):
            return self._score(y, np.asarray(_predict(estimator, X)))

        with _warnings.catch_warnings():
            _warnings.simplefilter("ignore")
            return permutation_importances(
                model, self.X[rows], self.y[rows], list(self.fm.names),
                [f.column for f in self.fm.features], scorer, seed=self.step.seed)

    def _open_predictions(self, test, predicted) -> list[dict]:
        """Objects whose target is missing or an interval, predicted by the model fitted on
        the known rows (split 1's model on a large table), with its confidence."""
        from analysis.features import build_features

        table, step = self.table, self.step
        known = np.zeros(table.n_rows, dtype=bool)
        known[self.fm.rows] = True
        if known.all():
            # every row was used, so no object waits for a prediction: building the features
            # of the whole table again (seconds for a matrix column) would find none
            return []
        intervals = _target_intervals(table, step.target)
        try:
            every = build_features(table, columns=list(self.fm.columns),
                                   array_encoding=step.array_encoding,
                                   log_scale=step.log_scale, missing=step.missing,
                                   intervals=step.intervals)
        except StepError:
            return []
        names_match = every.names == self.fm.names
        wanted = ~known[every.rows]
        if not names_match or not wanted.any():
            return []
        rows = every.rows[wanted][:OPEN_PREDICTION_LIMIT]
        X = np.ascontiguousarray(every.values[wanted][:OPEN_PREDICTION_LIMIT])
        model = self.full_model
        guesses = np.asarray(_predict(model, X))
        if self.regression:
            typical = float(np.mean(np.abs(self.y[test] - predicted)))
            confidence = np.full(len(rows), np.nan)
        else:
            confidence = _class_confidence(model, X)
            typical = None
        out = []
        for k, position in enumerate(rows):
            interval = intervals.get(int(position))
            value = float(guesses[k]) if self.regression else self.classes[int(guesses[k])]
            estimate = value
            if self.regression and self.integer_target:
                # a whole-number target is predicted as a whole number, as it is scored
                value = int(round(value))
            inside = None
            if interval is not None and self.regression:
                inside = bool(interval[0] <= value <= interval[1])
            out.append({"row": row_id(table.row_ids[position]), "prediction": value,
                        "estimate": estimate,
                        "confidence": None if np.isnan(confidence[k]) else float(confidence[k]),
                        "typical_error": typical,
                        "interval": None if interval is None else [float(interval[0]),
                                                                   float(interval[1])],
                        "inside": inside})
        if len(out):
            self.notes.append(f"{len(out)} objects with no known value of {step.target!r} are "
                              "predicted by the model fitted on the known rows: predictions "
                              "to check by hand, not values.")
        return out

    def _learning_curve(self) -> list[dict]:
        step = self.step
        kernel = self.kernel_method is not None
        limit = KERNEL_CURVE_ROWS if kernel else step.sample_rows
        n = len(self.y)
        pool = np.arange(n)
        if n > limit:
            pool = _subsample(pool, None if self.regression else self.y, limit,
                              step.seed + 31, groups=self.group_labels)
            self.notes.append(f"learning curve on a sample of {len(pool)} of the {n} rows.")
        strata = None if self.regression else self.y[pool]
        groups = None if self.group_labels is None else self.group_labels[pool]
        skipped = []
        planned = []
        for k, fraction in enumerate(LEARNING_FRACTIONS):
            try:
                splits, _ = _splits(len(pool), strata, groups, fraction, LEARNING_REPEATS,
                                    step.seed + 101 * (k + 1), self.table.name)
            except StepError:
                skipped.append(fraction)
                continue
            if not self.regression and any(len(np.unique(self.y[pool[train]])) < 2
                                           for train, _ in splits):
                # a rare class can miss a small training side entirely: no fit is possible
                skipped.append(fraction)
                continue
            planned.append((fraction, splits))

        def score(job):
            j, train, test = job
            model = self._fit(pool[train], seed_offset=2000 + j)
            return self._score(self.y[pool[test]], _predict(model, self.X[pool[test]]))

        jobs = [(j, train, test) for _, splits in planned
                for j, (train, test) in enumerate(splits)]
        self.progress.phase("learning curve", total=len(LEARNING_FRACTIONS))
        ends = np.cumsum([len(splits) for _, splits in planned]).tolist()
        scores = []
        for value in self._on_workers(score, jobs, self._split_workers(len(pool))):
            scores.append(value)
            if len(scores) in ends:
                self.progress.advance()
        points = []
        for (fraction, splits), end in zip(planned, ends):
            mine = scores[end - len(splits):end]
            points.append({"train_fraction": fraction,
                           "train_rows": int(np.mean([len(t) for t, _ in splits])),
                           "metric": "r2" if self.regression else "mcc",
                           "mean": float(np.mean(mine)), "std": float(np.std(mine)),
                           "scores": [float(v) for v in mine]})
        if skipped:
            self.notes.append("learning curve: no valid split at training fraction "
                              f"{', '.join(map(str, skipped))} (too few rows per class or "
                              "group).")
        return points

    def _mispredicted(self, model, test, predicted) -> list[dict]:
        """Test rows the separator gets wrong while being confident about them."""
        ids = self.fm.row_ids
        y = self.y
        if self.regression:
            residual = np.abs(y[test] - predicted)
            typical = float(np.median(residual))
            if typical == 0:
                typical = float(np.mean(residual))
            chosen = np.flatnonzero(residual > 3 * typical) if typical > 0 else np.array([],
                                                                                         int)
            order = chosen[np.argsort(-residual[chosen], kind="stable")][:MISPREDICTED_LIMIT]
            return [{"row": row_id(ids[test[i]]), "actual": float(y[test[i]]),
                     "predicted": float(predicted[i]), "error": float(residual[i])}
                    for i in order]
        wrong = np.flatnonzero(predicted != y[test])
        if len(wrong) == 0 or not hasattr(model, "decision_function"):
            return []
        scores = _decision(model, self.X[test])
        if scores.ndim == 1:
            # two classes: the distance from the boundary, in decision units
            confidence = np.abs(scores)
            typical = float(np.median(confidence))
        else:
            # several classes: how far the predicted class's score beats the actual one's,
            # compared with the usual winning margin over the runner-up
            rows = np.arange(len(test))
            confidence = scores[rows, predicted] - scores[rows, y[test]]
            ordered = np.sort(scores, axis=1)
            typical = float(np.median(ordered[:, -1] - ordered[:, -2]))
        chosen = wrong[confidence[wrong] >= typical]
        order = chosen[np.argsort(-confidence[chosen], kind="stable")][:MISPREDICTED_LIMIT]
        return [{"row": row_id(ids[test[i]]), "actual": self.classes[y[test[i]]],
                 "predicted": self.classes[predicted[i]],
                 "confidence": float(confidence[i])} for i in order]

    # -- equations ------------------------------------------------------------------------

    def _equation_part(self) -> dict:
        """Fit on every row, then state the separator as an exact equation checked on every
        row (the search itself runs on a sample of ``sample_rows`` rows past that size)."""
        from analysis import equations as eqs

        step = self.step
        n = len(self.y)
        fitted_on = "all rows"
        if self.big:
            # a refit on every row of a large table costs twice split 1's fit and moves the
            # starting direction little; the exact search and its check on every row decide
            model = self.split_model
            fitted_on = "split 1's training rows"
            self.notes.append(f"the table is large ({n} rows): the separator fitted on split "
                              "1's training rows gives the equation's starting direction and "
                              "the decision scores, instead of a refit on every row.")
        else:
            model = self._fit(np.arange(n), seed_offset=5000)
        self.full_model = model
        predicted = np.asarray(_predict(model, self.X))
        names = list(self.fm.names)
        ids = self.fm.row_ids
        options = {"exact_columns": _exact_flags(self.fm),
                   "sample_size": step.sample_rows, "seed": step.seed}
        if step.max_terms is not None:
            options["max_terms"] = step.max_terms
        if step.max_denominator is not None:
            options["max_denominator"] = step.max_denominator
        if n > step.sample_rows:
            self.notes.append(f"the equation was searched on a sample of {step.sample_rows} "
                              f"rows, then checked on all {n} rows.")

        def scores_of(source, values):
            return DecisionScores(rows=self.fm.rows, row_ids=ids, scores=values,
                                  labels=self.y, predicted=predicted, source=source)

        if self.regression:
            formula = eqs.find_formula(self.X, self._exact_target(), names, row_ids=ids,
                                       target_name=step.target, **options)
            return {"formula": formula,
                    "decision": scores_of(f"prediction of the model fitted on {fitted_on}",
                                          predicted.astype(np.float64))}
        if step.model in ("linear", "logistic", "lda"):
            weights, intercepts = _raw_hyperplanes(model)
            if self.n_classes == 2:
                equation = eqs.find_linear_equation(
                    self.X, self.y == 1, names, row_ids=ids,
                    positive_class=self.positive_class,
                    hint=(weights[0], float(intercepts[0])), **options)
                return {"equation": equation,
                        "decision": scores_of("equation margin (>= 0 on the positive side)",
                                              _left_side(equation, self.X, names))}
            # one equation per class against the rest, each seeded with that class's
            # hyperplane from the fitted model
            equations = tuple(
                eqs.find_linear_equation(
                    self.X, self.y == k, names, row_ids=ids, positive_class=label,
                    hint=(weights[k], float(intercepts[k])), **options)
                for k, label in enumerate(self.classes))
            columns = np.column_stack([_left_side(e, self.X, names) for e in equations])
            return {"equations": equations,
                    "decision": scores_of("equation margin of each class against the rest "
                                          "(>= 0 on that class's side)", columns)}
        decision = _decision(model, self.X)
        machine_scores = scores_of(f"decision value of the kernel machine fitted on "
                                   f"{fitted_on}", decision)
        if self.n_classes != 2:
            self.notes.append("no equation for a kernel machine over several classes; choose "
                              "a positive class to get one for that class against the rest.")
            return {"decision": machine_scores}
        if step.model == "poly2" and self.kernel_mode != "nystroem":
            equation = eqs.poly2_equation(model, None, names, self.X, self.y == 1, row_ids=ids,
                                          positive_class=self.positive_class, **options)
            return {"equation": equation,
                    "decision": scores_of("polynomial equation margin (>= 0 on the "
                                          "positive side)", _left_side(equation, self.X, names))}
        surrogate = eqs.surrogate_quadratic(self.X, predicted == 1, names, row_ids=ids,
                                            positive_class=self.positive_class, **options)
        return {"surrogate": surrogate, "decision": machine_scores}

    def _exact_target(self) -> np.ndarray:
        """The numeric target as exact values when the column is integer or rational."""
        info = self.table.column(self.step.target)
        if info.dtype in ("integer", "big integer", "rational"):
            exact = self.table.exact(self.step.target)
            values = [exact[i] for i in self.fm.rows]
            if all(v is not None for v in values):
                return np.array(values, dtype=object)
        return self.y


# ----------------------------------------------------------------------------------------
# Estimators


def _estimator(step: SeparatorStep, *, regression: bool, n_classes: int, kernel_mode: str,
               n_rows: int, seed: int):
    """The scikit-learn pipeline for the step's model: always standardized features first."""
    from sklearn.pipeline import make_pipeline
    from sklearn.preprocessing import StandardScaler

    from analysis.scaling import TrainingRangeScaler

    c = float(step.c)
    model = step.model
    if regression:
        from sklearn.compose import TransformedTargetRegressor
        from sklearn.linear_model import Lasso, Ridge

        if model == "linear":
            inner = Ridge(alpha=1.0 / c) if step.penalty == "l2" else Lasso(
                alpha=0.01 / c, max_iter=5000)
            pipeline = make_pipeline(TrainingRangeScaler(), inner)
        elif model == "poly2":
            from sklearn.preprocessing import PolynomialFeatures

            pipeline = make_pipeline(TrainingRangeScaler(), PolynomialFeatures(2),
                                     StandardScaler(), Ridge(alpha=1.0 / c))
        else:
            if kernel_mode == "nystroem":
                from sklearn.kernel_approximation import Nystroem

                pipeline = make_pipeline(
                    TrainingRangeScaler(),
                    Nystroem(kernel="rbf", n_components=_components(n_rows),
                             random_state=seed),
                    Ridge(alpha=1.0 / c))
            else:
                from sklearn.svm import SVR

                pipeline = make_pipeline(TrainingRangeScaler(), SVR(kernel="rbf", C=c,
                                                               gamma="scale"))
        # the target is standardized too, so the penalty means the same at any scale
        return TransformedTargetRegressor(regressor=pipeline, transformer=StandardScaler())
    if model == "linear":
        from sklearn.svm import LinearSVC

        inner = LinearSVC(C=c, penalty=step.penalty, dual=False, class_weight="balanced",
                          max_iter=5000)
    elif model == "logistic":
        from sklearn.linear_model import LogisticRegression

        if step.penalty == "l1":
            solver = "liblinear" if n_classes == 2 else "saga"
            inner = LogisticRegression(C=c, l1_ratio=1.0, solver=solver,
                                       class_weight="balanced", max_iter=5000,
                                       random_state=seed)
        else:
            # liblinear is much quicker than lbfgs on the many small refits of the protocol
            solver = "liblinear" if n_classes == 2 else "lbfgs"
            inner = LogisticRegression(C=c, solver=solver, class_weight="balanced",
                                       max_iter=2000, random_state=seed)
    elif model == "lda":
        from sklearn.discriminant_analysis import LinearDiscriminantAnalysis

        inner = LinearDiscriminantAnalysis(solver="svd")
    elif kernel_mode == "nystroem":
        from sklearn.kernel_approximation import Nystroem
        from sklearn.svm import LinearSVC

        kernel = {"kernel": "rbf"} if model == "rbf" else {"kernel": "poly", "degree": 2,
                                                          "coef0": 1.0}
        return make_pipeline(
            TrainingRangeScaler(),
            Nystroem(n_components=_components(n_rows), random_state=seed,
                     **kernel),
            LinearSVC(C=c, dual=False, class_weight="balanced", max_iter=5000))
    else:
        from sklearn.svm import SVC

        if model == "rbf":
            inner = SVC(kernel="rbf", C=c, gamma="scale", class_weight="balanced")
        else:
            inner = SVC(kernel="poly", degree=2, coef0=1.0, C=c, gamma="scale",
                        class_weight="balanced")
    return make_pipeline(TrainingRangeScaler(), inner)


def _predict(model, X: np.ndarray) -> np.ndarray:
    """Predictions of a fitted pipeline (a two-class kernel machine through _decision)."""
    if _two_class_svc(model) is None:
        return _in_blocks(model, model.predict, X)
    last = model[-1]
    return last.classes_[(_decision(model, X) > 0).astype(np.int64)]


def _decision(model, X: np.ndarray) -> np.ndarray:
    """Decision values of a fitted pipeline.

    A two-class kernel machine is evaluated as K(rows, support vectors) @ dual coefficients
    + intercept with one matrix product: the same decision value the machine computes row by
    row, many times faster on the permutation test's repeated scoring.
    """
    last = _two_class_svc(model)
    if last is None:
        return np.asarray(_in_blocks(model, model.decision_function, X), dtype=np.float64)
    from sklearn.metrics.pairwise import pairwise_kernels

    scaled = model[0].transform(X)
    options = {"gamma": float(last._gamma)}
    if last.kernel == "poly":
        options.update(degree=last.degree, coef0=float(last.coef0))
    # in blocks, so the kernel matrix stays small on large tables
    out = np.empty(len(scaled))
    step = max(1, 20_000_000 // max(1, len(last.support_vectors_)))
    for start in range(0, len(scaled), step):
        block = pairwise_kernels(scaled[start:start + step], last.support_vectors_,
                                 metric=last.kernel, **options)
        out[start:start + step] = block @ last.dual_coef_[0] + last.intercept_[0]
    return out


def _in_blocks(model, function, X: np.ndarray) -> np.ndarray:
    """``function`` of the rows of ``X``, evaluated ``PREDICT_BLOCK_ROWS`` rows at a time when
    ``model`` makes Nystroem features (each row becomes up to 1000 of them); at once else."""
    if len(X) <= PREDICT_BLOCK_ROWS or not _makes_nystroem_features(model):
        return function(X)
    return np.concatenate([function(X[start:start + PREDICT_BLOCK_ROWS])
                           for start in range(0, len(X), PREDICT_BLOCK_ROWS)])


def _makes_nystroem_features(model) -> bool:
    pipeline = getattr(model, "regressor_", model)
    return any(type(part).__name__ == "Nystroem"
               for _, part in getattr(pipeline, "steps", ()))


def _two_class_svc(model):
    steps = getattr(model, "steps", None)
    if steps is None or len(steps) != 2:
        return None
    last = steps[-1][1]
    if type(last).__name__ != "SVC" or len(last.classes_) != 2:
        return None
    return last


# Features whose values are the table's own numbers (or sums of them): an equation in them
# is checked exactly whenever the values are integers or short decimals.
_TABLE_VALUED_KINDS = ("value", "flag", "onehot", "flat", "sorted", "row_sums", "column_sums")


def _exact_flags(fm) -> tuple[bool, ...]:
    """Per feature: may the equation search treat it as exact? Integer features always;
    decimals from the table when they are short (the search checks); never derived floats
    such as singular values, eigenvalues or the signed log."""
    return tuple(bool(exact or feature.kind in _TABLE_VALUED_KINDS)
                 for exact, feature in zip(fm.exact_columns, fm.features))


def _components(rows: int) -> int:
    """Nystroem components for a fit on ``rows`` rows: a quarter of them, 50 to 1000."""
    return int(min(NYSTROEM_COMPONENTS, rows, max(50, rows // 4)))


def _raw_hyperplanes(pipeline) -> tuple[np.ndarray, np.ndarray]:
    """Hyperplanes of a scaler + linear model in the table's own units.

    With z = (x - mean) / scale, w.z + b = (w / scale).x + (b - (w / scale).mean).
    For two classes, one row: positive decision means class code 1.
    """
    scaler, model = pipeline[0], pipeline[-1]
    weights = np.atleast_2d(np.asarray(model.coef_, dtype=np.float64)) / scaler.scale_
    intercepts = np.atleast_1d(np.asarray(model.intercept_, dtype=np.float64)) \
        - weights @ scaler.mean_
    return weights, intercepts


def _left_side(equation, X: np.ndarray, names: list[str]) -> np.ndarray:
    """The equation's left side minus its constant on every row, signed so that a row is
    predicted positive exactly when the value is >= 0."""
    position = {name: j for j, name in enumerate(names)}
    total = np.zeros(len(X))
    for term in equation.terms:
        column = np.ones(len(X))
        for factor in term.factor_names():
            column = column * X[:, position[factor]]
        total = total + float(term.coef) * column
    total = total - float(equation.constant)
    return -total if equation.relation == "<=" else total


# ----------------------------------------------------------------------------------------
# Splits


def _splits(n: int, strata: np.ndarray | None, groups: np.ndarray | None, fraction: float,
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


def _subsample(rows: np.ndarray, strata: np.ndarray | None, size: int, seed: int, *,
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


def _share_sample(rows: np.ndarray, strata: np.ndarray | None, size: int,
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


def _identical_across(X: np.ndarray, train: np.ndarray, test: np.ndarray) -> int:
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
# Metrics


def _confusion(actual: np.ndarray, predicted: np.ndarray, k: int) -> np.ndarray:
    """Counts: rows are the actual class, columns the predicted class."""
    return np.bincount(np.asarray(actual, dtype=np.int64) * k
                       + np.asarray(predicted, dtype=np.int64),
                       minlength=k * k).reshape(k, k)


def _mcc_from_counts(counts: np.ndarray) -> np.ndarray:
    """Matthews correlation from confusion matrices (any number of classes, batched).

    With c correct, s rows, t_k actual and p_k predicted counts:
    (c s - sum p_k t_k) / sqrt((s^2 - sum p_k^2)(s^2 - sum t_k^2)), and 0 when undefined.
    """
    counts = np.asarray(counts, dtype=np.float64)
    actual = counts.sum(axis=-1)
    predicted = counts.sum(axis=-2)
    correct = np.trace(counts, axis1=-2, axis2=-1)
    total = actual.sum(axis=-1)
    top = correct * total - np.sum(predicted * actual, axis=-1)
    bottom = (total**2 - np.sum(predicted**2, axis=-1)) * (total**2 - np.sum(actual**2, axis=-1))
    with np.errstate(invalid="ignore", divide="ignore"):
        value = np.where(bottom > 0, top / np.sqrt(np.where(bottom > 0, bottom, 1.0)), 0.0)
    return value


def _balanced_accuracy(counts: np.ndarray) -> float:
    actual = counts.sum(axis=1)
    present = actual > 0
    return float(np.mean(np.diag(counts)[present] / actual[present]))


def _mcc_interval(counts: np.ndarray, resamples: int, seed: int) -> tuple[float, float]:
    """Percentile bootstrap interval of the Matthews correlation over the test rows.

    Resampling the test rows with replacement gives multinomial counts over the confusion
    matrix's cells, so the resamples are drawn as counts directly.
    """
    total = int(counts.sum())
    rng = np.random.default_rng([seed, 2])
    draws = rng.multinomial(total, counts.ravel() / total, size=resamples)
    values = _mcc_from_counts(draws.reshape(resamples, *counts.shape))
    tail = (1 - INTERVAL_LEVEL) / 2 * 100
    low, high = np.percentile(values, [tail, 100 - tail])
    return float(low), float(high)


def _r2(actual: np.ndarray, predicted: np.ndarray) -> float:
    residual = float(np.sum((actual - predicted) ** 2))
    spread = float(np.sum((actual - np.mean(actual)) ** 2))
    if spread == 0:
        return 1.0 if residual == 0 else 0.0
    return 1 - residual / spread


def _r2_interval(actual, predicted, resamples: int, seed: int) -> tuple[float, float]:
    rng = np.random.default_rng([seed, 4])
    n = len(actual)
    values = np.empty(resamples)
    chunk = max(1, 2_000_000 // max(n, 1))
    for start in range(0, resamples, chunk):
        stop = min(resamples, start + chunk)
        picks = rng.integers(0, n, size=(stop - start, n))
        a, p = actual[picks], predicted[picks]
        residual = np.sum((a - p) ** 2, axis=1)
        spread = np.sum((a - a.mean(axis=1, keepdims=True)) ** 2, axis=1)
        with np.errstate(invalid="ignore", divide="ignore"):
            values[start:stop] = np.where(spread > 0, 1 - residual / np.where(
                spread > 0, spread, 1.0), np.where(residual == 0, 1.0, 0.0))
    tail = (1 - INTERVAL_LEVEL) / 2 * 100
    low, high = np.percentile(values, [tail, 100 - tail])
    return float(low), float(high)


def _mean_of(splits: list[dict]) -> dict:
    keys = [k for k in splits[0] if k not in ("split", "train_rows", "test_rows")]
    return {k: float(np.mean([s[k] for s in splits])) for k in keys}


def _std_of(splits: list[dict]) -> dict:
    keys = [k for k in splits[0] if k not in ("split", "train_rows", "test_rows")]
    return {k: float(np.std([s[k] for s in splits])) for k in keys}


# ----------------------------------------------------------------------------------------
# Labels


def class_label(value):
    """A class label as a plain value: bool, int for whole numbers, else str."""
    if isinstance(value, (bool, np.bool_)):
        return bool(value)
    if isinstance(value, (int, np.integer)):
        return int(value)
    if isinstance(value, (float, np.floating)):
        return int(value) if float(value).is_integer() else float(value)
    return str(value)


def _count_labels(labels: np.ndarray, flags: np.ndarray | None = None) -> tuple[list, list[int]]:
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


# ----------------------------------------------------------------------------------------
# Augmentation


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


def _augment_column(table: Table, fm, groups: str | None) -> str:
    arrays = [c for c in fm.columns if table.column(c).role == "array"]
    if groups in arrays:
        return groups
    if not arrays:
        raise StepError(f"{table.name}: augment_permutations needs a matrix or list column "
                        "among the features; there is none. Set it to 0.")
    return arrays[0]


def _permuted_copies(table: Table, fm, column: str, copies: int, seed: int,
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
