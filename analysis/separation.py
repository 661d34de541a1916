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
import time
from dataclasses import dataclass
from typing import ClassVar

import numpy as np

from analysis.errors import StepError
from analysis.notes import note_code
from analysis.plain import plain, row_id
from analysis.progress import quiet
from analysis.reading import CURVE_MAX_VALUES, CURVE_MIN_VALUES
from analysis.separator_checks import LEARNING_FRACTIONS, LEARNING_REPEATS
from analysis.separator_equation import constant_rule_sentence
from analysis.separator_labels import class_label, positive_rows, same_label
from analysis.separator_metrics import (
    BOOTSTRAP_RESAMPLES,
    CHANCE_LEVEL,
    CLASS_RULE,
    INTERVAL_LEVEL,
    MISPREDICTED_LIMIT,
    REGRESSION_RULE,
    below_baseline_text,
)
from analysis.separator_models import (
    MODEL_WORDS,
    MODELS,
    NYSTROEM_COMPONENTS,
    NYSTROEM_FIT_ROWS,
    PREDICT_BLOCK_ROWS,
    REGRESSION_WORDS,
)
from analysis.separator_prepare import LEAKAGE_SAMPLE_ROWS
from analysis.separator_protocol import (
    KERNEL_CURVE_ROWS,
    KERNEL_PERMUTATION_ROWS,
    KERNEL_PERMUTATION_TEST_ROWS,
    LARGE_PERMUTATION_ROWS,
    excluded_columns,
)
from analysis.separator_run import OPEN_PREDICTION_LIMIT, ROW_ID_LIST_LIMIT, run_protocol
from analysis.settings import FEATURE_SETTINGS, SEED, Choice, Setting, check_values, named
from analysis.table import Table

# The step's public face. The parts of a run live in their own modules: separator_prepare
# (features, target, groups, copies), separator_protocol (splits, samples, workers),
# separator_models (pipelines, kernel method, predictions), separator_metrics (scores and
# reports), separator_checks (permutation test, learning curve, importance),
# separator_equation (the exact equation) and separator_run (the protocol from end to end).
__all__ = [
    "BOOTSTRAP_RESAMPLES", "CHANCE_LEVEL", "CLASS_RULE", "INTERVAL_LEVEL",
    "KERNEL_APPROXIMATIONS", "KERNEL_CURVE_ROWS", "KERNEL_PERMUTATION_ROWS",
    "KERNEL_PERMUTATION_TEST_ROWS", "LARGE_PERMUTATION_ROWS", "LEAKAGE_SAMPLE_ROWS",
    "LEARNING_FRACTIONS", "LEARNING_REPEATS", "MISPREDICTED_LIMIT", "MODELS", "MODEL_WORDS",
    "NYSTROEM_COMPONENTS", "NYSTROEM_FIT_ROWS", "OPEN_PREDICTION_LIMIT", "PENALTIES",
    "PREDICT_BLOCK_ROWS", "READINGS", "REGRESSION_RULE", "REGRESSION_WORDS",
    "ROW_ID_LIST_LIMIT", "DecisionScores", "SeparatorResult", "SeparatorStep", "class_label",
    "exact_text", "excluded_columns", "positive_rows", "same_label",
]

