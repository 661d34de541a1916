"""Objects to look at, on Dask: every row scored partition by partition, the top rows gathered.

Each measure of the in-memory step is fitted once and then scores every row where it lies:

* isolation forest: fitted on a uniform sample (each tree looks at 256 rows anyway), every
  row scored partition by partition;
* local outlier factor: fitted on the same random sample of rows the in-memory step uses past
  ``sample_size`` rows (all rows when fewer), every other row scored against it;
* distance from cluster centre: the clustering step on Dask (k-means by Lloyd iterations over
  every row), each row's distance from its centre over the cluster's typical distance (the
  median over the rows of the local outlier factor's sample in that cluster);
* separator: a logistic (or ridge) fit on a sample, cross-validated on the sample's rows; the
  rows outside the sample are scored by the fit on the whole sample, so no row is scored by a
  model that saw it;
* relations: the relations step on Dask; a row scores the relations and bounds it breaks.

Ranking needs each row's standing among all rows, so the few scores per row come back to the
client (the table itself never does); standings, the combined score, the ranking and the
reasons are then those of the in-memory step.
"""

from __future__ import annotations

import time
import warnings

import numpy as np

from analysis.distributed.common import (
    Context,
    blocks_for,
    feature_moments,
    plan_for,
    standardizing,
)
from analysis.errors import StepError

# Rows the isolation forest and the separator are fitted on.
SAMPLE_ROWS = 100_000


def run_outliers(step, ctx: Context):
    """An OutliersResult for ``step`` on the partitioned table in ``ctx``."""
    from dask import delayed

    from analysis import outliers as ol
    from analysis.distributed.matrix import feature_notes, feature_warnings

    started = time.perf_counter()
    step.check_table(ctx.table)
    plan = plan_for(ctx, columns=step.columns, target=step.target,
                    array_encoding=step.array_encoding, log_scale=step.log_scale,
                    missing=step.missing)
    blocks = blocks_for(ctx, plan)
    stats, counts, kept = feature_moments(ctx, blocks)
    n, mean, m2 = stats
    if n < 5:
        raise StepError(f"{ctx.table.name}: ranking objects needs at least 5 rows with every "
                        f"feature present; {n} remain. Impute missing values or choose other "
                        "columns.")
    notes = feature_notes(plan, counts, ctx.table.n_rows)
    warned = feature_warnings(plan, counts, ctx.table.n_rows)
    from analysis.distributed.clustering import gather_rows, sample_rows

    shift, scale = standardizing(step.standardize, n, mean, m2, notes)
    offsets = np.concatenate([[0], np.cumsum(kept)[:-1]]).astype(np.int64)
    lof_rows = sample_rows(n, step.sample_size, step.seed)
    lof_sample = gather_rows(ctx, blocks, kept, offsets, lof_rows, shift, scale)
    fit_rows = sample_rows(n, SAMPLE_ROWS, step.seed + 1)
    fit_sample = gather_rows(ctx, blocks, kept, offsets, fit_rows, shift, scale)
    models = {}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        from sklearn.ensemble import IsolationForest

        models["isolation forest"] = IsolationForest(
            n_estimators=200, random_state=step.seed).fit(fit_sample)
        if len(fit_rows) < n:
            notes.append(f"isolation forest fitted on a random sample of {len(fit_rows)} of "
                         f"the {n} rows; every row scored across partitions.")
        from sklearn.neighbors import LocalOutlierFactor

        neighbours = min(step.n_neighbors, n - 1)
        models["local outlier factor"] = LocalOutlierFactor(
            n_neighbors=neighbours, novelty=len(lof_rows) < n).fit(lof_sample)
        if len(lof_rows) < n:
            notes.append(ol.factor_sample_note(len(lof_rows), n, step.seed))
    clusters = _clusters(step, ctx, plan, blocks, notes)
    typical, sizes = _typical_distances(clusters, lof_sample)
    separator = None
    if step.target is not None:
        separator = _separator_model(step, ctx, plan, blocks, kept, offsets, fit_rows,
                                     shift, scale, notes)
    spec = _Score(models=models, assigner=clusters.assigner, order=clusters.order,
                  typical=typical, sizes=sizes, n=n, shift=shift, scale=scale,
                  separator=separator, lof_rows=lof_rows, offsets=offsets)
    shared = ctx.share(spec)   # fitted models: sent to each worker once, not per task
    # a partition with no row left (every row missing a feature) has nothing to score
    scored = ctx.compute([delayed(_score_block)(b, k, shared) for k, b in enumerate(blocks)
                          if kept[k]])
    positions = np.concatenate([s["positions"] for s in scored])
    row_ids = np.concatenate([s["row_ids"] for s in scored])
    measures = {name: np.concatenate([s[name] for s in scored])
                for name in scored[0] if name not in ("positions", "row_ids", "details")}
    details = {key: np.concatenate([s["details"][key] for s in scored])
               for key in scored[0]["details"]}
    used = _measures(ol, step, measures, details, clusters, neighbours, notes)
    if step.relations:
        found = _relations(ctx, step, plan, row_ids, notes)
        if found is not None:
            used["relations"] = found
    kept_measures, combined, outliers = ol.ranked_list(used, row_ids, step.top, notes)
    return ol.OutliersResult(
        outliers=outliers, row_ids=row_ids, positions=positions, scores=combined,
        measures=tuple(kept_measures), target=step.target, k=clusters.result.k, n_rows=n,
        combination=ol.combination_text(kept_measures),
        top=step.top, seed=step.seed, features=tuple(plan.names),
        notes=ol.said_as_notes(notes), warnings=warned + ol.said_as_warnings(notes),
        elapsed_seconds=time.perf_counter() - started,
    )


