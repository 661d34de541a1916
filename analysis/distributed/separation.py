"""The separator step on Dask: the protocol on a sample, the equation settled on every row.

The validation protocol (splits, metrics against the majority-class baseline, bootstrap
interval, permutation test, learning curve) and the search for a readable equation run in
memory, with the same code as the in-memory step, on a uniform random sample of rows drawn
across all partitions. The equation the search finds is then settled on the whole table:
its constant is chosen again from the exact scores of every row (counts per distinct score,
summed over partitions), and each partition is checked row by row with the equation's own
exact evaluation (:meth:`analysis.equations.LinearEquation.holds`), so the violations and
violating rows are those of the whole table. A formula for a numeric target is settled the
same way (its constant is the most common exact residual over all rows).
"""

from __future__ import annotations

import dataclasses
import math
import time
from fractions import Fraction

import numpy as np

from analysis.distributed.common import Context, blocks_for, plan_for, tree
from analysis.equations import (
    SCOPE_NOTES,
    cut_of_counts,
    gap_note,
    rounding_note,
    sample_wording,
    settled_constant,
)
from analysis.errors import StepError
from analysis.notes import note_code

# Rows of the sample the protocol runs on (uniform across partitions).
SAMPLE_ROWS = 100_000
# Distinct scores counted across partitions when settling a constant; past this the
# constant found on the sample is kept (and the violations still counted on every row).
MAX_DISTINCT_SCORES = 5_000_000
_INT64_SAFE = 2**62


def run_separator(step, ctx: Context):
    """A SeparatorResult: protocol on a sample, equations settled on every row."""
    from analysis.distributed.source import sample_table

    started = time.perf_counter()
    table = ctx.table
    if not step.target:
        raise StepError(f"{table.name}: the separator needs a target column; name one with "
                        "target (--target COL on the command line).")
    if step.augment_permutations:
        raise StepError(f"{table.name}: augment_permutations needs matrix columns, which the "
                        "dask engine does not encode; set it to 0 or use --engine local.")
    from analysis.separation import excluded_columns

    plan = plan_for(ctx, columns=step.columns, target=step.target,
                    array_encoding=step.array_encoding, log_scale=step.log_scale,
                    missing=step.missing, exclude=excluded_columns(table, step))
    size = min(table.n_rows, SAMPLE_ROWS)
    sample, positions = sample_table(table, ctx.client, size, seed=step.seed)
    result = step.run(sample)
    if len(positions) < table.n_rows:
        ctx.notes.append(
            f"the validation protocol (splits, metrics, interval, permutation test, learning "
            f"curve) ran on a uniform random sample of {len(positions)} of the {table.n_rows} "
            f"rows (seed {step.seed}), drawn across all {table.npartitions} partitions; the "
            "test rows are rows of that sample.")
    blocks = blocks_for(ctx, plan)
    changes: dict = {}
    if result.equation is not None:
        changes["equation"] = settle_equation(ctx, plan, blocks, result.equation)
    if result.equations:
        changes["equations"] = tuple(settle_equation(ctx, plan, blocks, e)
                                     for e in result.equations)
    if result.formula is not None:
        changes["formula"] = settle_formula(ctx, plan, blocks, result.formula)
    if result.surrogate is not None:
        ctx.notes.append("the quadratic surrogate of the kernel machine was fitted and checked "
                         "on the sample only.")
    if result.decision is not None:
        decision = result.decision
        changes["decision"] = dataclasses.replace(decision, rows=positions[decision.rows])
        ctx.notes.append("decision scores (for figures) are those of the sample rows.")
    return dataclasses.replace(result, **changes,
                               elapsed_seconds=time.perf_counter() - started)


# ----------------------------------------------------------------------------------------
# Scores of an equation's left side, per partition


def _columns_of(block, names: list[str]) -> dict:
    return {name: block.values[:, j] for j, name in enumerate(names)}


def _positive(block, positive_class) -> np.ndarray:
    from analysis.separation import class_label, same_label

    want = class_label(positive_class)
    return np.array([same_label(class_label(v), want) for v in block.target], dtype=bool)


