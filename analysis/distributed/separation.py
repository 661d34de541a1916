"""The separator step on Dask: the protocol on a sample, equations settled on every row.

The protocol and the search run in memory on a uniform sample; an equation's constant is
chosen again from the exact scores of every row (counted per partition and merged) and its
violations counted row by row; a formula's constant is the most common exact residual.
"""

from __future__ import annotations

import dataclasses
import functools
import time
from fractions import Fraction

import numpy as np

from analysis.distributed.common import Context, blocks_for, on_sample, plan_for, tree
from analysis.equations import (
    SCOPE_NOTES,
    Term,
    common_residual,
    gap_note,
    merge_score_counts,
    off_in_floats,
    over_denominator,
    rounding_note,
    sample_wording,
    score_counts,
    settle_cut,
    term_scores,
)
from analysis.errors import StepError
from analysis.notes import Note, note_code
from analysis.separation import excluded_columns, positive_rows

# Rows of the sample the protocol runs on (uniform across partitions).
SAMPLE_ROWS = 100_000
# Distinct scores counted across partitions when settling a constant; past this the
# constant found on the sample is kept (and the violations still counted on every row).
MAX_DISTINCT_SCORES = 5_000_000


def run_separator(step, ctx: Context):
    """A SeparatorResult: protocol on a sample, equations settled on every row."""
    started = time.perf_counter()
    if step.target_statement is not None:
        from analysis.derived import Statement
        from analysis.distributed.source import with_breaks_flag

        # the in-memory step's derived target, its flag computed partition by partition
        step.check()
        statement = Statement.from_json(step.target_statement)
        ctx = dataclasses.replace(ctx, table=with_breaks_flag(ctx.table, ctx.client, statement))
        step = dataclasses.replace(step, target=statement.flag_name)
    table = ctx.table
    step.check_table(table)
    if step.augment_permutations:
        raise StepError(f"{table.name}: augment_permutations needs matrix columns, which the "
                        "dask engine does not encode; set it to 0 or use --engine local.")
    plan = plan_for(ctx, step, target=step.target, exclude=excluded_columns(table, step))
    result, positions = on_sample(step, ctx, min(table.n_rows, SAMPLE_ROWS))
    if len(positions) < table.n_rows:
        ctx.notes.append(Note("dask_protocol_sample",
            f"the validation protocol (splits, metrics, interval, permutation test, learning "
            f"curve) ran on a uniform random sample of {len(positions)} of the {table.n_rows} "
            f"rows (seed {step.seed}), drawn across "
            + (f"all {table.npartitions} partitions" if table.npartitions != 1
               else "the table's one partition") + "; the test rows are rows of that sample."))
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
        ctx.notes.append(Note(
            "dask_surrogate_sample",
            "the quadratic surrogate of the kernel machine was fitted and checked "
            "on the sample only."))
    if result.decision is not None:
        decision = result.decision
        changes["decision"] = dataclasses.replace(decision, rows=positions[decision.rows])
        ctx.notes.append(Note(
            "dask_sample_scores",
            "decision scores (for figures) are those of the sample rows."))
    return dataclasses.replace(result, **changes,
                               elapsed_seconds=time.perf_counter() - started)


# ----------------------------------------------------------------------------------------
# Scores counted per partition with the in-memory rules (equations.term_scores, score_counts)


def _columns_of(block, names: list[str]) -> dict:
    return {name: block.values[:, j] for j, name in enumerate(names)}


def _counts(block, names, terms, exact, positive_class=None):
    """(distinct scores, rows at each, positive rows at each, denominator or None for float
    scores) of one partition: the left side of ``terms`` as the in-memory search scores it."""
    columns = _columns_of(block, names)
    if positive_class is None:   # a formula: ``terms`` include the target, whose values these are
        columns[terms[0].feature] = np.asarray(block.target, dtype=float)
    values, is_exact = term_scores(terms, columns)
    scores, denominator = values if is_exact else (values, None)
    if denominator is not None and not exact:
        scores, denominator = np.asarray(scores, dtype=float) / denominator, None
    positive = np.zeros(len(scores), dtype=bool) if positive_class is None \
        else positive_rows(block.target, positive_class)
    return (*score_counts(scores, positive), denominator)


# Counts of two partitions merged over their common denominator (equations' own merge)
_merge_counts = functools.partial(merge_score_counts, max_distinct=MAX_DISTINCT_SCORES)


def _wrong_rows(block, names, equation):
    """Ids of the rows of one partition where the equation's prediction is wrong."""
    wrong = equation.holds(_columns_of(block, names)) != positive_rows(
        block.target, equation.positive_class)
    return block.row_ids[wrong]


def _lacks(ctx, plan, names, what) -> bool:
    missing = sorted({n for n in names if n not in plan.names})
    if missing:
        ctx.notes.append(Note(
            "dask_checked_on_sample",
            f"the {what} uses {', '.join(missing)}, not features of the whole "
            "table; it was checked on the sample only."))
    return bool(missing)


