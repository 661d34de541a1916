"""The separator's scores: the metrics of a split, the report of split 1 with its bootstrap
interval and baseline, the verdict's rule, and the test rows the separator gets wrong while
confident.

Matthews correlation, balanced accuracy and R^2 are computed from confusion counts and sums
here (the same numbers as scikit-learn's, without its checks of every call's input, which
cost more than the score on the protocol's many refits).
"""

from __future__ import annotations

import numpy as np

from analysis.plain import row_id
from analysis.separator_models import decision

BOOTSTRAP_RESAMPLES = 1000
INTERVAL_LEVEL = 0.95
CHANCE_LEVEL = 0.05
MISPREDICTED_LIMIT = 100
CLASS_RULE = ("beats chance: yes only when the 95% bootstrap interval of the Matthews "
              "correlation on the test rows lies above 0 and the permutation p-value is below "
              "0.05; otherwise no.")
REGRESSION_RULE = ("beats chance: yes only when the 95% bootstrap interval of R^2 on the test "
                   "rows lies above 0 and the permutation p-value is below 0.05; otherwise no.")


def score(run, y_true: np.ndarray, predicted: np.ndarray) -> float:
    """The protocol's score of ``predicted``: R^2 for a regression, else the Matthews
    correlation."""
    if run.regression:
        return r2(y_true, predicted)
    return float(mcc_from_counts(confusion_counts(y_true, predicted, run.n_classes)))


def split_metrics(run, train, test, predicted) -> dict:
    """The figures of one split: its scores and those of the baseline on its test rows."""
    y = run.y
    if run.regression:
        mean = float(np.mean(y[train]))
        return {"r2": r2(y[test], predicted),
                "mean_absolute_error": float(np.mean(np.abs(y[test] - predicted))),
                "baseline_r2": r2(y[test], np.full(len(test), mean)),
                "baseline_mean_absolute_error": float(np.mean(np.abs(y[test] - mean)))}
    counts = confusion_counts(y[test], predicted, run.n_classes)
    return {"accuracy": float(np.trace(counts) / counts.sum()),
            "balanced_accuracy": balanced_accuracy(counts),
            "mcc": float(mcc_from_counts(counts)),
            "baseline_accuracy": float(counts.sum(axis=1).max() / counts.sum())}


def class_report(run, test, predicted):
    """Split 1's metrics, baseline, interval method and confusion matrix (classes)."""
    counts = confusion_counts(run.y[test], predicted, run.n_classes)
    low, high = mcc_interval(counts, BOOTSTRAP_RESAMPLES, run.step.seed)
    metrics = {"accuracy": float(np.trace(counts) / counts.sum()),
               "balanced_accuracy": balanced_accuracy(counts),
               "mcc": float(mcc_from_counts(counts)),
               "mcc_ci": [low, high]}
    baseline = {"accuracy": float(counts.sum(axis=1).max() / counts.sum())}
    interval = (f"bootstrap, {BOOTSTRAP_RESAMPLES} resamples of the {counts.sum()} test "
                "rows, each drawn as multinomial counts over the cells of the confusion "
                "matrix, with a seeded percentile 95% interval")
    confusion = {"labels": list(run.classes), "counts": counts.tolist(),
                 "rows": "actual class", "columns": "predicted class"}
    return metrics, baseline, interval, confusion


def regression_report(run, train, test, predicted):
    """Split 1's metrics, baseline and interval method (a regression)."""
    y = run.y
    mean = float(np.mean(y[train]))
    sample = np.arange(len(test))
    limit = run.step.sample_rows
    if len(test) > limit:
        sample = np.sort(np.random.default_rng([run.step.seed, 3]).choice(
            len(test), limit, replace=False))
    low, high = r2_interval(y[test][sample], predicted[sample], BOOTSTRAP_RESAMPLES,
                            run.step.seed)
    metrics = {"r2": r2(y[test], predicted), "r2_ci": [low, high],
               "mean_absolute_error": float(np.mean(np.abs(y[test] - predicted)))}
    baseline = {"r2": r2(y[test], np.full(len(test), mean)),
                "mean_absolute_error": float(np.mean(np.abs(y[test] - mean))),
                "prediction": mean}
    if run.integer_target:
        from analysis.integer_target import exact_share, most_common_value

        found = exact_share(y[test], predicted)
        metrics["exact"] = found.share
        metrics["exact_ci"] = [found.low, found.high]
        common = most_common_value(y[train])
        baseline["exact"] = exact_share(y[test], np.full(len(test), common)).share
        baseline["most_common_value"] = common
    interval = (f"bootstrap, {BOOTSTRAP_RESAMPLES} resamples of "
                f"{len(sample)} test rows, percentile 95% interval, seeded")
    if len(sample) < len(test):
        interval += f" (a sample of the {len(test)} test rows)"
    return metrics, baseline, interval


