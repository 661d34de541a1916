"""The overview step on Dask: column summaries from the facts of the typing pass
(:func:`analysis.overview.summary_from_facts`), strong correlations from one pass of pairwise
sums over every row."""

from __future__ import annotations

import numpy as np

from analysis.column_facts import marked_texts, typed_block
from analysis.distributed.common import Context, tree
from analysis.notes import Note
from analysis.overview import CORRELATION_ROWS as IN_MEMORY_CORRELATION_ROWS
from analysis.overview import (
    SECOND_HASH_KEY,
    OverviewResult,
    Repeats,
    correlation_columns,
    correlations_from_sums,
    pair_sums,
    repeats_among,
    row_fingerprints,
    strong_pairs,
    summary_from_facts,
    with_repeats,
)


def run_overview(step, ctx: Context) -> OverviewResult:
    """The overview result of a partitioned table (same fields as OverviewStep.run)."""
    table = ctx.table
    summaries = tuple(summary_from_facts(info, table.facts[info.name], table.n_rows)
                      for info in table.columns)
    correlations = _correlations(ctx, step.top_correlations)
    if table.n_rows > IN_MEMORY_CORRELATION_ROWS and correlations is not None:
        ctx.notes.append(Note("dask_correlations_exact", "correlations computed exactly over "
                              "all rows (the in-memory engine uses a sample of "
                              f"{IN_MEMORY_CORRELATION_ROWS} rows here).",
                              sample=IN_MEMORY_CORRELATION_ROWS))
    repeats = _repeats(ctx)
    return OverviewResult(
        table=table.name, digest=table.digest, rows=table.n_rows, columns=summaries,
        warnings=with_repeats(table.warnings, repeats), id_column=table.id_column,
        correlations=correlations or (), repeated_rows=repeats.count,
    )


def _repeats(ctx: Context) -> Repeats:
    """The rows equal to an earlier row, as the in-memory overview finds them: two
    fingerprints per row from one pass; a pair counts when both agree (the rows themselves
    stay in their partitions)."""
    from dask import delayed

    table = ctx.table
    if table.id_column is not None or table.n_rows < 2:
        return Repeats()
    dtypes = {c.name: c.dtype for c in table.columns}
    marked = [c.name for c in table.columns if c.intervals or c.markers]
    names = [c.name for c in table.columns]
    offsets = table.offsets
    pairs = ctx.compute([
        delayed(_fingerprints)(part, int(offsets[k]), table.conversions, dtypes, marked)
        for k, part in enumerate(table.frame[names].to_delayed())])
    first = np.concatenate([a for a, _ in pairs])
    second = np.concatenate([b for _, b in pairs])
    return repeats_among(first, lambda rows, firsts: second[rows] == second[firsts])


def _fingerprints(raw, offset: int, conversions, dtypes: dict, marked: list):
    typed = typed_block(raw, conversions)
    texts = {name: marked_texts(raw[name].tolist(), offset) for name in marked}
    return (row_fingerprints(typed, dtypes, texts, offset),
            row_fingerprints(typed, dtypes, texts, offset, hash_key=SECOND_HASH_KEY))


def _correlations(ctx: Context, top: int):
    table = ctx.table
    names = correlation_columns(table)
    if len(names) < 2 or top <= 0:
        return ()
    from dask import delayed

    shift = np.array([table.facts[n]["total"] / max(table.facts[n]["count"], 1)
                      for n in names])
    parts = table.typed_partitions(names)
    pieces = [delayed(_pair_sums)(part, names, shift) for part in parts]
    sums = ctx.compute(tree(pieces, _add_sums))
    return strong_pairs(correlations_from_sums(*sums), names, top)


def _pair_sums(frame, names: list[str], shift: np.ndarray):
    values = np.column_stack([frame[n].to_numpy(dtype=np.float64, na_value=np.nan)
                              for n in names]) - shift
    return pair_sums(values)


def _add_sums(a, b):
    return tuple(x + y for x, y in zip(a, b))