class _Score:
    """What scoring a partition needs (a plain object: dask leaves it as it is)."""

    def __init__(self, **settings):
        self.__dict__.update(settings)


def _clusters(step, ctx, plan, blocks, notes):
    from analysis.clustering import ClusteringStep
    from analysis.distributed.clustering import cluster_blocks

    clustering = ClusteringStep(method="kmeans", k=step.k, compare=step.target,
                                columns=step.columns, array_encoding=step.array_encoding,
                                log_scale=step.log_scale, missing=step.missing,
                                standardize=step.standardize, seed=step.seed)
    found = cluster_blocks(clustering, ctx, plan, blocks)
    notes.extend(n for n in found.result.notes if n not in notes)
    notes.append(f"distance from centre uses k-means clusters: {found.result.reason}")
    return found


def _typical_distances(clusters, sample: np.ndarray):
    """Each cluster's typical distance from its centre: the median over the sampled rows."""
    labels = clusters.assigner(sample)
    centres = clusters.assigner.centres
    typical = {}
    for c in range(len(centres)):
        inside = sample[labels == c]
        typical[c] = float(np.median(np.linalg.norm(inside - centres[c], axis=1))) \
            if len(inside) else 0.0
    sizes = {}
    for profile in clusters.result.profiles:
        old = next(o for o, new in clusters.order.items() if new == profile.cluster)
        sizes[old] = profile.size
    return typical, sizes


