"""The separator's checks beyond split 1's score: the permutation test against chance (labels
shuffled on the training side and the model refitted, in closed form where one exists), the
learning curve, and the permutation importance of the features.

Each takes the prepared run (:class:`analysis.separator_prepare.PreparedRun`) and is seeded
by the step's seed alone.
"""

from __future__ import annotations

import warnings as _warnings

import numpy as np

from analysis.errors import StepError
from analysis.notes import Note
from analysis.separator_metrics import CHANCE_LEVEL, score
from analysis.separator_models import (
    KernelRefits,
    LabelRefits,
    exact_solver_applies,
    fit,
    fit_ignores_seed,
    kernel_expansion,
    predict,
    shares_process_random,
)
from analysis.separator_protocol import (
    KERNEL_CURVE_ROWS,
    KERNEL_PERMUTATION_ROWS,
    KERNEL_PERMUTATION_TEST_ROWS,
    LARGE_PERMUTATION_ROWS,
    make_splits,
    on_workers,
    share_sample,
    split_workers,
    subsample,
)
from analysis.threads import one_thread_each, refit_workers

LEARNING_FRACTIONS = (0.1, 0.2, 0.3, 0.4, 0.5, 0.6, 0.7, 0.8)
LEARNING_REPEATS = 3


def permutation_test(run, train, test, predicted):
    """The sequential permutation test on split 1 (``predicted``: its model's predictions
    on ``test``): (p-value, shuffled scores, observed score, method, shuffles run)."""
    from analysis.permutation import sequential_test

    step = run.step
    count = step.permutations
    if count == 0:
        return None, (), None, "skipped (permutations = 0)", 0
    kernel = run.kernel_method is not None
    train_limit = KERNEL_PERMUTATION_ROWS if kernel else step.sample_rows
    if run.big:
        count = min(count, 50)
        train_limit = min(train_limit, LARGE_PERMUTATION_ROWS)
    rng = np.random.default_rng([step.seed, 11])
    strata = None if run.regression else run.y
    # a large table's few thousand rows are drawn class by class with numpy (see
    # share_sample); scikit-learn's stratified splitter takes longer than the refits
    sampler = share_sample if run.big else subsample
    train_part = train if len(train) <= train_limit else sampler(
        train, None if strata is None else strata[train], train_limit, step.seed + 23)
    test_limit = KERNEL_PERMUTATION_TEST_ROWS if kernel else step.sample_rows
    test_part = test if len(test) <= test_limit else np.sort(
        rng.choice(test, test_limit, replace=False))
    if len(train_part) == len(train) and len(test_part) == len(test) \
            and fit_ignores_seed(step.model, run.kernel_mode) and not exact_solver_applies(run):
        # the same rows, the same solver and a fit that does not use its seed: split 1's
        # model is the refit, so its predictions give the observed score
        observed = score(run, run.y[test], predicted)
        observed_model = None
    else:
        # the observed score comes from the refits' own solver, so that the true and the
        # shuffled labels meet the same statistic
        observed_model = fit(run, train_part, seed_offset=1000, for_scores=True)
        observed = score(run, run.y[test_part], predict(observed_model, run.X[test_part]))
    score_of, shortcut, shared = _shuffled_scorer(run, train_part, test_part, observed_model)
    run.progress.phase("permutation test", total=count)
    workers = 1 if shortcut or shares_process_random(step) else refit_workers()
    with one_thread_each(workers):
        test_result = sequential_test(observed, score_of, cap=count, workers=workers,
                                      reporter=run.progress)
    statistic = ("R^2" if run.regression else "Matthews correlation") + " on the test rows"
    method = test_result.method(statistic)
    if shortcut:
        method += f"; refits in closed form ({shortcut})"
    if shared:
        method += f"; {shared}"
    if len(train_part) < len(train) or len(test_part) < len(test):
        method += (f"; on a sample of {len(train_part)} training and {len(test_part)} "
                   f"test rows, with the observed score {observed:.3f} refitted on the "
                   "same sample")
    if count < step.permutations:
        method += f" (at most 50 shuffles, fewer than the {step.permutations} asked: the " \
                  "table is large)"
    if test_result.smallest_possible >= CHANCE_LEVEL:
        run.log.notes.append(Note("few_permutations", f"at most {count} permutations: the "
                                  "smallest possible p-value is "
                                  f"{test_result.smallest_possible:.3f}, so the verdict cannot "
                                  "be yes.", permutations=count,
                                  smallest_p=float(test_result.smallest_possible)))
    return (float(test_result.p_value), test_result.scores, float(observed), method,
            test_result.count)


