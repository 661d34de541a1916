"""One run of the separator's protocol, from the prepared run to the result's fields: split 1
and the later splits, the report of split 1 against its baseline, the permutation test, the
learning curve, the equation, the objects whose target is open, and the verdict.

:func:`run_protocol` returns the fields of :class:`analysis.separation.SeparatorResult`
(with ``decision`` as the fields of its decision scores); the step builds the result.
"""

from __future__ import annotations

import time

import numpy as np

from analysis.errors import StepError
from analysis.notes import Note
from analysis.plain import row_id
from analysis.progress import Reporter
from analysis.separator_checks import importance, learning_curve, permutation_test
from analysis.separator_equation import equation_part
from analysis.separator_metrics import (
    CHANCE_LEVEL,
    CLASS_RULE,
    REGRESSION_RULE,
    class_report,
    mean_of,
    mispredicted,
    regression_report,
    split_metrics,
    std_of,
)
from analysis.separator_models import class_confidence, fit, predict, shares_process_random
from analysis.separator_prepare import PreparedRun, RunLog, prepare, target_follows
from analysis.separator_protocol import (
    identical_across,
    make_splits,
    on_workers,
    share_sample,
    split_workers,
    subsample,
)
from analysis.table import Table

# Objects with an open target value predicted at most.
OPEN_PREDICTION_LIMIT = 5000
ROW_ID_LIST_LIMIT = 5000


def run_protocol(step, table: Table, progress: Reporter) -> dict:
    """Prepare ``step`` on ``table``, run the validation protocol and find the equation;
    the result's fields."""
    log = RunLog()
    run = prepare(step, table, progress, log)
    progress.phase("checking whether the target follows from the features")
    follows = log.clocked("target check", target_follows, run)
    return _protocol(run, follows)


def _protocol(run: PreparedRun, follows) -> dict:
    step, log, y = run.step, run.log, run.y
    n = len(y)
    strata = None if run.regression else y
    splits, split_method = make_splits(n, strata, run.group_labels, float(step.train_fraction),
                                       step.repeats, step.seed, run.table.name)
    per_split, first = _fit_splits(run, splits, strata)
    if run.big and len(splits) > 1:
        log.notes.append(Note("splits_sampled", f"the table is large ({n} rows): splits 2 "
                              f"to {len(splits)} were fitted on a random sample of at most "
                              f"{step.sample_rows} of their training rows (split 1 on all of "
                              "its), and each was scored on all its test rows.", rows=n,
                              splits=len(splits), sample=step.sample_rows))
    train, test, model, predicted = first
    repeats = {"splits": per_split, "mean": mean_of(per_split), "std": std_of(per_split)}
    identical = _identical_warning(run, splits)
    if run.regression:
        metrics, baseline, interval = regression_report(run, train, test, predicted)
        confusion = None
    else:
        metrics, baseline, interval, confusion = class_report(run, test, predicted)
    run.progress.phase("permutation importance of the features")
    ranked = log.clocked("importance", importance, run, model, test)
    p_value, null, observed, permutation_method, permutations_run = log.clocked(
        "permutation test", permutation_test, run, train, test, predicted)
    statistic = metrics["r2_ci"] if run.regression else metrics["mcc_ci"]
    beats = bool(statistic[0] is not None and statistic[0] > 0 and p_value is not None
                 and p_value < CHANCE_LEVEL)
    curve = log.clocked("learning curve", learning_curve, run, model)
    wrong = mispredicted(run, model, test, predicted)
    run.progress.phase("searching the exact equation")
    equation_fields, full_model = log.clocked("fit on every row and exact equation",
                                              equation_part, run, model)
    run.progress.phase("predicting the open values")
    open_predictions = log.clocked("open values", _open_predictions, run, full_model, test,
                                   predicted)
    if run.regression and run.integer_target and equation_fields.get("formula"):
        _formula_baseline(run, equation_fields["formula"], test, metrics, baseline)
    small = n <= ROW_ID_LIST_LIMIT
    ids = run.fm.row_ids
    carried = "the metrics" if run.regression else "the metrics, the confusion matrix"
    log.notes.append(Note("splits", f"split 1 carries {carried}, the interval and the "
                          f"permutation test; {len(splits)} splits give the mean and spread.",
                          splits=len(splits)))
    log.notes.extend(sorted(log.fit_warnings))
    return dict(
        target=step.target, model=step.model,
        task="regression" if run.regression else "classification",
        classes=tuple(run.classes), positive_class=run.positive_class,
        metrics=metrics, baseline=baseline, permutation_p=p_value,
        permutation_scores=tuple(float(v) for v in null),
        permutation_observed=observed, permutation_method=permutation_method,
        beats_chance=beats,
        beats_chance_rule=REGRESSION_RULE if run.regression else CLASS_RULE,
        interval_method=interval, confusion_matrix=confusion, repeats=repeats,
        learning_curve=tuple(curve), train_rows=len(train), test_rows=len(test),
        train_row_ids=tuple(ids[train].tolist()) if small else None,
        test_row_ids=tuple(ids[test].tolist()) if small else None,
        split_method=split_method, identical_rows_across_split=identical,
        kernel_method=run.kernel_method, mispredicted=tuple(wrong),
        warnings=tuple(log.warnings), notes=tuple(log.notes), rows_used=n,
        permutations_run=permutations_run, left_out_columns=run.left_out,
        target_follows=follows, importance=ranked,
        open_predictions=tuple(open_predictions), reading=run.reading,
        phase_seconds=tuple(log.phase_seconds.items()), **equation_fields,
    )


