"""Objects to look at, on Dask: every row scored partition by partition, the top rows gathered.

Each measure is fitted once (on a sample where the in-memory step would sample) and scores
every row where it lies; the scores come back to the client, and the standings, ranking and
reasons are the in-memory step's.
"""

from __future__ import annotations

import time
import warnings

import numpy as np

from analysis.distributed.common import Context, Settings, standardizing, step_features
from analysis.notes import Note

# Rows the isolation forest and the separator are fitted on.
SAMPLE_ROWS = 100_000


def run_outliers(step, ctx: Context):
    """An OutliersResult for ``step`` on the partitioned table in ``ctx``."""
    from dask import delayed

    from analysis import outliers as ol
    from analysis.clustering import sample_rows

    started = time.perf_counter()
    step.check_table(ctx.table)
    found = step_features(ctx, step, target=step.target)
    n, blocks, kept, notes = found.n, found.blocks, found.kept, list(found.notes)
    ol.check_rows(ctx.table.name, n)
    shift, scale = standardizing(step.standardize, n, found.mean, found.m2, notes)
    lof_rows = sample_rows(n, step.sample_size, step.seed)
    lof_sample = found.rows(lof_rows, shift, scale)
    fit_rows = sample_rows(n, SAMPLE_ROWS, step.seed + 1)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        forest = ol.forest_model(step.seed).fit(found.rows(fit_rows, shift, scale))
        if len(fit_rows) < n:
            notes.append(Note(
                "dask_forest_sample",
                f"isolation forest fitted on a random sample of {len(fit_rows)} of "
                f"the {n} rows; every row scored across partitions."))
        neighbours = min(step.n_neighbors, n - 1)
        factor = ol.factor_model(neighbours, len(lof_rows) < n).fit(lof_sample)
        if len(lof_rows) < n:
            notes.append(ol.factor_sample_note(len(lof_rows), n, step.seed))
    clusters = _clusters(step, found, notes)
    separator = None if step.target is None else \
        _separator_model(step, found, fit_rows, len(shift), notes)
    spec = Settings(forest=forest, factor=factor, clusters=clusters, n=n, shift=shift,
                    scale=scale, separator=separator, lof_rows=lof_rows,
                    offsets=np.concatenate([[0], np.cumsum(kept)[:-1]]).astype(np.int64),
                    typical=ol.typical_distances(
                        lof_sample, clusters.assigner(lof_sample),
                        dict(enumerate(clusters.assigner.centres)),
                        range(len(clusters.assigner.centres))))
    shared = ctx.share(spec)   # fitted models: sent to each worker once, not per task
    # a partition with no row left (every row missing a feature) has nothing to score
    scored = ctx.compute([delayed(_score_block)(b, k, shared) for k, b in enumerate(blocks)
                          if kept[k]])
    gathered = {key: np.concatenate([s[key] for s in scored]) for key in scored[0]}
    used = _measures(ol, step, gathered, clusters.result, neighbours, notes,
                     step.target is not None and ctx.table.column(step.target).dtype == "boolean")
    if step.relations:
        broken = _relations(ctx, step, gathered["row_ids"], notes)
        if broken is not None:
            used["relations"] = broken
    return step.ranked(used, gathered["row_ids"], gathered["positions"], k=clusters.result.k,
                       features=found.plan.names, notes=notes, warnings=found.warnings,
                       started=started)


def _clusters(step, found, notes):
    from analysis.distributed.clustering import cluster_blocks
    from analysis.outliers import centre_clusters_note

    clusters = cluster_blocks(step.clustering_step(), found)
    notes.extend(n for n in clusters.result.notes if n not in notes)
    notes.append(centre_clusters_note(clusters.result))
    return clusters