def mispredicted(run, model, test, predicted) -> list[dict]:
    """Test rows the separator gets wrong while being confident about them."""
    ids = run.fm.row_ids
    y = run.y
    if run.regression:
        residual = np.abs(y[test] - predicted)
        typical = float(np.median(residual))
        if typical == 0:
            typical = float(np.mean(residual))
        chosen = np.flatnonzero(residual > 3 * typical) if typical > 0 else np.array([],
                                                                                     int)
        order = chosen[np.argsort(-residual[chosen], kind="stable")][:MISPREDICTED_LIMIT]
        return [{"row": row_id(ids[test[i]]), "actual": float(y[test[i]]),
                 "predicted": float(predicted[i]), "error": float(residual[i])}
                for i in order]
    wrong = np.flatnonzero(predicted != y[test])
    if len(wrong) == 0 or not hasattr(model, "decision_function"):
        return []
    scores = decision(model, run.X[test])
    if scores.ndim == 1:
        # two classes: the distance from the boundary, in decision units
        confidence = np.abs(scores)
        typical = float(np.median(confidence))
    else:
        # several classes: how far the predicted class's score beats the actual one's,
        # compared with the usual winning margin over the runner-up
        rows = np.arange(len(test))
        confidence = scores[rows, predicted] - scores[rows, y[test]]
        ordered = np.sort(scores, axis=1)
        typical = float(np.median(ordered[:, -1] - ordered[:, -2]))
    chosen = wrong[confidence[wrong] >= typical]
    order = chosen[np.argsort(-confidence[chosen], kind="stable")][:MISPREDICTED_LIMIT]
    return [{"row": row_id(ids[test[i]]), "actual": run.classes[y[test[i]]],
             "predicted": run.classes[predicted[i]],
             "confidence": float(confidence[i])} for i in order]


def confusion_counts(actual: np.ndarray, predicted: np.ndarray, k: int) -> np.ndarray:
    """Counts: rows are the actual class, columns the predicted class."""
    return np.bincount(np.asarray(actual, dtype=np.int64) * k
                       + np.asarray(predicted, dtype=np.int64),
                       minlength=k * k).reshape(k, k)


def mcc_from_counts(counts: np.ndarray) -> np.ndarray:
    """Matthews correlation from confusion matrices (any number of classes, batched).

    With c correct, s rows, t_k actual and p_k predicted counts:
    (c s - sum p_k t_k) / sqrt((s^2 - sum p_k^2)(s^2 - sum t_k^2)), and 0 when undefined.
    """
    counts = np.asarray(counts, dtype=np.float64)
    actual = counts.sum(axis=-1)
    predicted = counts.sum(axis=-2)
    correct = np.trace(counts, axis1=-2, axis2=-1)
    total = actual.sum(axis=-1)
    top = correct * total - np.sum(predicted * actual, axis=-1)
    bottom = (total**2 - np.sum(predicted**2, axis=-1)) * (total**2 - np.sum(actual**2, axis=-1))
    with np.errstate(invalid="ignore", divide="ignore"):
        value = np.where(bottom > 0, top / np.sqrt(np.where(bottom > 0, bottom, 1.0)), 0.0)
    return value


def balanced_accuracy(counts: np.ndarray) -> float:
    actual = counts.sum(axis=1)
    present = actual > 0
    return float(np.mean(np.diag(counts)[present] / actual[present]))


def mcc_interval(counts: np.ndarray, resamples: int, seed: int) -> tuple[float, float]:
    """Percentile bootstrap interval of the Matthews correlation over the test rows.

    Resampling the test rows with replacement gives multinomial counts over the confusion
    matrix's cells, so the resamples are drawn as counts directly.
    """
    total = int(counts.sum())
    rng = np.random.default_rng([seed, 2])
    draws = rng.multinomial(total, counts.ravel() / total, size=resamples)
    values = mcc_from_counts(draws.reshape(resamples, *counts.shape))
    tail = (1 - INTERVAL_LEVEL) / 2 * 100
    low, high = np.percentile(values, [tail, 100 - tail])
    return float(low), float(high)


def r2(actual: np.ndarray, predicted: np.ndarray) -> float:
    residual = float(np.sum((actual - predicted) ** 2))
    spread = float(np.sum((actual - np.mean(actual)) ** 2))
    if spread == 0:
        return 1.0 if residual == 0 else 0.0
    return 1 - residual / spread


def r2_interval(actual, predicted, resamples: int, seed: int) -> tuple[float, float]:
    rng = np.random.default_rng([seed, 4])
    n = len(actual)
    values = np.empty(resamples)
    chunk = max(1, 2_000_000 // max(n, 1))
    for start in range(0, resamples, chunk):
        stop = min(resamples, start + chunk)
        picks = rng.integers(0, n, size=(stop - start, n))
        a, p = actual[picks], predicted[picks]
        residual = np.sum((a - p) ** 2, axis=1)
        spread = np.sum((a - a.mean(axis=1, keepdims=True)) ** 2, axis=1)
        with np.errstate(invalid="ignore", divide="ignore"):
            values[start:stop] = np.where(spread > 0, 1 - residual / np.where(
                spread > 0, spread, 1.0), np.where(residual == 0, 1.0, 0.0))
    tail = (1 - INTERVAL_LEVEL) / 2 * 100
    low, high = np.percentile(values, [tail, 100 - tail])
    return float(low), float(high)


def mean_of(splits: list[dict]) -> dict:
    keys = [k for k in splits[0] if k not in ("split", "train_rows", "test_rows")]
    return {k: float(np.mean([s[k] for s in splits])) for k in keys}


def std_of(splits: list[dict]) -> dict:
    keys = [k for k in splits[0] if k not in ("split", "train_rows", "test_rows")]
    return {k: float(np.std([s[k] for s in splits])) for k in keys}


def below_baseline_text(metrics: dict, baseline: dict) -> str:
    """Why a classifier's accuracy can sit below the majority-class baseline ('' when it
    does not): its classes are weighted equally, and the verdict rests elsewhere."""
    if metrics.get("accuracy") is None or metrics["accuracy"] >= baseline.get("accuracy", 0):
        return ""
    return ("Accuracy is below always guessing the most common class because the fit weighs "
            "the classes equally: it gives up some of the common class to find the rare one. "
            "Balanced accuracy and the Matthews correlation, on which the verdict rests, "
            "allow for the class sizes.")
