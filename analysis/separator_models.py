"""The separator's models: the scikit-learn pipeline of each model, the kernel method past
the exact machine's row limit (Nystroem features or a sample), the fitting recipe (samples,
permuted copies, solver warnings), and predictions and decision values of a fitted pipeline.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from analysis.errors import StepError
from analysis.notes import Note
from analysis.separator_protocol import subsample

# each model and its words for a class target; the step's record of settings offers these
MODEL_WORDS = {
    "linear": "linear support vector machine",
    "logistic": "logistic regression",
    "lda": "linear discriminant analysis",
    "rbf": "support vector machine with an RBF kernel",
    "poly2": "support vector machine with a degree-2 polynomial kernel",
}
MODELS = tuple(MODEL_WORDS)
REGRESSION_WORDS = {
    "linear": "linear regression (ridge)",
    "rbf": "support vector regression with an RBF kernel",
    "poly2": "ridge regression on degree-2 monomials",
}
NYSTROEM_COMPONENTS = 1000
# A Nystroem machine is fitted on at most this many rows (a stratified sample of the training
# rows past it): its features take components x rows x 8 bytes, and the linear solver copies
# them again, about 1.2 GB at this size and 12 GB for half of a million-row table.
NYSTROEM_FIT_ROWS = 50_000
# Rows a fitted pipeline evaluates at once, so that Nystroem features stay small in memory.
PREDICT_BLOCK_ROWS = 20_000


def kernel_method(step, n: int, regression: bool, table_name: str) -> tuple[str, str | None]:
    """How the step's kernel machine is fitted on ``n`` rows: the mode ("exact", "nystroem"
    or "sample") and the sentence the notes give (None when the model has no kernel)."""
    kernel = step.model == "rbf" or (step.model == "poly2" and not regression)
    mode = "exact"
    if not kernel:
        return mode, None
    if n > step.kernel_row_limit:
        if step.kernel_approximation == "exact":
            raise StepError(
                f"{table_name}: model {step.model!r} on {n} rows: an exact kernel "
                f"machine past {step.kernel_row_limit} rows takes too long and too much "
                "memory. Set kernel_approximation to 'auto' (Nystroem features with a "
                "linear machine) or 'sample' (the exact machine on a sample of "
                f"{step.kernel_row_limit} rows), raise kernel_row_limit, or use the "
                "linear model.")
        mode = "sample" if step.kernel_approximation == "sample" else "nystroem"
    elif step.kernel_approximation == "nystroem":
        mode = "nystroem"
    if mode == "nystroem":
        method = (f"approximate: Nystroem features ({_components(n)} "
                  "components on all rows, a quarter of the training rows up "
                  f"to {NYSTROEM_COMPONENTS} in every fit; seeded) with a "
                  "linear machine")
        if n > NYSTROEM_FIT_ROWS:
            method += (f", each fit on at most {NYSTROEM_FIT_ROWS} of its "
                       "training rows (a stratified sample)")
    elif mode == "sample":
        method = (f"exact kernel machine fitted on a stratified sample of at "
                  f"most {step.kernel_row_limit} training rows")
    else:
        method = "exact kernel machine"
    return mode, method


def fit(run, train: np.ndarray, labels: np.ndarray | None = None, *, seed_offset: int = 0,
        for_scores: bool = False, near=None):
    """Fit the model of ``run`` (a prepared run) on ``train`` rows (labels default to the
    true ones), with the permuted copies of those rows; solver warnings go to its log.

    ``for_scores``: the fit only scores held-out rows (the later splits, the learning curve,
    the permutation test), so a two-class linear machine is solved by
    :class:`analysis.linear_machine.ExactLinearMachine` (see :func:`exact_solver_applies`);
    its Newton steps then start from the separator of ``near`` (a fitted two-class linear
    pipeline, split 1's), rescaled to this fit's scaler: the same minimum, in a few steps.
    """
    step = run.step
    y = run.y if labels is None else labels
    rows = train
    if run.kernel_mode == "sample" and len(rows) > step.kernel_row_limit:
        rows = subsample(rows, None if run.regression else y[rows],
                         step.kernel_row_limit, step.seed + 17 + seed_offset)
    if run.kernel_mode == "nystroem" and len(rows) > NYSTROEM_FIT_ROWS:
        rows = subsample(rows, None if run.regression else y[rows],
                         NYSTROEM_FIT_ROWS, step.seed + 19 + seed_offset)
    X_train = run.X[rows]
    y_train = y[rows]
    if run.copy_values is not None:
        chosen = np.isin(run.copy_source, rows)
        X_train = np.vstack([X_train, run.copy_values[chosen]])
        y_train = np.concatenate([y_train, y[run.copy_source[chosen]]])
    exact = for_scores and exact_solver_applies(run)
    estimator = make_estimator(step, regression=run.regression, n_classes=run.n_classes,
                               kernel_mode=run.kernel_mode, n_rows=len(y_train),
                               seed=step.seed + seed_offset, exact_solver=exact)
    with checked_once():
        start = _raw_separator(near) if exact else None
        if start is None:
            estimator.fit(X_train, y_train)
        else:
            # the pipeline's two steps fitted in turn, as its fit does, with the start in
            # the scaled units of this fit
            scaler = estimator[0]
            scaled = scaler.fit_transform(X_train)
            coef, intercept = start
            estimator[-1].fit(scaled, y_train, start=np.append(
                coef * scaler.scale_, intercept + float(np.sum(coef * scaler.mean_))))
    # read off the fitted estimator, not from the solvers' warnings: fits run on threads,
    # and Python's record of warnings is one for the whole process
    run.log.fit_warnings.update(solver_notes(estimator, X_train, y_train))
    return estimator


def _raw_separator(model) -> tuple[np.ndarray, float] | None:
    """A fitted two-class linear pipeline (a standardizing scaler, then a linear machine)
    written as coef . x + intercept on the unscaled features, clipping aside; None for other
    models or none."""
    steps = getattr(model, "steps", None)
    if steps is None or len(steps) != 2:
        return None
    scaler, machine = steps[0][1], steps[1][1]
    coef = getattr(machine, "coef_", None)
    if coef is None or np.shape(coef)[0] != 1 or getattr(scaler, "scale_", None) is None:
        return None
    raw = np.asarray(coef[0], dtype=np.float64) / scaler.scale_
    return raw, float(machine.intercept_[0]) - float(np.sum(raw * scaler.mean_))


def exact_solver_applies(run) -> bool:
    """Whether the run's model is the two-class linear machine with an L2 penalty, which
    :class:`analysis.linear_machine.ExactLinearMachine` solves: the fits that only give
    scores on held-out rows use it; split 1 and the fit on every row, whose coefficients
    the equation reads, keep liblinear's. Up to ``MOST_FEATURES`` features, where its numbers
    do not depend on the threads."""
    step = run.step
    if not (step.model == "linear" and step.penalty == "l2" and not run.regression
            and run.n_classes == 2 and run.kernel_mode == "exact"):
        return False
    from analysis.linear_machine import MOST_FEATURES

    return run.X.shape[1] <= MOST_FEATURES


def checked_once():
    """A context (for this thread alone: scikit-learn's settings are per thread) in which
    scikit-learn neither checks the settings of each estimator again nor searches every
    matrix for infinite values. The step's settings are checked when the step starts, and
    the feature matrix holds finite values only (missing and infinite cells are dropped or
    filled in), so both checks only cost time on the protocol's many refits."""
    from sklearn import config_context

    return config_context(assume_finite=True, skip_parameter_validation=True)


class LabelRefits:
    """The run's model refitted on the same training rows with other labels, predicting
    the same test rows each time: the permutation test's refits.

    For a linear classifier fitted on the rows themselves (no sample of them, no permuted
    copies) the scaler does not depend on the labels, so it is fitted, and both sides
    scaled, once; each refit then fits the last step alone. The predictions are those of
    :func:`fit` (with ``for_scores``) then :func:`predict`, number for number. Other models
    refit whole.
    """

    def __init__(self, run, train: np.ndarray, test: np.ndarray, *, seed_offset: int):
        self._run = run
        self._train = train
        self._seed_offset = seed_offset
        self._X_test = run.X[test]
        self._scaler = None
        if run.kernel_method is None and not run.regression and run.copy_values is None \
                and run.kernel_mode == "exact":
            pipeline = self._pipeline()
            self._scaler = pipeline[0]
            with checked_once():
                self._X_train = self._scaler.fit_transform(run.X[train])
                self._X_test = self._scaler.transform(self._X_test)

    def _pipeline(self):
        run = self._run
        return make_estimator(run.step, regression=run.regression, n_classes=run.n_classes,
                              kernel_mode=run.kernel_mode, n_rows=len(self._train),
                              seed=run.step.seed + self._seed_offset,
                              exact_solver=exact_solver_applies(run))

    def predict(self, labels: np.ndarray) -> np.ndarray:
        """Predictions on the test rows of the model refitted with ``labels`` (one label
        per row of the run; those of the training rows are used)."""
        if self._scaler is None:
            model = fit(self._run, self._train, labels, seed_offset=self._seed_offset,
                        for_scores=True)
            return predict(model, self._X_test)
        y_train = labels[self._train]
        last = self._pipeline()[-1]
        with checked_once():
            last.fit(self._X_train, y_train)
            predicted = last.predict(self._X_test)
        self._run.log.fit_warnings.update(_final_notes(last, self._X_train, y_train))
        return predicted


ITERATION_LIMIT_NOTE = Note("iteration_limit", "the solver stopped at its iteration limit on "
                            "some fits; the scores still come from held-out rows.")
COLLINEAR_NOTE = Note("collinear_features", "some features are collinear (LDA).")


def solver_notes(estimator, X_train: np.ndarray, y_train: np.ndarray) -> list[Note]:
    """What a fitted pipeline's solver tells about its fit on ``X_train``, ``y_train``:
    the iteration-limit note when its iterations (``n_iter_``, the largest over classes)
    reached ``max_iter``, and for linear discriminant analysis the collinearity note when
    the standardized within-class rows have a lower rank than there are features."""
    pipeline = getattr(estimator, "regressor_", estimator)
    if not hasattr(pipeline, "steps"):
        return _final_notes(pipeline, X_train, y_train)
    last = pipeline[-1]
    if type(last).__name__ == "LinearDiscriminantAnalysis":
        with checked_once():
            X_train = pipeline[:-1].transform(X_train)
    return _final_notes(last, X_train, y_train)


def _final_notes(last, X_seen: np.ndarray, y_train: np.ndarray) -> list[Note]:
    """:func:`solver_notes` of a pipeline's last step, fitted on ``X_seen`` (the rows as
    that step saw them)."""
    notes = []
    n_iter = getattr(last, "n_iter_", None)
    max_iter = getattr(last, "max_iter", None)
    if n_iter is not None and max_iter is not None and max_iter > 0 \
            and int(np.max(n_iter)) >= max_iter:
        notes.append(ITERATION_LIMIT_NOTE)
    if type(last).__name__ == "LinearDiscriminantAnalysis" and \
            _within_class_rank(X_seen, y_train, float(last.tol)) < X_seen.shape[1]:
        notes.append(COLLINEAR_NOTE)
    return notes


def _within_class_rank(X: np.ndarray, y: np.ndarray, tol: float) -> int:
    """The rank the SVD solver of linear discriminant analysis gives the rows centred on
    their class means, each feature divided by its within-class spread and the whole by the
    square root of the row count: its singular values above ``tol``, counted here as the
    eigenvalues of the Gram matrix above ``tol`` squared (the Gram matrix has p x p
    entries, the rows n x p)."""
    X = np.asarray(X, dtype=np.float64)
    labels, codes = np.unique(y, return_inverse=True)
    members = (codes[:, None] == np.arange(len(labels))).astype(np.float64)
    means = (members.T @ X) / members.sum(axis=0)[:, None]
    centred = X - means[codes]
    spread = centred.std(axis=0)
    spread[spread == 0] = 1.0
    centred /= spread * np.sqrt(len(centred))
    eigenvalues = np.linalg.eigvalsh(centred.T @ centred)
    return int(np.sum(eigenvalues > tol * tol))


def fit_ignores_seed(model: str, kernel_mode: str) -> bool:
    """Whether two fits on the same rows give the same model whatever their seeds: the
    linear machine (liblinear's primal solver), ridge, lasso, LDA and exact kernel
    machines do; Nystroem features, samples of the training rows and logistic regression
    (its solvers may shuffle) take the seed."""
    if kernel_mode != "exact" or model == "logistic":
        return False
    return model in ("linear", "lda", "rbf", "poly2")


def make_estimator(step, *, regression: bool, n_classes: int, kernel_mode: str,
                   n_rows: int, seed: int, exact_solver: bool = False):
    """The scikit-learn pipeline for the step's model: always standardized features first.

    ``exact_solver``: the linear machine is
    :class:`analysis.linear_machine.ExactLinearMachine` (the caller checks
    :func:`exact_solver_applies`)."""
    if regression:
        return _regressor(step, kernel_mode=kernel_mode, n_rows=n_rows, seed=seed)
    if exact_solver:
        from sklearn.pipeline import make_pipeline

        from analysis.linear_machine import ExactLinearMachine
        from analysis.scaling import TrainingRangeScaler

        return make_pipeline(TrainingRangeScaler(), ExactLinearMachine(C=float(step.c)))
    return _classifier(step, n_classes=n_classes, kernel_mode=kernel_mode, n_rows=n_rows,
                       seed=seed)


def _regressor(step, *, kernel_mode: str, n_rows: int, seed: int):
    from sklearn.compose import TransformedTargetRegressor
    from sklearn.linear_model import Lasso, Ridge
    from sklearn.pipeline import make_pipeline
    from sklearn.preprocessing import StandardScaler

    from analysis.scaling import TrainingRangeScaler

    c = float(step.c)
    model = step.model
    if model == "linear":
        inner = Ridge(alpha=1.0 / c) if step.penalty == "l2" else Lasso(
            alpha=0.01 / c, max_iter=5000)
        pipeline = make_pipeline(TrainingRangeScaler(), inner)
    elif model == "poly2":
        from sklearn.preprocessing import PolynomialFeatures

        pipeline = make_pipeline(TrainingRangeScaler(), PolynomialFeatures(2),
                                 StandardScaler(), Ridge(alpha=1.0 / c))
    else:
        if kernel_mode == "nystroem":
            from sklearn.kernel_approximation import Nystroem

            pipeline = make_pipeline(
                TrainingRangeScaler(),
                Nystroem(kernel="rbf", n_components=_components(n_rows),
                         random_state=seed),
                Ridge(alpha=1.0 / c))
        else:
            from sklearn.svm import SVR

            pipeline = make_pipeline(TrainingRangeScaler(), SVR(kernel="rbf", C=c,
                                                           gamma="scale"))
    # the target is standardized too, so the penalty means the same at any scale
    return TransformedTargetRegressor(regressor=pipeline, transformer=StandardScaler())


def shares_process_random(step) -> bool:
    """Whether the step's fits draw from the C library's one random state of the process.

    liblinear's l1 solvers (the linear machine and the two-class logistic regression with
    penalty l1) shuffle their coordinates with C's rand(), seeded per fit but shared by the
    whole process: two such fits at once on threads interleave their draws, and the same
    seed then does not give the same numbers. Such fits run one at a time.
    """
    return step.penalty == "l1" and step.model in ("linear", "logistic")


def _classifier(step, *, n_classes: int, kernel_mode: str, n_rows: int, seed: int):
    from sklearn.pipeline import make_pipeline

    from analysis.scaling import TrainingRangeScaler

    c = float(step.c)
    model = step.model
    if model == "linear":
        from sklearn.svm import LinearSVC

        inner = LinearSVC(C=c, penalty=step.penalty, dual=False, class_weight="balanced",
                          max_iter=5000)
    elif model == "logistic":
        from sklearn.linear_model import LogisticRegression

        if step.penalty == "l1":
            solver = "liblinear" if n_classes == 2 else "saga"
            inner = LogisticRegression(C=c, l1_ratio=1.0, solver=solver,
                                       class_weight="balanced", max_iter=5000,
                                       random_state=seed)
        else:
            # liblinear is much quicker than lbfgs on the many small refits of the protocol
            solver = "liblinear" if n_classes == 2 else "lbfgs"
            inner = LogisticRegression(C=c, solver=solver, class_weight="balanced",
                                       max_iter=2000, random_state=seed)
    elif model == "lda":
        from sklearn.discriminant_analysis import LinearDiscriminantAnalysis

        inner = LinearDiscriminantAnalysis(solver="svd")
    elif kernel_mode == "nystroem":
        from sklearn.kernel_approximation import Nystroem
        from sklearn.svm import LinearSVC

        kernel = {"kernel": "rbf"} if model == "rbf" else {"kernel": "poly", "degree": 2,
                                                          "coef0": 1.0}
        return make_pipeline(
            TrainingRangeScaler(),
            Nystroem(n_components=_components(n_rows), random_state=seed,
                     **kernel),
            LinearSVC(C=c, dual=False, class_weight="balanced", max_iter=5000))
    else:
        from sklearn.svm import SVC

        if model == "rbf":
            inner = SVC(kernel="rbf", C=c, gamma="scale", class_weight="balanced")
        else:
            inner = SVC(kernel="poly", degree=2, coef0=1.0, C=c, gamma="scale",
                        class_weight="balanced")
    return make_pipeline(TrainingRangeScaler(), inner)


def _components(rows: int) -> int:
    """Nystroem components for a fit on ``rows`` rows: a quarter of them, 50 to 1000."""
    return int(min(NYSTROEM_COMPONENTS, rows, max(50, rows // 4)))


def predict(model, X: np.ndarray) -> np.ndarray:
    """Predictions of a fitted pipeline (a two-class kernel machine through decision, a
    Nystroem machine through its kernel against the components)."""
    folded = _NystroemMachine.of(model)
    if folded is not None:
        return folded.predict(X)
    linear = _scaled_linear_classifier(model)
    if linear is not None:
        return linear.predict(X)
    if _two_class_svc(model) is None:
        with checked_once():
            return _in_blocks(model, model.predict, X)
    last = model[-1]
    return last.classes_[(decision(model, X) > 0).astype(np.int64)]


def predictions_and_decision(model, X: np.ndarray) -> tuple[np.ndarray, np.ndarray | None]:
    """``predict(model, X)`` and, where the predictions come from decision values (a
    two-class kernel machine, a Nystroem machine), those values from the same evaluation;
    None in their place for other models."""
    folded = _NystroemMachine.of(model)
    if folded is not None:
        scores = folded.decision(X)
        return folded.predict_from(scores), scores
    last = _two_class_svc(model)
    if last is None:
        return np.asarray(predict(model, X)), None
    scores = decision(model, X)
    return last.classes_[(scores > 0).astype(np.int64)], scores


def decision(model, X: np.ndarray) -> np.ndarray:
    """Decision values of a fitted pipeline.

    A two-class kernel machine is evaluated as K(rows, support vectors) @ dual coefficients
    + intercept with one matrix product: the same decision value the machine computes row by
    row, many times faster on the permutation test's repeated scoring. A Nystroem machine is
    evaluated the same way against its components (see :class:`_NystroemMachine`).
    """
    folded = _NystroemMachine.of(model)
    if folded is not None:
        return folded.decision(X)
    last = _two_class_svc(model)
    if last is None:
        with checked_once():
            return np.asarray(_in_blocks(model, model.decision_function, X),
                              dtype=np.float64)
    from sklearn.metrics.pairwise import pairwise_kernels

    scaled = model[0].transform(X)
    options = {"gamma": float(last._gamma)}
    if last.kernel == "poly":
        options.update(degree=last.degree, coef0=float(last.coef0))
    # in blocks, so the kernel matrix stays small on large tables
    out = np.empty(len(scaled))
    step = max(1, 20_000_000 // max(1, len(last.support_vectors_)))
    for start in range(0, len(scaled), step):
        block = pairwise_kernels(scaled[start:start + step], last.support_vectors_,
                                 metric=last.kernel, **options)
        out[start:start + step] = block @ last.dual_coef_[0] + last.intercept_[0]
    return out


def _in_blocks(model, function, X: np.ndarray) -> np.ndarray:
    """``function`` of the rows of ``X``, evaluated ``PREDICT_BLOCK_ROWS`` rows at a time when
    ``model`` makes Nystroem features (each row becomes up to 1000 of them); at once else."""
    if len(X) <= PREDICT_BLOCK_ROWS or not _makes_nystroem_features(model):
        return function(X)
    return np.concatenate([function(X[start:start + PREDICT_BLOCK_ROWS])
                           for start in range(0, len(X), PREDICT_BLOCK_ROWS)])


def _makes_nystroem_features(model) -> bool:
    pipeline = getattr(model, "regressor_", model)
    return any(type(part).__name__ == "Nystroem"
               for _, part in getattr(pipeline, "steps", ()))


class _NystroemMachine:
    """A fitted Nystroem pipeline (scaler, Nystroem features, a linear machine or ridge)
    evaluated without its features.

    The features are phi(x) = K(x, components) @ N^T (N: the map's normalization), and the
    linear part gives phi(x) @ W^T + b. By associativity that is K(x, components) @ (N^T W^T)
    + b: one kernel of each row against the components and a product with a fixed matrix,
    where the features cost a product with the components x components matrix N for every
    row (1000 x 1000 multiplications and additions a row at 1000 components). The values are
    those of the pipeline up to rounding in the last digits.
    """

    def __init__(self, scaler, nystroem, linear, target=None) -> None:
        self.scaler, self.nystroem, self.linear, self.target = scaler, nystroem, linear, target
        coef = np.atleast_2d(np.asarray(linear.coef_, dtype=np.float64))
        self.weights = nystroem.normalization_.T @ coef.T
        self.intercept = np.atleast_1d(np.asarray(linear.intercept_, dtype=np.float64))
        self.kernel_options = {name: getattr(nystroem, name) for name in
                               ("gamma", "degree", "coef0")
                               if getattr(nystroem, name, None) is not None}
        self.kernel_options.update(nystroem.kernel_params or {})

    @classmethod
    def of(cls, model):
        """The folded machine of ``model``, or None when it makes no Nystroem features."""
        target = getattr(model, "transformer_", None)
        pipeline = getattr(model, "regressor_", model)
        parts = [part for _, part in getattr(pipeline, "steps", ())]
        if len(parts) != 3 or type(parts[1]).__name__ != "Nystroem" \
                or not isinstance(parts[1].kernel, str) \
                or not hasattr(parts[2], "coef_"):
            return None
        return cls(parts[0], parts[1], parts[2], target)

    def scores(self, X: np.ndarray) -> np.ndarray:
        """phi(x) @ W^T + b for every row, as rows x outputs."""
        from sklearn.metrics.pairwise import pairwise_kernels

        scaled = self.scaler.transform(X)
        components = self.nystroem.components_
        out = np.empty((len(scaled), self.weights.shape[1]))
        step = PREDICT_BLOCK_ROWS
        for start in range(0, len(scaled), step):
            block = pairwise_kernels(scaled[start:start + step], components,
                                     metric=self.nystroem.kernel, filter_params=True,
                                     **self.kernel_options)
            out[start:start + step] = block @ self.weights + self.intercept
        return out

    def decision(self, X: np.ndarray) -> np.ndarray:
        """The linear machine's decision values (one column for two classes, as its own)."""
        scores = self.scores(X)
        return scores.ravel() if scores.shape[1] == 1 else scores

    def predict(self, X: np.ndarray) -> np.ndarray:
        """Predictions by the linear part's rule: the sign for two classes, the largest
        score for more; a ridge's values in the target's units."""
        return self.predict_from(self.scores(X))

    def predict_from(self, scores: np.ndarray) -> np.ndarray:
        """Predictions from the linear part's scores (rows x outputs, or one column as a
        vector)."""
        scores = scores.reshape(len(scores), -1)
        if self.target is not None or not hasattr(self.linear, "classes_"):
            values = scores if self.target is None else self.target.inverse_transform(scores)
            return values.ravel() if values.shape[1] == 1 else values
        classes = self.linear.classes_
        if scores.shape[1] == 1:
            return classes[(scores[:, 0] > 0).astype(np.int64)]
        return classes[np.argmax(scores, axis=1)]


@dataclass(frozen=True)
class KernelExpansion:
    """A fitted RBF machine written as f(x) = exp(-gamma |z - c|^2) @ weights + intercept over
    its centres c (support vectors, or Nystroem components), z the scaled row, and the rule
    that turns f into predictions (``predictions(scores)``, scores as rows x outputs)."""

    scaler: object
    centres: np.ndarray
    weights: np.ndarray
    intercept: np.ndarray
    gamma: float
    predictions: Callable[[np.ndarray], np.ndarray]


def kernel_expansion(model) -> KernelExpansion | None:
    """The expansion of a fitted two-class RBF support vector machine, support vector
    regression, or RBF Nystroem machine; None for other models."""
    folded = _NystroemMachine.of(model)
    if folded is not None:
        if folded.nystroem.kernel != "rbf":
            return None
        components = folded.nystroem.components_
        gamma = folded.nystroem.gamma
        # scikit-learn's RBF kernel takes 1 / features for an unset gamma
        gamma = 1.0 / components.shape[1] if gamma is None else float(gamma)
        return KernelExpansion(folded.scaler, components, folded.weights, folded.intercept,
                               gamma, folded.predict_from)
    target = getattr(model, "transformer_", None)
    pipeline = getattr(model, "regressor_", model)
    steps = getattr(pipeline, "steps", None)
    if steps is None or len(steps) != 2:
        return None
    machine = steps[-1][1]
    if type(machine).__name__ not in ("SVC", "SVR") or machine.kernel != "rbf":
        return None
    if target is None and (type(machine).__name__ != "SVC" or len(machine.classes_) != 2):
        return None
    weights = np.asarray(machine.dual_coef_[0], dtype=np.float64)[:, None]
    intercept = np.asarray(machine.intercept_[:1], dtype=np.float64)
    if target is None:
        classes = machine.classes_

        def rule(scores):
            return classes[(scores[:, 0] > 0).astype(np.int64)]
    else:
        def rule(scores):
            return target.inverse_transform(scores.reshape(len(scores), -1)).ravel()
    return KernelExpansion(steps[0][1], machine.support_vectors_, weights, intercept,
                           float(machine._gamma), rule)


class KernelRefits:
    """Refits of a fitted kernel pipeline on the same training rows with other labels (the
    permutation test's shuffles), from work done once.

    The scaler, the exact machine's gamma ("scale": from the scaled rows) and the Nystroem
    map (its components drawn from the rows by the fit's seed) do not depend on the labels,
    so every refit has the same kernel matrix (exact machine) or the same features
    (Nystroem). They are computed once from ``reference`` (the pipeline fitted on
    ``train_values`` with the fit's seed) and each refit is the machine's own solver on them:
    the same machine as a refit from scratch, up to rounding in the last digits.
    """

    def __init__(self, run, reference, train_values: np.ndarray,
                 test_values: np.ndarray) -> None:
        from sklearn.base import clone
        from sklearn.metrics.pairwise import pairwise_kernels

        self.run = run
        self.regression = hasattr(reference, "regressor_")
        pipeline = getattr(reference, "regressor_", reference)
        parts = [part for _, part in pipeline.steps]
        scaled_train = parts[0].transform(train_values)
        scaled_test = parts[0].transform(test_values)
        machine = parts[-1]
        if len(parts) == 3:
            # Nystroem features, then a linear machine or ridge on them
            self.train = parts[1].transform(scaled_train)
            self.test = parts[1].transform(scaled_test)
            self.solver = clone(machine)
            self.words = ("each refit on the Nystroem features of the training rows, "
                          "computed once (they do not depend on the labels)")
        else:
            options = {"gamma": float(machine._gamma)}
            if machine.kernel == "poly":
                options.update(degree=machine.degree, coef0=float(machine.coef0))
            self.train = pairwise_kernels(scaled_train, scaled_train, metric=machine.kernel,
                                          **options)
            self.test = pairwise_kernels(scaled_test, scaled_train, metric=machine.kernel,
                                         **options)
            self.solver = clone(machine).set_params(kernel="precomputed")
            self.words = ("each refit on the kernel matrix of the training rows, computed "
                          "once (it does not depend on the labels)")
        self.target = reference.transformer if self.regression else None

    @classmethod
    def usable(cls, run, rows: np.ndarray) -> bool:
        """Whether every fit of ``run`` on ``rows`` uses those rows alone, whatever the
        labels: a kernel model with no permuted copies and no sample drawn by the labels."""
        step = run.step
        if run.kernel_method is None or run.copy_values is not None:
            return False
        if run.kernel_mode == "sample":
            return len(rows) <= step.kernel_row_limit
        if run.kernel_mode == "nystroem":
            return len(rows) <= NYSTROEM_FIT_ROWS
        return True

    def predict(self, labels: np.ndarray) -> np.ndarray:
        """Predictions on the test rows of the machine refitted with ``labels`` (one per
        training row), by the rules of :func:`predict`; solver warnings go to the run's log."""
        from sklearn.base import clone

        solver = clone(self.solver)
        if self.regression:
            from sklearn.compose import TransformedTargetRegressor

            solver = TransformedTargetRegressor(regressor=solver,
                                                transformer=clone(self.target))
        solver.fit(self.train, labels)
        # read off the fitted solver (fits run on threads; see solver_notes)
        self.run.log.fit_warnings.update(solver_notes(solver, self.train, labels))
        if self.regression:
            return solver.predict(self.test)
        if getattr(solver, "kernel", None) == "precomputed" and len(solver.classes_) == 2:
            scores = self.test[:, solver.support_] @ solver.dual_coef_[0] \
                + solver.intercept_[0]
            return solver.classes_[(scores > 0).astype(np.int64)]
        return solver.predict(self.test)


@dataclass(frozen=True)
class _ScaledLinear:
    """A fitted pipeline (TrainingRangeScaler, a two-class linear classifier) predicting with
    the very operations of its own ``predict`` (clip, centre, scale, one product with the
    coefficients, the sign), without scikit-learn's checks of every call's input: the
    permutation test and importance score the same model many times on small blocks."""

    low: np.ndarray
    high: np.ndarray
    mean: np.ndarray
    scale: np.ndarray
    coef: np.ndarray
    intercept: np.ndarray
    classes: np.ndarray

    def predict(self, X: np.ndarray) -> np.ndarray:
        Z = np.clip(np.asarray(X, dtype=np.float64), self.low, self.high)
        Z -= self.mean
        Z /= self.scale
        scores = (Z @ self.coef.T + self.intercept).reshape(-1)
        return self.classes[(scores > 0).astype(np.int64)]


def _scaled_linear_classifier(model) -> _ScaledLinear | None:
    """The pipeline as a _ScaledLinear when it is a TrainingRangeScaler (centring and
    scaling) followed by a two-class LinearSVC or LogisticRegression that predicts through
    scikit-learn's linear rule unchanged; None for any other model."""
    from sklearn.linear_model import LogisticRegression
    from sklearn.svm import LinearSVC

    from analysis.scaling import TrainingRangeScaler

    steps = getattr(model, "steps", None)
    if steps is None or len(steps) != 2:
        return None
    scaler, last = steps[0][1], steps[1][1]
    if type(scaler) is not TrainingRangeScaler or getattr(scaler, "training_min_", None) is None \
            or not (scaler.with_mean and scaler.with_std) or scaler.scale_ is None:
        return None
    kind = type(last)
    # both predict through one inherited rule: the sign of X @ coef.T + intercept
    if not isinstance(last, (LinearSVC, LogisticRegression)) \
            or len(getattr(last, "classes_", ())) != 2 or kind.predict is not LinearSVC.predict \
            or kind.decision_function is not LinearSVC.decision_function \
            or np.ndim(last.coef_) != 2:
        return None
    return _ScaledLinear(scaler.training_min_, scaler.training_max_, scaler.mean_,
                         scaler.scale_, last.coef_, np.asarray(last.intercept_), last.classes_)


def _two_class_svc(model):
    steps = getattr(model, "steps", None)
    if steps is None or len(steps) != 2:
        return None
    last = steps[-1][1]
    if type(last).__name__ != "SVC" or len(last.classes_) != 2:
        return None
    return last


def class_confidence(model, X: np.ndarray) -> np.ndarray:
    """The probability the model gives its predicted class, where it gives probabilities;
    else the distance from the boundary in decision units."""
    if hasattr(model, "predict_proba"):
        try:
            return np.asarray(model.predict_proba(X)).max(axis=1)
        except AttributeError:
            pass
    scores = decision(model, X)
    if scores.ndim == 1:
        return np.abs(scores)
    ordered = np.sort(scores, axis=1)
    return ordered[:, -1] - ordered[:, -2]
