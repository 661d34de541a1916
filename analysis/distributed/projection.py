"""The projection step on Dask: exact PCA from the Gram matrix summed over partitions,
coordinates computed partition by partition; UMAP, t-SNE and LDA on a uniform sample."""

from __future__ import annotations

import dataclasses
import time

import numpy as np

from analysis.distributed.common import Context, step_features
from analysis.notes import Note

# Rows of the sample LDA runs on (UMAP and t-SNE use the in-memory step's own thresholds).
LDA_SAMPLE_ROWS = 200_000


def run_projection(step, ctx: Context):
    """A ProjectionResult for ``step`` on the partitioned table in ``ctx``."""
    from analysis.projection import (
        ONE_COMPONENT_NOTE,
        ProjectionResult,
        check_rows,
        pca_fields,
        pca_from_moments,
        scaling_note,
    )

    started = time.perf_counter()
    step.check_table(ctx.table)
    if step.method != "pca":
        return _on_sample(step, ctx)
    # the target only colours the picture: rows without it are still drawn, as in memory
    found = step_features(ctx, step, exclude=(step.target,) if step.target else ())
    n, mean, m2, notes = found.n, found.mean, found.m2, found.notes + step.setting_notes()
    check_rows(ctx.table.name, n)
    ratio, components, scale = pca_from_moments(n, mean, m2, standardize=step.standardize)
    notes.append(scaling_note(step.standardize))
    if len(ratio) < 2:
        notes.append(ONE_COMPONENT_NOTE)
    axes = components[:2]
    if len(axes) < 2:
        axes = np.vstack([axes, np.zeros((1, axes.shape[1]))])
    pieces = ctx.each(project_block, found.blocks, mean, scale, axes)
    coordinates = np.vstack([p[2] for p in pieces])
    ctx.notes.append(Note("dask_pca_exact", "PCA computed exactly from the covariance matrix "
                          "summed over all partitions; coordinates computed partition by "
                          "partition."))
    return ProjectionResult(
        method="pca", row_ids=np.concatenate([p[1] for p in pieces]),
        positions=np.concatenate([p[0] for p in pieces]),
        x=np.asarray(coordinates[:, 0], dtype=float), y=np.asarray(coordinates[:, 1], dtype=float),
        features=tuple(found.plan.names), standardize=step.standardize, target=step.target,
        n_rows=n, sampled=False, seed=step.seed, notes=tuple(notes), warnings=found.warnings,
        elapsed_seconds=time.perf_counter() - started,
        **pca_fields(components, ratio, found.plan.names),
    )


def project_block(block, mean: np.ndarray, scale: np.ndarray, axes: np.ndarray):
    """(positions, row ids, coordinates) of one block's rows on the given axes."""
    coordinates = ((block.values - mean) / scale) @ axes.T
    return block.positions, block.row_ids, coordinates


def _on_sample(step, ctx: Context):
    """UMAP, t-SNE or LDA run in memory on a uniform random sample of the whole table."""
    from analysis.distributed.common import on_sample
    from analysis.projection import METHOD_TITLES, SAMPLE_THRESHOLDS

    limit = step.sample_size or SAMPLE_THRESHOLDS.get(step.method, LDA_SAMPLE_ROWS)
    n = ctx.table.n_rows
    inner = dataclasses.replace(step, sample_size=None) if step.method in SAMPLE_THRESHOLDS \
        else step
    result, positions = on_sample(inner, ctx, limit)
    sampled = len(positions) < n
    if sampled:
        ctx.notes.append(Note("dask_sample", f"{METHOD_TITLES[step.method]} ran in memory on a "
                              f"uniform random sample of {len(positions)} of the {n} rows (seed "
                              f"{step.seed}) drawn across all partitions.",
                              sample=len(positions), rows=n, seed=step.seed))
    # positions in the sample table -> positions in the whole table
    return dataclasses.replace(result, positions=positions[result.positions],
                               sampled=result.sampled or sampled,
                               n_rows=n if sampled else result.n_rows)
