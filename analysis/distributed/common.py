"""Helpers shared by the steps on Dask: reductions over partitions, feature passes, notes."""

from __future__ import annotations

import dataclasses

import numpy as np

from analysis.distributed.matrix import FeaturePlan, feature_blocks, feature_plan
from analysis.distributed.reduction import tree
from analysis.notes import Note
from analysis.projection import merge_moments, moments, standardizing

# Distinct values a column's median is computed from exactly; past this, from a sample.
MEDIAN_CAP = 100_000
MEDIAN_SAMPLE_ROWS = 100_000


@dataclasses.dataclass
class Context:
    """One step's run on a cluster: the table, the client, and what to say about the engine."""

    table: object          # PartitionedTable
    client: object         # distributed.Client
    notes: list = dataclasses.field(default_factory=list)

    def compute(self, items):
        """Compute dask objects on the cluster and return their values (a list for a list)."""
        return self.client.gather(self.client.compute(items))

    def each(self, function, blocks: list, *args) -> list:
        """``function(block, *args)`` for every block, computed on the cluster."""
        from dask import delayed

        return self.compute([delayed(function)(b, *args) for b in blocks])

    def reduce(self, function, blocks: list, merge, *args):
        """``function(block, *args)`` for every block, merged pairwise by ``merge``."""
        from dask import delayed

        return self.compute(tree([delayed(function)(b, *args) for b in blocks], merge))

    def share(self, value):
        """``value`` sent once to every worker (a future to pass to tasks), so that a large
        object, such as a fitted model, is not copied into every task of a graph."""
        return self.client.scatter(value, broadcast=True, hash=False)

    def engine_note(self) -> Note:
        """What ran where: the cluster's workers, the table's partitions and rows."""
        from analysis.distributed.cluster import workers_of

        workers = len(workers_of(self.client))
        return Note("dask_engine",
                    f"ran on a Dask cluster ({workers} worker{'s' if workers != 1 else ''} at "
                    f"{self.client.scheduler.address}) over {self.table.npartitions} partition"
                    f"{'s' if self.table.npartitions != 1 else ''} of {self.table.n_rows} rows.",
                    workers=workers, partitions=self.table.npartitions, rows=self.table.n_rows)


class Settings:
    """What a pass over partitions needs, as a plain object: dask walks through the
    dataclasses, dicts and lists given to a task, but leaves this as it is."""

    def __init__(self, **settings):
        self.__dict__.update(settings)


def partition_tasks(ctx: Context, function, columns: list[str], *args) -> list:
    """``function(typed partition, offset of its first row, *args)`` for every partition,
    as dask objects."""
    from dask import delayed

    offsets = ctx.table.offsets
    return [delayed(function)(part, int(offsets[k]), *args)
            for k, part in enumerate(ctx.table.typed_partitions(columns))]


def plan_for(ctx: Context, step, *, target=None, exclude=()) -> FeaturePlan:
    """The feature plan of a step's feature settings (``columns``, ``array_encoding``,
    ``log_scale``, ``missing``), with the fills of ``missing="impute"``."""
    plan = feature_plan(ctx.table, columns=step.columns, target=target,
                        array_encoding=step.array_encoding, log_scale=step.log_scale,
                        missing=step.missing, exclude=exclude)
    if step.missing == "impute":
        plan = dataclasses.replace(plan, fill=_fills(ctx, plan))
    return plan


def blocks_for(ctx: Context, plan: FeaturePlan, *, persist: bool | None = None) -> list:
    """One dask object per partition holding its feature block."""
    return feature_blocks(ctx.table, plan, ctx.client, persist=persist)


@dataclasses.dataclass
class Features:
    """A step's features on every partition: the plan, one block per partition, their
    moments (rows, mean, centred Gram matrix), the rows each block kept, and the notes and
    warnings build_features writes for them."""

    ctx: Context
    plan: FeaturePlan
    blocks: list
    n: int
    mean: np.ndarray
    m2: np.ndarray
    kept: list
    notes: list
    warnings: tuple

    def rows(self, wanted: np.ndarray, shift, scale) -> np.ndarray:
        """The features (minus ``shift``, over ``scale``) of the kept rows numbered
        ``wanted`` (ascending) across the blocks; their targets when ``shift`` is None."""
        from dask import delayed

        offsets = np.concatenate([[0], np.cumsum(self.kept)[:-1]]).astype(np.int64)
        picks = []
        for k, block in enumerate(self.blocks):
            local = wanted[(wanted >= offsets[k]) & (wanted < offsets[k] + self.kept[k])]
            if len(local):
                picks.append(delayed(_take)(block, local - offsets[k], shift, scale))
        parts = self.ctx.compute(picks)
        if shift is None:
            return np.concatenate(parts) if parts else np.array([])
        return np.vstack(parts) if parts else np.empty((0, len(shift)))