def _separator_model(step, ctx, plan, blocks, kept, offsets, fit_rows, shift, scale, notes):
    """A fit on the sample, and cross-validated scores for the sample's own rows."""
    from sklearn.model_selection import cross_val_predict

    from analysis import outliers as ol
    from analysis.distributed.clustering import gather_rows
    from analysis.features import is_numeric_target

    values = gather_rows(ctx, blocks, kept, offsets, fit_rows, np.zeros(len(shift)),
                          np.ones(len(scale)))
    targets = _gather_targets(ctx, blocks, kept, offsets, fit_rows)
    if is_numeric_target(ctx.table, step.target):
        truth = np.asarray(targets, dtype=float)
        model, folds = ol.number_model(), ol.number_folds(len(truth), step.seed)
        inside = cross_val_predict(model, values, truth, cv=folds)
        model.fit(values, truth)
        spread = float(np.std(truth - inside)) or 1.0
        notes.append(f"separator: {step.target!r} predicted by a {folds.n_splits}-fold "
                     f"cross-validated ridge regression on a sample of {len(fit_rows)} rows; "
                     "the other rows by the fit on the whole sample.")
        return {"numeric": True, "model": model, "inside": inside, "rows": fit_rows,
                "spread": spread, "classes": None}
    labels = np.array([str(v) for v in targets], dtype=object)
    classes, splits, folds = ol.label_folds(labels, step.seed, ctx.table.name, step.target)
    model = ol.label_model()
    inside = cross_val_predict(model, values, labels, cv=folds, method="predict_proba")
    model.fit(values, labels)
    notes.append(f"separator: {step.target!r} predicted by a {splits}-fold cross-validated "
                 f"logistic regression on a sample of {len(fit_rows)} rows, the other rows by "
                 "the fit on the whole sample; a row scores 1 minus the probability given to "
                 "its own class.")
    return {"numeric": False, "model": model, "inside": inside, "rows": fit_rows,
            "classes": classes, "boolean": ctx.table.column(step.target).dtype == "boolean"}


def _gather_targets(ctx, blocks, kept, offsets, wanted):
    from dask import delayed

    picks = []
    for k, block in enumerate(blocks):
        lo, hi = offsets[k], offsets[k] + kept[k]
        local = wanted[(wanted >= lo) & (wanted < hi)] - lo
        if len(local):
            picks.append(delayed(_take_target)(block, local))
    parts = ctx.compute(picks)
    return np.concatenate(parts) if parts else np.array([])


def _take_target(block, local):
    return block.target[local]