def exact_scores(terms, columns: dict, exact: bool):
    """(scores, denominator): the left side times ``denominator``, exact integers when
    ``exact`` (Python integers past int64), else floats with denominator 1."""
    n = len(next(iter(columns.values()))) if columns else 0
    if not exact:
        total = np.zeros(n)
        for term in terms:
            value = np.ones(n)
            for name in term.factor_names():
                value = value * columns[name]
            total += float(term.coef) * value
        return total, 1
    denominator = 1
    for term in terms:
        denominator = math.lcm(denominator, Fraction(term.coef).denominator)
    ints = {name: np.rint(columns[name]).astype(np.int64) for t in terms
            for name in t.factor_names()}
    bound = 0
    for term in terms:
        size = abs(int(Fraction(term.coef) * denominator))
        for name in term.factor_names():
            size *= int(np.abs(ints[name]).max()) if n else 0
        bound += size
    big = bound >= _INT64_SAFE
    total = np.zeros(n, dtype=object if big else np.int64)
    for term in terms:
        multiplier = int(Fraction(term.coef) * denominator)
        value = np.full(n, multiplier, dtype=object if big else np.int64)
        for name in term.factor_names():
            value = value * (ints[name].astype(object) if big else ints[name])
        total = total + value
    return total, denominator


def _score_counts(block, names, terms, exact, positive_class):
    """Distinct scores of one partition with the rows and positive rows at each."""
    scores, _ = exact_scores(terms, _columns_of(block, names), exact)
    positive = _positive(block, positive_class)
    if scores.dtype == object:
        scores = np.array(scores.tolist(), dtype=object)
    values, inverse = np.unique(scores, return_inverse=True)
    rows_at = np.bincount(inverse, minlength=len(values))
    positives_at = np.bincount(inverse, weights=positive, minlength=len(values)).astype(np.int64)
    return values, rows_at, positives_at


def _merge_counts(a, b):
    if a is None or b is None:
        return None
    values = np.concatenate([a[0], b[0]])
    merged, inverse = np.unique(values, return_inverse=True)
    if len(merged) > MAX_DISTINCT_SCORES:
        return None
    rows_at = np.bincount(inverse, weights=np.concatenate([a[1], b[1]]),
                          minlength=len(merged)).astype(np.int64)
    positives_at = np.bincount(inverse, weights=np.concatenate([a[2], b[2]]),
                               minlength=len(merged)).astype(np.int64)
    return merged, rows_at, positives_at


def _wrong_rows(block, names, equation):
    """Ids of the rows of one partition where the equation's prediction is wrong."""
    predicted = equation.holds(_columns_of(block, names))
    positive = _positive(block, equation.positive_class)
    wrong = predicted != positive
    return block.row_ids[wrong], block.positions[wrong]


def settle_equation(ctx: Context, plan, blocks: list, equation):
    """The equation with its constant chosen on every row and its violations counted there."""
    from dask import delayed


    names = plan.names
    missing = [n for t in equation.terms for n in t.factor_names() if n not in names]
    if missing:
        ctx.notes.append(f"the equation uses {', '.join(sorted(set(missing)))}, not features "
                         "of the whole table; it was checked on the sample only.")
        return equation
    exact_flags = dict(zip(names, plan.exact_columns))
    exact = equation.exact and all(exact_flags[n] for t in equation.terms
                                   for n in t.factor_names())
    counts = ctx.compute(tree([delayed(_score_counts)(b, names, equation.terms, exact,
                                                      equation.positive_class)
                               for b in blocks], _merge_counts))
    settled = equation
    gap = None
    rounded = False
    notes = list(equation.notes)
    if counts is not None:
        cut = cut_of_counts(*counts)
        if cut is not None:
            fewest, relation, low, high, _ = cut
            denominator = exact_scores(equation.terms, {n: np.zeros(1) for n in names},
                                       exact)[1]
            # the in-memory search's own rule, rounding included
            constant, rounded = settled_constant(counts, fewest, relation, low, high,
                                                 denominator, exact)
            gap = gap_note(Fraction(low) / denominator, Fraction(high) / denominator,
                           relation, exact)
            settled = dataclasses.replace(equation, relation=relation, constant=constant)
            if (relation, constant) != (equation.relation, equation.constant):
                notes.append(f"constant chosen again on all rows: the sample gave "
                             f"{equation.relation} {equation.constant}")
    else:
        notes.append("too many distinct scores to choose the constant across partitions: "
                     "the constant found on the sample is kept")
    pieces = ctx.compute([delayed(_wrong_rows)(b, names, settled) for b in blocks])
    # (ids, positions) of the violating rows of each partition
    ids = np.concatenate([p[0] for p in pieces]) if pieces else np.array([])
    kept = int(counts[1].sum()) if counts is not None else ctx.table.n_rows
    if rounded:
        gap = rounding_note(settled.constant, int(len(ids)), fewest)
    # the search's own notes of where it ran and which constants it allowed give way to
    # those of every row; the others are said of the sample
    notes = [sample_wording(n) for n in notes if note_code(n) not in SCOPE_NOTES]
    notes.insert(0, f"searched on a sample; threshold chosen and verified on all {kept} rows "
                    "across partitions")
    if gap is not None:
        notes.insert(1, gap)
    return dataclasses.replace(settled, violations=int(len(ids)), violating_rows=tuple(
        ids.tolist()), n_rows=kept, notes=tuple(notes))


