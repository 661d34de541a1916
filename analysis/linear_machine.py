"""The separator's two-class linear machine solved exactly, for the fits that only score
held-out rows (the later splits, the learning curve, the permutation test's refits).

This module imports scikit-learn when it is imported; the separator imports it when it fits.
"""

from __future__ import annotations

import numpy as np
from sklearn.base import BaseEstimator, ClassifierMixin

from analysis.errors import StepError

__all__ = ["MOST_FEATURES", "NEWTON_ITERATIONS", "NEWTON_TOLERANCE",
           "ExactLinearMachine"]

# Newton's method stops once a full step leaves the rows inside the margin as they were (the
# objective is then one quadratic around the step, and the step lands on its minimum), or
# once the gradient is this small a share of its size at zero.
NEWTON_TOLERANCE = 1e-10
NEWTON_ITERATIONS = 200
# Features up to which the weights are the same bits whatever the linear algebra library's
# threads (measured: OpenBLAS solves systems of about 100 unknowns and more on several
# threads, in an order that depends on their number); the separator uses the solver up to it.
MOST_FEATURES = 63


class ExactLinearMachine(ClassifierMixin, BaseEstimator):
    """The separator's two-class linear machine solved by Newton's method.

    The problem is scikit-learn's LinearSVC(dual=False, class_weight="balanced") one:
    minimize 0.5 |w|^2 + sum_i C_i max(0, 1 - s_i (w . x_i + b))^2 with s_i = +1 for the
    second class and -1 for the first, C_i = C n / (2 n_class), and b penalized with w
    (liblinear appends a constant feature 1). liblinear's trust-region solver stops when the
    gradient falls to 1e-4 of its size at zero, and spends most of its time in conjugate
    gradient steps on the few features; here each step solves the (features + 1)-square
    Newton system directly, and the fit ends at the minimum itself (to rounding). With
    shuffled labels nearly every row sits inside the margin, the objective is one quadratic,
    and one or two steps reach it. Predictions: the second class where w . x + b > 0.
    """

    def __init__(self, C: float = 1.0, max_iter: int = NEWTON_ITERATIONS) -> None:
        self.C = C
        self.max_iter = max_iter

    def fit(self, X: np.ndarray, y: np.ndarray,
            start: np.ndarray | None = None) -> ExactLinearMachine:
        """Solve the problem on rows ``X`` (already scaled) with labels ``y``, from the
        weights ``start`` (the coefficients, then the intercept) when given: the same
        minimum, in fewer steps from a start near it."""
        X = np.asarray(X, dtype=np.float64)
        classes = np.unique(y)
        if len(classes) != 2:
            raise StepError(f"the exact linear machine needs two classes; got {len(classes)}.")
        positive = np.asarray(y) == classes[1]
        sign = np.where(positive, 1.0, -1.0)
        counts = np.array([len(y) - positive.sum(), positive.sum()], dtype=np.float64)
        cost = (float(self.C) * len(y) / (2.0 * counts))[positive.astype(np.int64)]
        rows = np.empty((len(X), X.shape[1] + 1))
        rows[:, :-1] = X
        rows[:, -1] = 1.0
        w, self.n_iter_ = _squared_hinge_newton(rows, sign, cost, int(self.max_iter),
                                                 start)
        self.coef_ = w[None, :-1]
        self.intercept_ = w[-1:]
        self.classes_ = classes
        return self

    def decision_function(self, X: np.ndarray) -> np.ndarray:
        """w . x + b for every row."""
        return np.asarray(X, dtype=np.float64) @ self.coef_[0] + self.intercept_[0]

    def predict(self, X: np.ndarray) -> np.ndarray:
        """The second class where the decision value is positive, the first elsewhere."""
        return self.classes_[(self.decision_function(X) > 0).astype(np.int64)]


def _squared_hinge_newton(rows: np.ndarray, sign: np.ndarray, cost: np.ndarray,
                          max_iter: int, start: np.ndarray | None = None
                          ) -> tuple[np.ndarray, int]:
    """Minimize 0.5 |w|^2 + sum cost_i max(0, 1 - sign_i rows_i . w)^2 by Newton's method
    with a backtracking (Armijo) line search, from ``start`` (zero when None or worse than
    zero): the weights and the iterations run. The minimum does not depend on the start (the
    problem is strictly convex); a start near it takes fewer steps.

    Sums over rows are numpy's own (pairwise, fixed order) or :func:`_gram`'s, so the weights
    do not depend on how many threads the linear algebra library runs."""
    width = rows.shape[1]
    w = np.zeros(width) if start is None else np.array(start, dtype=np.float64)
    slack = 1.0 - sign * (rows @ w)
    kept = np.maximum(slack, 0.0)
    objective = 0.5 * float(np.sum(w * w)) + float(np.sum(cost * kept * kept))
    if start is not None and objective > float(np.sum(cost)):
        # a start worse than zero: begin at zero, as without one
        w, slack, objective = np.zeros(width), np.ones(len(rows)), float(np.sum(cost))
    at_zero = -np.sum(rows * (2.0 * cost * sign)[:, None], axis=0)
    first = float(np.sqrt(np.sum(at_zero * at_zero)))
    for iteration in range(1, max_iter + 1):
        inside = slack > 0
        part = rows[inside]
        pull = 2.0 * cost[inside] * sign[inside] * slack[inside]
        gradient = w - np.sum(part * pull[:, None], axis=0)
        size = float(np.sqrt(np.sum(gradient * gradient)))
        if size <= NEWTON_TOLERANCE * first:
            return w, iteration - 1
        hessian = _gram(part, part * (2.0 * cost[inside])[:, None])
        hessian[np.diag_indices(width)] += 1.0
        direction = -np.linalg.solve(hessian, gradient)
        moved = sign * (rows @ direction)
        slope = float(np.sum(gradient * direction))
        step = 1.0
        while True:
            trial_slack = slack - step * moved
            kept = np.maximum(trial_slack, 0.0)
            trial_w = w + step * direction
            trial = 0.5 * float(np.sum(trial_w * trial_w)) + float(np.sum(cost * kept * kept))
            if trial <= objective + 0.01 * step * slope or step < 1e-12:
                break
            step *= 0.5
        w, slack, objective = trial_w, trial_slack, trial
        if step == 1.0 and np.array_equal(slack > 0, inside):
            return w, iteration
    return w, max_iter


# Matrix products of at most this many multiplications run on one thread in OpenBLAS, and so
# add up in one order however many threads it may use; a larger one may split its sum.
ONE_THREAD_PRODUCT = 65_536 * 4


def _gram(left: np.ndarray, right: np.ndarray) -> np.ndarray:
    """``left.T @ right``, summed over blocks of rows small enough for one thread, in order:
    the same bits whatever the library's threads (one product over many rows splits its sum
    between threads, and the bits then depend on their number)."""
    width = left.shape[1] * right.shape[1]
    block = int(min(1024, max(8, ONE_THREAD_PRODUCT // max(1, width))))
    total = np.zeros((left.shape[1], right.shape[1]))
    for start in range(0, len(left), block):
        total += left[start:start + block].T @ right[start:start + block]
    return total