def _shuffled_scorer(run, train_part, test_part, observed_model=None):
    """``score_of(i)``: the score of a refit on the i-th shuffle of the training labels,
    seeded by ``i`` alone; the closed form used for the refits (None: real refits); and the
    words for work the refits share (None: none).

    Ridge regression and two-class LDA without copies refit in closed form
    (analysis/refits.py); a kernel machine is refitted from its kernel matrix or Nystroem
    features, computed once (separator_models.KernelRefits; ``observed_model`` is the fit on
    ``train_part`` with the refits' seed, when the caller has it); every other model is
    refitted.
    """
    from analysis.refits import LdaShuffles, RidgeShuffles

    step = run.step
    y = run.y
    truth = y[test_part]

    def shuffled(i):
        labels = y.copy()
        labels[train_part] = np.random.default_rng([step.seed, 11, i]).permutation(
            y[train_part])
        return labels

    plain_fit = run.copy_values is None and run.kernel_mode == "exact"
    if plain_fit and step.model == "linear" and run.regression and step.penalty == "l2":
        closed = RidgeShuffles(run.X[train_part], run.X[test_part], alpha=1.0 / step.c)
        return (lambda i: score(run, truth, closed.predict(shuffled(i)[train_part])),
                "ridge regression is a linear smoother", None)
    if plain_fit and step.model == "lda" and not run.regression and run.n_classes == 2:
        closed = LdaShuffles(run.X[train_part], run.X[test_part])
        if closed.usable:
            return (lambda i: score(run, truth, closed.predict(shuffled(i)[train_part])),
                    "two-class LDA through one solve with the total scatter matrix", None)

    if KernelRefits.usable(run, train_part):
        reference = observed_model or fit(run, train_part, seed_offset=1000)
        kernel = KernelRefits(run, reference, run.X[train_part], run.X[test_part])
        return ((lambda i: score(run, truth, kernel.predict(shuffled(i)[train_part]))), None,
                kernel.words)

    refits = LabelRefits(run, train_part, test_part, seed_offset=1000)

    def refit(i):
        return score(run, truth, refits.predict(shuffled(i)))

    exact = None
    if exact_solver_applies(run):
        exact = ("each refit, and the fit giving the observed score, solved to its minimum by "
                 "Newton's method (the same problem as liblinear's)")
    return refit, None, exact


def learning_curve(run, near=None) -> list[dict]:
    """Mean and spread of the score at each training fraction of ``LEARNING_FRACTIONS``
    (``near``: split 1's model, where the fits may start; see separator_models.fit)."""
    step = run.step
    kernel = run.kernel_method is not None
    limit = KERNEL_CURVE_ROWS if kernel else step.sample_rows
    n = len(run.y)
    pool = np.arange(n)
    if n > limit:
        pool = subsample(pool, None if run.regression else run.y, limit,
                         step.seed + 31, groups=run.group_labels)
        run.log.notes.append(Note("curve_sample", f"learning curve on a sample of {len(pool)} "
                                  f"of the {n} rows.", sample=len(pool), rows=n))
    planned, skipped = _curve_splits(run, pool)

    def one(job):
        j, train, test = job
        model = fit(run, pool[train], seed_offset=2000 + j, for_scores=True, near=near)
        return score(run, run.y[pool[test]], predict(model, run.X[pool[test]]))

    jobs = [(j, train, test) for _, splits in planned
            for j, (train, test) in enumerate(splits)]
    run.progress.phase("learning curve", total=len(LEARNING_FRACTIONS))
    ends = np.cumsum([len(splits) for _, splits in planned]).tolist()
    scores = []
    workers = split_workers(run.kernel_mode, len(pool),
                            one_at_a_time=shares_process_random(run.step))
    for value in on_workers(one, jobs, workers):
        scores.append(value)
        if len(scores) in ends:
            run.progress.advance()
    points = []
    for (fraction, splits), end in zip(planned, ends):
        mine = scores[end - len(splits):end]
        points.append({"train_fraction": fraction,
                       "train_rows": int(np.mean([len(t) for t, _ in splits])),
                       "metric": "r2" if run.regression else "mcc",
                       "mean": float(np.mean(mine)), "std": float(np.std(mine)),
                       "scores": [float(v) for v in mine]})
    if skipped:
        run.log.notes.append(Note("curve_fractions_skipped", "learning curve: no valid split "
                                  f"at training fraction {', '.join(map(str, skipped))} (too "
                                  "few rows per class or group).", fractions=tuple(skipped)))
    return points


def _curve_splits(run, pool: np.ndarray) -> tuple[list, list]:
    """The learning curve's splits of ``pool`` at each fraction, and the fractions where
    no valid split exists."""
    step = run.step
    strata = None if run.regression else run.y[pool]
    groups = None if run.group_labels is None else run.group_labels[pool]
    skipped = []
    planned = []
    for k, fraction in enumerate(LEARNING_FRACTIONS):
        try:
            splits, _ = make_splits(len(pool), strata, groups, fraction, LEARNING_REPEATS,
                                    step.seed + 101 * (k + 1), run.table.name)
        except StepError:
            skipped.append(fraction)
            continue
        if not run.regression and any(len(np.unique(run.y[pool[train]])) < 2
                                      for train, _ in splits):
            # a rare class can miss a small training side entirely: no fit is possible
            skipped.append(fraction)
            continue
        planned.append((fraction, splits))
    return planned, skipped


def importance(run, model, test) -> tuple:
    """Permutation importance of every feature on split 1's test rows (seeded).

    The scorer is the protocol's own (Matthews correlation from the confusion counts, or
    R^2), the same numbers as scikit-learn's scorers to rounding, without their checks of
    every call's input, which took most of the time (a 16 x 16 matrix column gives dozens
    of features, each scored five times)."""
    from analysis.importance import ShuffledKernelRows, permutation_importances

    rows = test
    limit = KERNEL_PERMUTATION_TEST_ROWS if run.kernel_method is not None else None
    if limit and len(rows) > limit:
        rows = np.sort(np.random.default_rng([run.step.seed, 43]).choice(
            rows, limit, replace=False))

    # an RBF machine is scored on the shuffled rows from work done once per column
    # (importance.ShuffledKernelRows); other models by their own predictions
    expansion = kernel_expansion(model)
    shuffles = None if expansion is None else ShuffledKernelRows(expansion, run.X[rows])

    def scorer(estimator, X, y):
        if shuffles is not None and estimator is model:
            return score(run, y, np.asarray(shuffles.predict(X)))
        return score(run, y, np.asarray(predict(estimator, X)))

    with _warnings.catch_warnings():
        _warnings.simplefilter("ignore")
        return permutation_importances(
            model, run.X[rows], run.y[rows], list(run.fm.names),
            [f.column for f in run.fm.features], scorer, seed=run.step.seed)