# ----------------------------------------------------------------------------------------
# Formulas for a numeric target


def _residual_counts(block, names, formula, exact):
    columns = _columns_of(block, names)
    scores, denominator = exact_scores(formula.terms, columns, exact)
    if exact:
        target = np.rint(block.target).astype(np.int64)
        residual = target * denominator - scores if scores.dtype != object else \
            np.array([int(t) * denominator - int(s) for t, s in zip(target, scores)], dtype=object)
        values, counts = np.unique(residual, return_counts=True)
        return values, counts
    residual = block.target - scores - float(formula.constant)
    tolerance = 1e-9 * np.maximum(1.0, np.abs(block.target))
    off = np.abs(residual) > tolerance
    return int(off.sum()), float(np.abs(residual).max(initial=0.0))


def _merge_residuals(a, b):
    if isinstance(a[0], int):
        return a[0] + b[0], max(a[1], b[1])
    values = np.concatenate([a[0], b[0]])
    merged, inverse = np.unique(values, return_inverse=True)
    counts = np.bincount(inverse, weights=np.concatenate([a[1], b[1]]),
                         minlength=len(merged)).astype(np.int64)
    return merged, counts


def _off_rows(block, names, formula, exact, mode, denominator):
    columns = _columns_of(block, names)
    scores, _ = exact_scores(formula.terms, columns, exact)
    if exact:
        target = np.rint(block.target).astype(np.int64)
        residual = np.array([int(t) * denominator - int(s) for t, s in zip(target, scores)],
                            dtype=object) if scores.dtype == object else \
            target * denominator - scores
        off = np.asarray(residual != mode, dtype=bool)
    else:
        residual = block.target - scores - float(formula.constant)
        off = np.abs(residual) > 1e-9 * np.maximum(1.0, np.abs(block.target))
    return block.row_ids[off]


def settle_formula(ctx: Context, plan, blocks: list, formula):
    """The formula with its constant (the most common exact residual) taken over every row."""
    from dask import delayed

    names = plan.names
    if any(t.feature not in names for t in formula.terms):
        ctx.notes.append("the formula uses features the whole table does not have; it was "
                         "checked on the sample only.")
        return formula
    exact_flags = dict(zip(names, plan.exact_columns))
    info = ctx.table.column(formula.target)
    exact = formula.exact and info.dtype == "integer" and all(
        exact_flags[t.feature] for t in formula.terms)
    merged = ctx.compute(tree([delayed(_residual_counts)(b, names, formula, exact)
                               for b in blocks], _merge_residuals))
    denominator = exact_scores(formula.terms, {n: np.zeros(1) for n in names}, exact)[1]
    if exact:
        values, counts = merged
        mode = values[int(np.argmax(counts))]
        mode = mode.item() if hasattr(mode, "item") else mode
        constant = Fraction(int(mode), denominator)
        kept = int(counts.sum())
        largest = max(abs(int(values[0]) - mode), abs(int(values[-1]) - mode))
        max_residual = float(Fraction(largest, denominator))
    else:
        constant, mode = formula.constant, None
        kept = None
        max_residual = merged[1]
    ids = np.concatenate(ctx.compute([delayed(_off_rows)(b, names, formula, exact, mode,
                                                         denominator) for b in blocks]))
    if kept is None:
        kept = ctx.table.n_rows
    notes = [n for n in formula.notes if note_code(n) not in SCOPE_NOTES]
    notes.insert(0, f"fitted on a sample; constant and rows off taken over all {kept} rows "
                    "across partitions" if exact else
                 f"fitted on a sample; rows off counted over all {kept} rows across partitions")
    return dataclasses.replace(formula, constant=constant, rows_off=int(len(ids)),
                               off_rows=tuple(ids.tolist()), n_rows=kept,
                               max_residual=max_residual, notes=tuple(notes))