def _separator_model(step, found, fit_rows, width: int, notes):
    """A fit on the sample (features in their own units, as the in-memory separator's
    pipeline scales them), and cross-validated scores for the sample's own rows."""
    from analysis import outliers as ol
    from analysis.features import is_numeric_target

    ctx = found.ctx
    values = found.rows(fit_rows, np.zeros(width), np.ones(width))
    truth, inside, classes, splits = ol.cross_validated(
        values, found.rows(fit_rows, None, None), is_numeric_target(ctx.table, step.target),
        step.seed, ctx.table.name, step.target)
    model = (ol.number_model() if classes is None else ol.label_model()).fit(values, truth)
    separator = {"model": model, "inside": inside, "rows": fit_rows, "classes": classes}
    if classes is None:
        notes.append(Note(
            "dask_separator_sample",
            f"separator: {step.target!r} predicted by a {splits}-fold "
            f"cross-validated ridge regression on a sample of {len(fit_rows)} rows; "
            "the other rows by the fit on the whole sample."))
        return {**separator, "spread": float(np.std(truth - inside)) or 1.0}
    notes.append(Note(
        "dask_separator_sample",
        f"separator: {step.target!r} predicted by a {splits}-fold cross-validated "
        f"logistic regression on a sample of {len(fit_rows)} rows, the other rows by "
        "the fit on the whole sample; a row scores 1 minus the probability given to "
        "its own class."))
    return separator


def _in_sample(spec, index: int, count: int, rows: np.ndarray):
    """(mask of a partition's rows that are in the sample ``rows``, where in it they are)."""
    local = np.arange(spec.offsets[index], spec.offsets[index] + count)
    inside = np.isin(local, rows)
    return inside, np.searchsorted(rows, local[inside])


def _score_block(block, index: int, spec: Settings) -> dict:
    """Every measure's score for one partition's rows, and what the reasons need."""
    from analysis import outliers as ol

    values = (block.values - spec.shift) / spec.scale
    out = {"positions": block.positions, "row_ids": block.row_ids}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        out["isolation forest"] = -spec.forest.score_samples(values)
        inside, where = _in_sample(spec, index, len(values), spec.lof_rows)
        out["local outlier factor"] = ol.factor_scores(spec.factor, values,
                                                       np.flatnonzero(inside), where)
    assigner, order = spec.clusters.assigner, spec.clusters.order
    labels = assigner(values)
    sizes = {old: p.size for p in spec.clusters.result.profiles
             for old, new in order.items() if new == p.cluster}
    large = ol.large_clusters({c: sizes.get(c, 0) for c in range(len(assigner.centres))},
                              spec.n)
    relative, reference = ol.relative_distances(values, labels,
                                                dict(enumerate(assigner.centres)),
                                                spec.typical, large)
    out["distance from cluster centre"] = relative
    out["label"] = np.array([order[int(c)] for c in labels], dtype=int)
    out["reference"] = np.array([order[int(c)] for c in reference], dtype=int)
    if spec.separator is not None:
        out.update(_separator_scores(block, index, spec))
    return out


def _separator_scores(block, index, spec) -> dict:
    """The in-memory step's separator scores of one partition's rows; rows of the sample
    the model was fitted on take their cross-validated predictions."""
    from analysis import outliers as ol

    sep = spec.separator
    inside, where = _in_sample(spec, index, len(block.values), sep["rows"])
    if sep["classes"] is None:
        predicted = sep["model"].predict(block.values)
        predicted[inside] = sep["inside"][where]
        return ol.number_scores(np.asarray(block.target, dtype=float), predicted,
                                sep["spread"])
    probability = sep["model"].predict_proba(block.values)
    probability[inside] = sep["inside"][where]
    # the classes are those the model saw (the sample's), in its own order
    return ol.label_scores(np.array([ol.label_text(v) for v in block.target], dtype=object),
                           probability, sep["classes"])


def _measures(ol, step, got: dict, clustering, neighbours: int, notes, flag: bool):
    """The in-memory step's measures (scores and how to say why) from the gathered scores."""
    sizes = {p.cluster: p.size for p in clustering.profiles}
    used = {
        "isolation forest": ol.forest_measure(got["isolation forest"]),
        "local outlier factor": ol.factor_measure(got["local outlier factor"], neighbours),
        "distance from cluster centre": ol.centre_measure(
            got["distance from cluster centre"], got["label"], got["reference"], sizes,
            clustering.k),
    }
    if "separator" in got:
        doubts = ol.separator_measure(step.target, got, flag, notes)
        if doubts is not None:
            used["separator"] = doubts
    notes.append(Note(
        "dask_typical_distances",
        "typical distances from cluster centres are medians over the rows of the "
        "local outlier factor's sample."))
    return used


def _relations(ctx, step, row_ids, notes):
    """The relations step on Dask, as a measure: relations and bounds each row breaks."""
    from analysis.distributed.relations import run_relations

    return step.broken_relations(
        ctx.table, row_ids, notes,
        lambda found: run_relations(found, Context(table=ctx.table, client=ctx.client)))


__all__ = ["run_outliers"]