def _identical_warning(run: PreparedRun, splits) -> int:
    """Split 1's test rows with the features of a training row, and a warning when any."""
    train, test = splits[0]
    identical = identical_across(run.X, train, test)
    if identical:
        others = sum(1 for tr, te in splits[1:] if identical_across(run.X, tr, te))
        if run.group_labels is None:
            advice = ("If these are copies of one object, name a group column (groups), "
                      "or the matrix column, so they stay on one side.")
        else:
            advice = ("They belong to other groups than their training twins: the "
                      "features cannot tell these objects apart.")
        run.log.warnings.append(Note(
            "test_rows_seen",
            f"{identical} test {'row' if identical == 1 else 'rows'} of split 1 "
            f"{'has' if identical == 1 else 'have'} the same feature values as a training "
            f"row (and {others} of the other {len(splits) - 1} splits have such rows): "
            f"the separator is partly scored on rows it has seen. {advice}",
            rows=identical, splits=others, grouped=run.group_labels is not None))
    return identical


def _formula_baseline(run: PreparedRun, formula, test, metrics: dict, baseline: dict) -> None:
    """For a whole-number target: the closest formula's exact share as a second baseline."""
    from analysis.integer_target import exact_share

    by_formula = exact_share(run.y[test], formula.predict(run.X[test]))
    baseline["formula_exact"] = by_formula.share
    baseline["formula"] = formula.text
    best = max(baseline["exact"], by_formula.share)
    low = metrics["exact_ci"][0]
    metrics["exact_beats_baselines"] = bool(low > best)


