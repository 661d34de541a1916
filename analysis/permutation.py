"""Permutation tests that stop when the answer is clear, with refits run in parallel.

The separator asks: does the model's score on the test rows beat what the same model reaches
when the training labels are shuffled? Each shuffle costs one refit, so the test is the
slowest part of an honest protocol. :func:`sequential_test` draws shuffles one at a time, in
a fixed order, and stops as soon as the answer is settled:

* **a clear signal**: the first ``first_look`` permuted scores all stay below the observed
  one. Then p = 1 / (first_look + 1) exactly, the ordinary Monte Carlo p-value of those
  shuffles, and the test stops.
* **a clear null**: ``exceedances`` permuted scores have reached the observed one after L
  shuffles. The sequential Monte Carlo p-value of Besag and Clifford (1991, Biometrika 78,
  301-304) is then h / L.
* otherwise the test runs to the cap of n shuffles and p_BC = (G + 1) / (n + 1), with G the
  permuted scores that reached the observed one.

Stopping at the first look spends 1 / (first_look + 1) of the test's level, so every p-value
reached after the first look adds that share: p = min(1, 1 / (first_look + 1) + p_BC). The
reported p is then valid: under the null, P(p <= t) <= t for every t (the first look is taken
with chance 1 / (first_look + 1), and p_BC is itself valid). The price is that a p-value past
the first look is larger by that share than the plain one; the result's words say so.

The permuted scores depend only on their index (the caller seeds each shuffle by its index),
so the same seed gives the same p-value whatever the number of workers: work is done in
batches of a fixed size (the last one before the first look cut short at it) and scores past
the stopping point are discarded.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from analysis.errors import StepError

__all__ = ["EXCEEDANCES", "FIRST_LOOK", "PermutationTest", "full_p_value", "sequential_test"]

# Shuffles that must all stay below the observed score to stop for a clear signal.
FIRST_LOOK = 49
# Permuted scores reaching the observed one that settle a clear null (Besag and Clifford's h).
EXCEEDANCES = 10
# Shuffles computed together; fixed, so that the numbers do not depend on the worker count.
BATCH = 8
# Scores within this of the observed one count as reaching it (float noise in refits).
TIE_TOLERANCE = 1e-12

_HOW_IT_ENDED = {
    "clear signal": "stopped for a clear signal: the first {n} permuted scores all stayed below "
                    "the observed one, so p = 1/{n1}",
    "clear null": "stopped for a clear null: {h} permuted scores reached the observed one "
                  "after {n} shuffles (sequential p of Besag and Clifford, h/L = {h}/{n})",
    "cap": "ran to the cap of {n} shuffles: p = (scores reaching the observed + 1) / "
           "({n} + 1)",
    "full": "all {n} shuffles: p = (scores reaching the observed + 1) / ({n} + 1)",
}


@dataclass(frozen=True)
class PermutationTest:
    """The outcome of a permutation test.

    p_value: the reported p-value (valid; see the module's words on the first look).
    observed: the score with the true labels.
    scores: the permuted scores counted, in shuffle order.
    reached: how many of them reached the observed score.
    cap: the most shuffles the test could have taken.
    ended: "clear signal", "clear null", "cap" or "full" (no early stopping asked).
    first_look: the shuffles of the first look (0 when there was none).
    """

    p_value: float
    observed: float
    scores: tuple[float, ...]
    reached: int
    cap: int
    ended: str
    first_look: int

    @property
    def count(self) -> int:
        """How many shuffles (refits) the test took."""
        return len(self.scores)

    @property
    def smallest_possible(self) -> float:
        """The smallest p-value this test could have given."""
        if self.first_look:
            return 1.0 / (self.first_look + 1)
        return 1.0 / (self.cap + 1)

    def method(self, statistic: str) -> str:
        """The test in words, naming the statistic ("Matthews correlation on the test rows")."""
        n = self.count
        ended = _HOW_IT_ENDED[self.ended].format(n=n, n1=n + 1, h=self.reached)
        text = (f"{n} of at most {self.cap} shuffles of the training labels, model refitted "
                f"each time, {statistic}; {ended}")
        if self.ended in ("clear null", "cap") and self.first_look:
            text += (f"; plus 1/{self.first_look + 1} for the first look at "
                     f"{self.first_look} shuffles, which keeps the p-value valid")
        return text


def full_p_value(observed: float, scores) -> float:
    """The plain Monte Carlo p-value of ``scores``: (reaching + 1) / (count + 1)."""
    scores = np.asarray(scores, dtype=float)
    reached = int(np.sum(scores >= observed - TIE_TOLERANCE))
    return (reached + 1) / (len(scores) + 1)


def sequential_test(observed: float, score_of: Callable[[int], float], *, cap: int,
                    exceedances: int = EXCEEDANCES, first_look: int | None = FIRST_LOOK,
                    workers: int = 1, reporter=None) -> PermutationTest:
    """Run a permutation test that stops when the answer is clear.

    observed: the score with the true labels (larger is better).
    score_of: ``score_of(i)`` refits on shuffle number ``i`` (seeded by ``i`` alone) and
        returns its score. Called from worker threads when ``workers`` > 1.
    cap: the most shuffles to take.
    exceedances: permuted scores reaching the observed one that stop the test (a clear null);
        None or 0 never stops for a null.
    first_look: shuffles after which the test stops if none reached the observed score (a
        clear signal); None or 0, or a cap too small to leave room after it, takes no look.
    workers: threads that refit at once; the numbers do not depend on it.
    reporter: an :class:`analysis.progress.Reporter` told of every batch (and asked whether
        to stop).

    >>> sequential_test(0.9, lambda i: 0.0, cap=200).p_value
    0.02
    """
    if cap < 1:
        raise StepError(f"a permutation test needs at least 1 shuffle; got {cap}.")
    look = first_look if first_look and cap >= 2 * first_look else 0
    if workers <= 1:
        return _run_test(observed, score_of, cap, exceedances, look, None, reporter)
    from concurrent.futures import ThreadPoolExecutor

    # threads: the refits spend their time in numpy and compiled solvers, and nothing needs
    # pickling; one pool for the whole test, so no batch waits for threads to start
    with ThreadPoolExecutor(max_workers=workers) as pool:
        return _run_test(observed, score_of, cap, exceedances, look, pool, reporter)


def _run_test(observed, score_of, cap, exceedances, look, pool, reporter) -> PermutationTest:
    """The batches of a sequential test, on ``pool`` (None: in this thread)."""
    scores: list[float] = []
    reached = 0
    ended = "cap" if (exceedances or look) else "full"
    while len(scores) < cap:
        start = len(scores)
        stop = min(cap, start + BATCH)
        if start < look:
            # a batch ends at the first look, so a clear signal takes no shuffle past it
            stop = min(stop, look)
        batch = _scores(score_of, range(start, stop), pool)
        for value in batch:
            scores.append(value)
            reached += value >= observed - TIE_TOLERANCE
            if exceedances and reached >= exceedances:
                ended = "clear null"
                break
            if look and len(scores) == look and reached == 0:
                ended = "clear signal"
                break
        if reporter is not None:
            reporter.advance(len(scores) - start)
        if ended in ("clear null", "clear signal"):
            break
    return PermutationTest(p_value=_p_value(ended, reached, len(scores), cap, look),
                           observed=float(observed), scores=tuple(scores), reached=reached,
                           cap=cap, ended=ended, first_look=look)


def _p_value(ended: str, reached: int, count: int, cap: int, look: int) -> float:
    spent = 1.0 / (look + 1) if look else 0.0
    if ended == "clear signal":
        return spent
    if ended == "clear null":
        plain = reached / count
    else:
        plain = (reached + 1) / (cap + 1)
    return min(1.0, spent + plain)


def _scores(score_of: Callable[[int], float], indices: range, pool) -> list[float]:
    if pool is None or len(indices) == 1:
        return [float(score_of(i)) for i in indices]
    # the order of the returned list is the order of the indices
    return [float(v) for v in pool.map(score_of, indices)]