def _take(block, local, shift, scale):
    return block.target[local] if shift is None else (block.values[local] - shift) / scale


def step_features(ctx: Context, step, *, target=None, exclude=()) -> Features:
    """The features of a step's settings on every partition (:func:`plan_for`), their
    moments, row counts and notes gathered in one pass."""
    from dask import delayed

    from analysis.distributed.matrix import add_counts, block_counts, feature_said

    plan = plan_for(ctx, step, target=target, exclude=exclude)
    blocks = blocks_for(ctx, plan)
    (n, mean, m2), counts, kept = ctx.compute([
        tree([delayed(block_moments)(b) for b in blocks], merge_moments),
        tree([delayed(block_counts)(b) for b in blocks], add_counts),
        [delayed(len)(b.positions) for b in blocks],
    ])
    notes, warned = feature_said(plan, counts, ctx.table.n_rows)
    return Features(ctx, plan, blocks, n, mean, m2, kept, notes, warned)


def block_moments(block) -> tuple[int, np.ndarray, np.ndarray]:
    """(rows, mean, centred Gram matrix) of one block's features."""
    return moments(block.values)


def _fills(ctx: Context, plan: FeaturePlan) -> dict:
    """The in-memory fill of each feature (:func:`analysis.features.fills`), from value counts
    summed over partitions; past MEDIAN_CAP distinct values, the median of a sample."""
    from analysis.features import build_features, fills

    raw = dataclasses.replace(plan, missing="keep", target=None)   # the features' cells only
    merged = ctx.compute(tree(partition_tasks(ctx, _value_counts, list(plan.columns), raw),
                              _merge_value_counts))
    exact = [(f, counted) for f, counted in zip(plan.features, merged) if counted is not None]
    found = fills([f for f, _ in exact], [counted for _, counted in exact])
    approximate = [f.name for f, counted in zip(plan.features, merged) if counted is None]
    if approximate:
        from analysis.distributed.source import sample_table

        sample, _ = sample_table(ctx.table, ctx.client, MEDIAN_SAMPLE_ROWS, seed=0,
                                 columns=list(plan.columns))
        fm = build_features(sample, columns=list(plan.columns), missing="drop")
        for name in approximate:
            found[name] = float(np.median(fm.values[:, fm.names.index(name)]))
        ctx.notes.append(Note("dask_sampled_median", "missing values of "
                              f"{', '.join(approximate)} filled with the median of a random "
                              f"sample of {MEDIAN_SAMPLE_ROWS} rows (too many distinct values "
                              "for an exact median across partitions).",
                              columns=tuple(approximate), sample=MEDIAN_SAMPLE_ROWS))
    return found


def _value_counts(frame, offset: int, plan: FeaturePlan) -> list:
    from analysis.distributed.matrix import partition_features
    from analysis.features import value_counts

    block = partition_features(frame, offset, plan)
    counted = [value_counts(column) for column in block.values.T]
    return [c if len(c[0]) <= MEDIAN_CAP else None for c in counted]


def _merge_value_counts(a: list, b: list) -> list:
    from analysis.features import merge_value_counts

    merged = [None if x is None or y is None else merge_value_counts(x, y) for x, y in zip(a, b)]
    return [m if m is not None and len(m[0]) <= MEDIAN_CAP else None for m in merged]


def on_sample(step, ctx: Context, size: int):
    """(``step.run`` in memory on a uniform random sample of ``size`` rows drawn across every
    partition with the step's seed, the sampled rows' positions in the whole table)."""
    from analysis.distributed.source import sample_table

    sample, positions = sample_table(ctx.table, ctx.client, size, seed=step.seed)
    return step.run(sample), positions


def with_notes(result, extra: list[str]):
    """The result with ``extra`` appended to its notes (results are frozen dataclasses)."""
    if not extra:
        return result
    return dataclasses.replace(result, notes=tuple(result.notes) + tuple(extra))


__all__ = ["Context", "Features", "Settings", "block_moments", "blocks_for",
           "merge_moments", "on_sample", "partition_tasks", "plan_for", "standardizing",
           "step_features", "tree", "with_notes"]
