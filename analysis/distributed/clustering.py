"""The clustering step on Dask: Lloyd iterations over every partition, other methods on a
sample, every row assigned to a cluster (nearest centre, most likely component, nearest
sampled row); silhouettes on the in-memory step's sample, profiles over every row.
"""

from __future__ import annotations

import dataclasses
import time
import warnings

import numpy as np

from analysis import clustering as cl
from analysis.distributed.common import Context, Features, standardizing, step_features
from analysis.errors import StepError
from analysis.notes import Note

# Rows of the sample that starting centres and sample-fitted methods use.
SAMPLE_ROWS = 100_000
LLOYD_ITERATIONS = 300
# Lloyd iterations stop when the centres' squared moves add up to at most this share of the
# features' mean variance (scikit-learn's KMeans default, tol=1e-4)
LLOYD_TOLERANCE = 1e-4


def run_clustering(step, ctx: Context):
    """A ClusteringResult for ``step`` on the partitioned table in ``ctx``."""
    step.check_table(ctx.table)
    return cluster_blocks(step, step_features(ctx, step, target=step.compare)).result


@dataclasses.dataclass
class Clusters:
    """A clustering of every row: the result, and what assigns a row (of standardized
    features) to its cluster, with the result's cluster numbers via ``order``."""

    result: object
    assigner: object
    order: dict
    shift: np.ndarray
    scale: np.ndarray


def cluster_blocks(step, found: Features) -> Clusters:
    """Cluster the rows of the given features as ``step`` asks."""
    started = time.perf_counter()
    ctx, plan, blocks, n, m2 = found.ctx, found.plan, found.blocks, found.n, found.m2
    notes = list(found.notes)
    shift, scale = standardizing(step.standardize, n, found.mean, m2, notes)
    ks = step.candidate_ks(n, ctx.table.name)
    sample = found.rows(cl.sample_rows(n, SAMPLE_ROWS, step.seed), shift, scale)
    if n > step.sample_size:
        notes.append(cl.silhouette_note(step.sample_size, n, step.seed))
    scored = found.rows(cl.sample_rows(n, step.sample_size, step.seed), shift, scale)
    silhouette = cl.Silhouette.of_rows(scored)
    runs = []
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for method in cl.K_METHODS if step.method == "auto" else (step.method,):
            for k, assigner, bic in _fits(method, step, ks, sample, n, notes):
                if isinstance(assigner, _Lloyd):
                    refine_lloyd(ctx, blocks, assigner, shift, scale,
                                 float(np.mean(np.diag(m2) / n / scale ** 2)))
                # the sweep's sizes are those of every row
                sizes = {c: size for c, (size, _) in ctx.reduce(
                    _sums, blocks, cl.add_cluster_sums, assigner, shift, scale).items()}
                runs.append((cl.sweep_entry(method, k, sizes, silhouette(assigner(scored)),
                                            bic), assigner))
    # the in-memory chooser passes a run's labels on; here they stand for its assigner
    entry, chosen, reason = cl.choose_run(step.method, runs, step.k is not None)
    pieces = ctx.each(_assign_block, blocks, chosen, shift, scale)
    labels = np.concatenate([p[2] for p in pieces])
    order = cl.size_order(labels)
    labels = np.array([order[c] for c in labels.tolist()], dtype=int)
    agreement = None if step.compare is None else \
        cl.agreement_scores(np.concatenate([p[3] for p in pieces]), labels)
    result = cl.clustering_result(
        step, entry, reason, labels, row_ids=np.concatenate([p[1] for p in pieces]),
        positions=np.concatenate([p[0] for p in pieces]), sweep=[r[0] for r in runs],
        profiles=_profiles(ctx, plan, blocks, chosen, order, shift, scale, n, found.mean, m2),
        features=plan.names, agreement=agreement, notes=notes, warnings=found.warnings,
        started=started)
    return Clusters(result, chosen, order, shift, scale)