def _fit_splits(run: PreparedRun, splits, strata) -> tuple[list[dict], tuple]:
    """Fit and score every split; split 1 first (its figures are reported at once), the
    others on worker threads. Each fit is seeded by its split alone, so the numbers do not
    depend on the number of workers."""
    step = run.step

    def one(index):
        train, test = splits[index]
        fit_rows = train
        if run.big and index > 0:
            # a large table: split 1 is fitted on all its training rows; the others,
            # which only give the spread over splits, on a sample of them
            if run.group_labels is None:
                fit_rows = share_sample(train, None if strata is None else strata[train],
                                        step.sample_rows, step.seed + 41 + index)
            else:
                fit_rows = subsample(train, None if strata is None else strata[train],
                                     step.sample_rows, step.seed + 41 + index,
                                     groups=run.group_labels)
        # splits 2 on only give scores: their linear machine may be solved exactly, from
        # split 1's separator
        model = fit(run, fit_rows, seed_offset=index, for_scores=index > 0,
                    near=None if index == 0 else first[2])
        predicted = predict(model, run.X[test])
        metrics = split_metrics(run, fit_rows, test, predicted)
        record = {"split": index + 1, "train_rows": len(fit_rows), "test_rows": len(test),
                  **metrics}
        return record, (train, test, model, predicted)

    run.progress.phase("fitting the splits", total=len(splits))
    record, first = run.log.clocked("split 1", one, 0)
    run.progress.first_figures(**_first_figures(record))
    run.progress.advance()
    per_split = [record]
    started = time.perf_counter()
    largest = max((len(train) for train, _ in splits[1:]), default=0)
    workers = split_workers(run.kernel_mode, largest,
                            one_at_a_time=shares_process_random(run.step))
    for record, _ in on_workers(one, range(1, len(splits)), workers):
        per_split.append(record)
        run.progress.advance()
    run.log.phase_seconds["later splits"] = time.perf_counter() - started
    return per_split, first


def _first_figures(metrics: dict) -> dict:
    """Split 1's figures the page may show before the slower parts end."""
    keys = ("accuracy", "baseline_accuracy", "mcc", "r2", "baseline_r2")
    return {key: metrics[key] for key in keys if metrics.get(key) is not None}


def _open_predictions(run: PreparedRun, model, test, predicted) -> list[dict]:
    """Objects whose target is missing or an interval, predicted by ``model`` (fitted on
    the known rows; split 1's model past the equation's search sample), with its confidence."""
    from analysis.features import build_features

    table, step = run.table, run.step
    known = np.zeros(table.n_rows, dtype=bool)
    known[run.fm.rows] = True
    if known.all():
        # every row was used, so no object waits for a prediction: building the features
        # of the whole table again (seconds for a matrix column) would find none
        return []
    intervals = _target_intervals(table, step.target)
    try:
        every = build_features(table, columns=list(run.fm.columns),
                               array_encoding=step.array_encoding,
                               log_scale=step.log_scale, missing=step.missing,
                               intervals=step.intervals)
    except StepError:
        return []
    names_match = every.names == run.fm.names
    wanted = ~known[every.rows]
    if not names_match or not wanted.any():
        return []
    rows = every.rows[wanted][:OPEN_PREDICTION_LIMIT]
    X = np.ascontiguousarray(every.values[wanted][:OPEN_PREDICTION_LIMIT])
    guesses = np.asarray(predict(model, X))
    if run.regression:
        typical = float(np.mean(np.abs(run.y[test] - predicted)))
        confidence = np.full(len(rows), np.nan)
    else:
        confidence = class_confidence(model, X)
        typical = None
    out = []
    for k, position in enumerate(rows):
        interval = intervals.get(int(position))
        value = float(guesses[k]) if run.regression else run.classes[int(guesses[k])]
        estimate = value
        if run.regression and run.integer_target:
            # a whole-number target is predicted as a whole number, as it is scored
            value = int(round(value))
        inside = None
        if interval is not None and run.regression:
            inside = bool(interval[0] <= value <= interval[1])
        out.append({"row": row_id(table.row_ids[position]), "prediction": value,
                    "estimate": estimate,
                    "confidence": None if np.isnan(confidence[k]) else float(confidence[k]),
                    "typical_error": typical,
                    "interval": None if interval is None else [float(interval[0]),
                                                               float(interval[1])],
                    "inside": inside})
    if len(out):
        run.log.notes.append(Note("open_predictions", f"{len(out)} objects with no known "
                                  f"value of {step.target!r} are predicted by the model fitted "
                                  "on the known rows: predictions to check by hand, not "
                                  "values.", objects=len(out), target=step.target))
    return out


def _target_intervals(table, target: str) -> dict:
    """Position -> (low, high) of the target's interval cells (none for most tables)."""
    reader = getattr(table, "intervals", None)
    if reader is None:
        return {}
    found = reader(target)
    return {int(p): (float(lo), float(hi))
            for p, lo, hi in zip(found.positions, found.low, found.high)}