SETTINGS = (
    Setting("target", follows_target=True, label="Target for this step", option="--target",
            metavar="COL",
            help="The flag, category or invariant to predict."),
    Setting("reading", label="Read the target as", option="--reading",
            help="A whole-number invariant can be predicted as a number or each value as a "
                 "class.",
            option_help="an invariant target as a number or as classes (default auto: for "
                        f"{CURVE_MIN_VALUES} to {CURVE_MAX_VALUES} whole-number values a "
                        "learning curve decides)",
            choices=(Choice("auto", "as a learning curve favours"),
                     Choice("number", "a number (regression)"),
                     Choice("classes", "classes, one per value"))),
    Setting("model", label="Separator", option="--model",
            help="Linear models and the degree-2 kernel give an equation in the table's own "
                 "invariants. A target read as a number is fitted by the regression named "
                 "after the semicolon.",
            choices=tuple(Choice(model, words) for model, words in MODEL_WORDS.items())),
    Setting("train_fraction", minimum=0.05, maximum=0.95, page_step=0.05,
            spoken="train fraction", label="Share of rows for training",
            advice="use a number from 0.05 to 0.95 (the share of rows used for training)",
            help="The rest are test rows: every score is measured on them.",
            option="--train-fraction", metavar="F"),
    Setting("groups", label="Group column", option="--groups", metavar="COL",
            help="Rows with equal values (equal matrices up to permuting rows and columns, for "
                 "an array column) stay on one side of every split.",
            option_help="rows with the same value (or the same matrix up to permutation, for "
                        "an array column) stay on one side of a split"),
    *FEATURE_SETTINGS,
    Setting("penalty", label="Penalty", advice="use l2, or l1 for equations with few terms",
            choices=(Choice("l2", "l2 (all features)"),
                     Choice("l1", "l1 (few features, shorter equations)"))),
    Setting("c", minimum=0, above=True, page_minimum=1e-4, page_maximum=1e4, page_step=0.5,
            label="C (inverse regularization)",
            advice="use a positive number (the support vector machine's C; larger fits the "
                   "training rows more tightly)"),
    Setting("repeats", minimum=1, page_maximum=50, label="Random splits",
            help="Scores are averaged over this many splits."),
    Setting("permutations", minimum=0, page_maximum=5000, label="Permutations",
            help="Shuffled targets for the p-value (0 skips the test)."),
    Setting("positive_class", label="Class the equation describes"),
    Setting("augment_permutations", minimum=0, page_maximum=50,
            label="Permuted copies per training matrix",
            help="Adds copies of each training row with its matrix's rows and columns permuted "
                 "(never to test rows)."),
    Setting("kernel_approximation", spoken="kernel approximation",
            label="Kernel on large tables",
            choices=(Choice("exact", "exact (refuse past the row limit)"),
                     Choice("auto", "automatic"), Choice("nystroem", "Nyström features"),
                     Choice("sample", "exact machine on a sample"))),
    Setting("kernel_row_limit", minimum=100),
    Setting("large_table_rows", minimum=100),
    Setting("sample_rows", minimum=100),
    Setting("max_terms", minimum=1, label="Most terms in the equation (0: default)"),
    Setting("max_denominator", minimum=1, label="Largest denominator (0: default)"),
    SEED,
)
PENALTIES = named(SETTINGS)["penalty"].values
KERNEL_APPROXIMATIONS = named(SETTINGS)["kernel_approximation"].values
READINGS = named(SETTINGS)["reading"].values


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
        lines += [f"  {_rows_text(self)}; split 1 has {self.train_rows} training and "
                  f"{self.test_rows} test rows ({self.split_method})"]
        m, b = self.metrics, self.baseline
        if self.task == "classification":
            lines.append(f"  accuracy {m['accuracy']:.3f} (majority-class baseline "
                         f"{b['accuracy']:.3f}), balanced accuracy "
                         f"{m['balanced_accuracy']:.3f}")
            below = below_baseline_text(m, b)
            if below:
                lines.append(f"  note: {below}")
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


def _rows_text(result: SeparatorResult) -> str:
    """How many rows the step used, and of how many when some were dropped for a missing
    value (the rows_dropped note; a warning says so itself)."""
    dropped = next((n for n in result.notes if note_code(n) == "rows_dropped"), None)
    figures = getattr(dropped, "figures", None)
    if not figures:
        return f"{result.rows_used} rows"
    return (f"{result.rows_used} of {figures['rows']} rows ({figures['dropped']} with a "
            "missing value left out)")


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
    same = getattr(equation, "in_columns", "")
    rule = constant_rule_sentence(equation.positive_class, equation.n_rows,
                                  getattr(equation, "positives", None), count)
    return f" ({count} violating row{'s' if count != 1 else ''})" + (
        f", that is {same} in the column's own values" if same else "") + (
        f". {rule}" if rule else "")


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
    reading: how an invariant target is read: "auto" (a whole-number target of 3 to 50
        values is read as a number or as classes, whichever a learning curve favours
        (analysis/reading.py); otherwise by the table's rule, features.is_numeric_target),
        "number" (a regression; whole-number targets are also judged by the share predicted
        exactly) or "classes" (each value a class).
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
        step.check_table(table)
        fields = run_protocol(step, table, quiet(progress))
        decision = DecisionScores(**fields.pop("decision"))
        return SeparatorResult(**fields, decision=decision,
                               elapsed_seconds=time.perf_counter() - started)

    def check_table(self, table: Table) -> None:
        """Check the settings against the table (a target to predict, columns it has)."""
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
        check_values(self)
        if self.penalty == "l1" and self.model not in ("linear", "logistic"):
            raise StepError(f"penalty l1 applies to the linear and logistic models, not to "
                            f"{self.model!r}. Use penalty l2 or another model.")
        if self.target_statement is not None:
            from analysis.derived import Statement

            statement = Statement.from_json(self.target_statement)
            if self.target is not None and self.target != statement.flag_name:
                raise StepError(f"target {self.target!r} and target_statement "
                                f"{statement.text!r} both name a target; give one of them.")
