"""The overview step on Dask: column summaries from the facts of the typing pass, strong
correlations from one pass of pairwise sums over every row."""

from __future__ import annotations

import numpy as np

from analysis.column_facts import marked_texts, typed_block
from analysis.distributed.common import Context, tree
from analysis.notes import Note
from analysis.overview import CORRELATION_ROWS as IN_MEMORY_CORRELATION_ROWS
from analysis.overview import (
    SECOND_HASH_KEY,
    ColumnSummary,
    OverviewResult,
    Repeats,
    correlation_columns,
    correlations_from_sums,
    pair_sums,
    repeats_among,
    row_fingerprints,
    strong_pairs,
    with_repeats,
)


def run_overview(step, ctx: Context) -> OverviewResult:
    """The overview result of a partitioned table (same fields as OverviewStep.run)."""
    table = ctx.table
    summaries = tuple(_summarize(table, info) for info in table.columns)
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


def _summarize(table, info) -> ColumnSummary:
    facts = table.facts[info.name]
    base = dict(name=info.name, role=info.role, dtype=info.dtype, missing=info.missing,
                distinct=info.distinct, intervals=info.intervals,
                markers=tuple(info.markers.items()))
    kind = facts.get("kind")
    if info.dtype in ("integer", "real") and kind not in ("text", "list", None) \
            and facts.get("count"):
        lo, hi = facts["minimum"], facts["maximum"]
        if info.dtype == "integer":
            lo, hi = int(lo), int(hi)
        return ColumnSummary(**base, minimum=lo, maximum=hi,
                             mean=float(facts["total"] / facts["count"]))
    if info.dtype == "big integer" and facts.get("count"):
        return ColumnSummary(**base, minimum=str(facts["minimum"]), maximum=str(facts["maximum"]),
                             mean=float(facts["total"] / facts["count"]))
    marked = facts.get("marked") or {}
    if info.dtype == "rational" and marked.get("numbers"):
        # the exact smallest and largest cell, as the in-memory summary writes them
        return ColumnSummary(**base, minimum=_exact_text(marked["minimum"]),
                             maximum=_exact_text(marked["maximum"]),
                             mean=float(marked["total"] / marked["numbers"]))
    if info.dtype == "array":
        shapes = sorted(facts.get("shapes", {}).items(), key=lambda kv: -kv[1])[:5]
        return ColumnSummary(**base, common=tuple((f"shape {k}", n) for k, n in shapes))
    if info.dtype == "boolean" and kind not in ("text", None):
        trues = int(round(facts["total"]))
        falses = facts["count"] - trues
        pairs = [(str(True), trues), (str(False), falses)]
        pairs = [p for p in sorted(pairs, key=lambda p: -p[1]) if p[1] > 0]
        return ColumnSummary(**base, common=tuple(pairs))
    if kind == "text":
        return ColumnSummary(**base, common=_common_text(facts, info, table.n_rows))
    return ColumnSummary(**base)


def _exact_text(value) -> str:
    """A cell's value as an exact rational's text ("15/2"); decimals read from their digits."""
    from fractions import Fraction

    return str(value if isinstance(value, (int, Fraction)) else Fraction(str(value)))


def _common_text(facts: dict, info, n_rows: int) -> tuple:
    counts = facts.get("counts")
    if info.dtype == "boolean" and counts is not None:
        from analysis.table import is_true_word

        merged: dict[str, list] = {}
        for word, (count, first) in counts.items():
            key = str(is_true_word(word))
            entry = merged.setdefault(key, [0, first])
            entry[0] += count
            entry[1] = min(entry[1], first)
        ordered = sorted(merged.items(), key=lambda kv: (-kv[1][0], kv[1][1]))
        return tuple((k, v[0]) for k, v in ordered[:5])
    if counts is not None:
        ordered = sorted(counts.items(), key=lambda kv: (-kv[1][0], kv[1][1]))
        return tuple((str(k), int(v[0])) for k, v in ordered[:5])
    if info.distinct == n_rows - info.missing:
        # every value once: the first five, as value_counts lists ties in order of appearance
        return tuple((str(v), 1) for v in facts.get("first_values", [])[:5])
    return ()


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