def _score_block(block, index: int, spec: _Score) -> dict:
    """Every measure's score for one partition's rows, and what the reasons need."""
    values = (block.values - spec.shift) / spec.scale
    out = {"positions": block.positions, "row_ids": block.row_ids}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        out["isolation forest"] = -spec.models["isolation forest"].score_samples(values)
        lof = spec.models["local outlier factor"]
        if lof.novelty:
            factor = -lof.score_samples(values)
            first = spec.offsets[index]
            local = np.arange(first, first + len(values))
            inside = np.isin(local, spec.lof_rows)
            if inside.any():
                where = np.searchsorted(spec.lof_rows, local[inside])
                factor[inside] = -lof.negative_outlier_factor_[where]
        else:
            factor = -lof.negative_outlier_factor_[spec.offsets[index]:
                                                   spec.offsets[index] + len(values)]
        out["local outlier factor"] = factor
    labels = spec.assigner(values)
    centres = spec.assigner.centres
    tiny = max(3, spec.n // 100)
    large = [c for c in range(len(centres)) if spec.sizes.get(c, 0) >= tiny] or \
        [c for c in range(len(centres)) if spec.sizes.get(c, 0)]
    reference = labels.copy()
    small = ~np.isin(labels, large)
    if small.any():
        gaps = np.linalg.norm(values[small][:, None, :] - centres[large][None, :, :], axis=2)
        reference[small] = np.array(large)[np.argmin(gaps, axis=1)]
    gap = np.linalg.norm(values - centres[reference], axis=1)
    typical = np.array([spec.typical.get(int(c), 0.0) for c in reference])
    with np.errstate(divide="ignore", invalid="ignore"):
        relative = np.where(typical > 0, gap / np.where(typical > 0, typical, 1.0),
                            np.where(gap > 0, np.inf, 0.0))
    out["distance from cluster centre"] = relative
    details = {"label": np.array([spec.order[int(c)] for c in labels], dtype=int),
               "reference": np.array([spec.order[int(c)] for c in reference], dtype=int)}
    if spec.separator is not None:
        details.update(_separator_scores(block, values, index, spec))
        out["separator"] = details["separator_score"]
    out["details"] = details
    return out


def _separator_scores(block, values, index, spec) -> dict:
    sep = spec.separator
    raw = block.values
    first = spec.offsets[index]
    local = np.arange(first, first + len(values))
    inside = np.isin(local, sep["rows"])
    where = np.searchsorted(sep["rows"], local[inside])
    if sep["numeric"]:
        truth = np.asarray(block.target, dtype=float)
        predicted = sep["model"].predict(raw)
        predicted[inside] = sep["inside"][where]
        z = (truth - predicted) / sep["spread"]
        return {"separator_score": np.abs(z), "truth": truth, "predicted": predicted, "z": z}
    labels = np.array([str(v) for v in block.target], dtype=object)
    probability = sep["model"].predict_proba(raw)
    probability[inside] = sep["inside"][where]
    index_of = {c: j for j, c in enumerate(sep["classes"])}
    truth = np.array([index_of.get(c, -1) for c in labels])
    rows = np.arange(len(labels))
    p_true = np.where(truth >= 0, probability[rows, np.maximum(truth, 0)], 0.0)
    guess = probability.argmax(axis=1)
    return {"separator_score": 1.0 - p_true, "truth_index": truth, "guess": guess,
            "guess_probability": probability[rows, guess], "labels": labels}


def _measures(ol, step, measures: dict, details: dict, clusters, neighbours: int, notes):
    """The in-memory step's measures (scores and how to say why) from the gathered scores."""
    sizes = {p.cluster: p.size for p in clusters.result.profiles}
    used = {
        "isolation forest": ol.forest_measure(measures["isolation forest"]),
        "local outlier factor": ol.factor_measure(measures["local outlier factor"], neighbours),
        "distance from cluster centre": ol.centre_measure(
            measures["distance from cluster centre"], details["label"], details["reference"],
            sizes, clusters.result.k),
    }
    if "separator" in measures:
        doubts = _separator_measure(ol, step, measures["separator"], details, notes)
        if doubts is not None:
            used["separator"] = doubts
    notes.append("typical distances from cluster centres are medians over the rows of the "
                 "local outlier factor's sample.")
    return used


def _separator_measure(ol, step, scores, details, notes):
    """The separator's measure, or None (with the in-memory step's note) when its model is
    no better than the plain guess."""
    if "z" in details:
        empty = ol.number_doubts_note(step.target, details["truth"], details["predicted"])
        if empty is not None:
            notes.append(empty)
            return None
        return ol.residual_measure(step.target, details["truth"], details["predicted"],
                                   details["z"])
    known = details["truth_index"] >= 0
    empty = ol.label_doubts_note(step.target, (1.0 - scores)[known],
                                 details["truth_index"][known])
    if empty is not None:
        notes.append(empty)
        return None
    guess, labels = details["guess"], details["labels"]
    classes = sorted(set(labels.tolist()))
    return ol.label_measure(
        step.target, scores,
        lambda i: classes[guess[i]] if guess[i] < len(classes) else str(guess[i]),
        details["guess_probability"], labels, guess != details["truth_index"], True)


def _relations(ctx, step, plan, row_ids, notes):
    """The relations step on Dask, as a measure: relations and bounds each row breaks."""
    from analysis.distributed.relations import run_relations
    from analysis.outliers import relations_measure
    from analysis.relations import RelationsStep

    columns = None
    if step.columns is not None:
        columns = [name for name in step.columns
                   if ctx.table.column(name).role in ("invariant", "flag")
                   and ctx.table.column(name).dtype in ("integer", "boolean", "real")]
        if not columns:
            notes.append("relations not checked: no numeric invariant among the feature "
                         "columns.")
            return None
    inner = Context(table=ctx.table, client=ctx.client)
    try:
        result = run_relations(RelationsStep(columns=columns, robust=True, seed=step.seed),
                               inner)
    except StepError as exc:
        notes.append(f"relations not checked: {exc}")
        return None
    return relations_measure(result, row_ids)


__all__ = ["run_outliers"]