# ----------------------------------------------------------------------------------------
# Fitting: each yields (k, assigner, bic) where assigner(values) -> labels


def _fits(method: str, step, ks, sample: np.ndarray, n: int, notes: list[str]):

    if method == "kmeans":
        notes.append(Note("dask_lloyd", "k-means by exact Lloyd iterations over every row of "
                          "every partition, started from k-means++ centres fitted on a random "
                          f"sample of {min(n, SAMPLE_ROWS)} rows.", sample=min(n, SAMPLE_ROWS)))
        for k in ks:
            _, centres = cl.kmeans_labels(sample, k, step.seed)
            yield k, _Lloyd(centres), None
    elif method == "gmm":
        if len(sample) < n:
            notes.append(cl.mixture_note(len(sample), n))
        for k in ks:
            model = cl.mixture_model(sample, k, step.seed)
            yield k, cl.MixtureAssigner(model), float(model.bic(sample))
    elif method == "agglomerative":
        fit = sample[cl.sample_rows(len(sample), step.sample_size, step.seed)]
        if len(fit) < n:
            notes.append(cl.agglomerative_note(len(fit), n))
        for k, _, centres in cl.ward_cuts(fit, ks):
            yield k, cl.NearestCentre(centres), None
    elif method == "hdbscan":
        fit = sample[cl.sample_rows(len(sample), step.sample_size, step.seed)]
        labels = cl.hdbscan_fit(fit, step.min_cluster_size, notes)
        if len(fit) < n:
            notes.append(cl.hdbscan_sample_note(len(fit), n))
        if step.k is not None:
            notes.append(cl.hdbscan_k_note(step.k))
        yield None, cl.NearestSampled(fit, labels), None
    else:
        raise StepError(f"clustering method {method!r} is not available on the dask engine.")


class _Lloyd(cl.NearestCentre):
    """Nearest-centre assignment whose centres are refined over all rows before first use."""


def refine_lloyd(ctx: Context, blocks: list, assigner: _Lloyd, shift, scale,
                 variance: float = 1.0) -> int:
    """Run Lloyd iterations over every row until the centres settle; return the iterations.

    ``variance`` is the features' mean variance in the units clustered (1 when standardized).
    """
    for iteration in range(1, LLOYD_ITERATIONS + 1):
        sums = ctx.reduce(_sums, blocks, cl.add_cluster_sums, assigner, shift, scale, True)
        centres = assigner.centres.copy()
        for cluster, (size, total) in sums.items():
            centres[cluster] = total / size
        moved = float(((centres - assigner.centres) ** 2).sum())
        assigner.centres = centres
        if moved <= LLOYD_TOLERANCE * variance:
            return iteration
    return LLOYD_ITERATIONS


def _sums(block, assigner, shift, scale, standardized: bool = False) -> dict:
    """Each cluster's rows and feature sums in one block (standardized, or in the features'
    own units), as the in-memory step sums them (:func:`analysis.clustering.cluster_sums`)."""
    values = (block.values - shift) / scale
    return cl.cluster_sums(values if standardized else block.values, assigner(values))


def _assign_block(block, assigner, shift, scale):
    labels = assigner((block.values - shift) / scale)
    truth = block.target if block.target is not None else np.zeros(0)
    return block.positions, block.row_ids, np.asarray(labels, dtype=int), truth


def _profiles(ctx, plan, blocks, assigner, order, shift, scale, n, mean, m2) -> tuple:
    """The in-memory profiles, from each cluster's sums over the blocks."""
    sums = ctx.reduce(_sums, blocks, cl.add_cluster_sums, assigner, shift, scale)
    return cl.profiles_from_sums(
        {order[c]: (size, inside, mean * n - inside) for c, (size, inside) in sums.items()}, n,
        plan.names, [f.kind for f in plan.features], np.sqrt(np.diag(m2) / n))