def settle_equation(ctx: Context, plan, blocks: list, equation):
    """The equation with its constant chosen on every row and its violations counted there."""
    from dask import delayed

    names = plan.names
    if _lacks(ctx, plan, [n for t in equation.terms for n in t.factor_names()], "equation"):
        return equation
    counts = ctx.compute(tree([delayed(_counts)(b, names, equation.terms, equation.exact,
                                                equation.positive_class)
                               for b in blocks], _merge_counts))
    settled, gap, notes = equation, None, list(equation.notes)
    # the in-memory search's own rule, rounding included
    cut = None if counts is None else settle_cut(counts[:3], counts[3] or 1,
                                                 counts[3] is not None)
    if cut is not None:
        gap = gap_note(cut.low, cut.high, cut.relation, counts[3] is not None)
        settled = dataclasses.replace(equation, relation=cut.relation, constant=cut.constant)
        if (cut.relation, cut.constant) != (equation.relation, equation.constant):
            notes.append(Note(
                "dask_constant_again",
                f"constant chosen again on all rows: the sample gave "
                f"{equation.relation} {equation.constant}"))
    elif counts is None:
        notes.append(Note(
            "dask_constant_kept",
            "too many distinct scores to choose the constant across partitions: "
            "the constant found on the sample is kept"))
    ids = np.concatenate(ctx.compute([delayed(_wrong_rows)(b, names, settled) for b in blocks]))
    kept = int(counts[1].sum()) if counts is not None else ctx.table.n_rows
    if cut is not None and cut.rounded:
        gap = rounding_note(settled.constant, int(len(ids)), cut.fewest)
    # the search's own notes of where it ran and which constants it allowed give way to
    # those of every row; the others are said of the sample
    notes = [sample_wording(n) for n in notes if note_code(n) not in SCOPE_NOTES]
    notes.insert(0, f"searched on a sample; threshold chosen and verified on all {kept} rows "
                    "across partitions")
    if gap is not None:
        notes.insert(1, gap)
    # the positive class counted on every row, as in memory (None when not counted there)
    positives = None if counts is None or equation.positives is None \
        else int(counts[2].sum())
    return dataclasses.replace(settled, violations=int(len(ids)), violating_rows=tuple(
        ids.tolist()), n_rows=kept, notes=tuple(notes), positives=positives)


# ----------------------------------------------------------------------------------------
# Formulas for a numeric target


def _residual_terms(formula) -> tuple:
    """target - sum(coef * feature) as terms, so that residuals are scored like equations."""
    return (Term(formula.target, Fraction(1)),
            *(Term(t.feature, -Fraction(t.coef), t.factors) for t in formula.terms))


def _off_rows(block, names, terms, exact, mode, common, constant):
    columns = _columns_of(block, names)
    columns[terms[0].feature] = np.asarray(block.target, dtype=float)
    values, is_exact = term_scores(terms, columns)
    if exact and is_exact and common is not None:
        off = np.asarray(over_denominator(values[0], values[1], common) != mode,
                         dtype=bool)
        return block.row_ids[off], 0.0
    residual = (np.asarray(values[0], dtype=float) / values[1] if is_exact else values) \
        - float(constant)
    off = off_in_floats(residual, np.asarray(block.target, dtype=float))
    return block.row_ids[off], float(np.abs(residual).max(initial=0.0))


def settle_formula(ctx: Context, plan, blocks: list, formula):
    """The formula with its constant (the most common exact residual) taken over every row."""
    from dask import delayed

    names = plan.names
    if _lacks(ctx, plan, [t.feature for t in formula.terms], "formula"):
        return formula
    exact = formula.exact and ctx.table.column(formula.target).dtype == "integer"
    terms = _residual_terms(formula)
    merged = ctx.compute(tree([delayed(_counts)(b, names, terms, exact) for b in blocks],
                              _merge_counts))
    constant, mode, common = formula.constant, None, None
    max_residual, kept = formula.max_residual, ctx.table.n_rows
    if exact and merged is not None and merged[3] is not None:
        values, counts, _, common = merged
        mode, constant, max_residual = common_residual(values, counts, common)
        kept = int(counts.sum())
    else:
        exact = False
    pieces = ctx.compute([delayed(_off_rows)(b, names, terms, exact, mode, common, constant)
                          for b in blocks])
    ids = np.concatenate([p[0] for p in pieces])
    if not exact:
        max_residual = max(p[1] for p in pieces)
    notes = [n for n in formula.notes if note_code(n) not in SCOPE_NOTES]
    notes.insert(0, f"fitted on a sample; constant and rows off taken over all {kept} rows "
                    "across partitions" if exact else
                 f"fitted on a sample; rows off counted over all {kept} rows across partitions")
    return dataclasses.replace(formula, constant=constant, rows_off=int(len(ids)),
                               off_rows=tuple(ids.tolist()), n_rows=kept,
                               max_residual=max_residual, notes=tuple(notes))
