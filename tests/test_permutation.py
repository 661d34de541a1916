"""The sequential permutation test: valid p-values, agreement with the plain test, same numbers
whatever the number of workers, and stopping when asked."""

import numpy as np
import pytest

from analysis.errors import StepError
from analysis.permutation import (
    EXCEEDANCES,
    FIRST_LOOK,
    full_p_value,
    sequential_test,
)
from analysis.progress import Reporter, StepStopped, Stopper


def _null_case(seed: int, *, discrete: bool = False):
    """An observed score and shuffled scores drawn alike: the null hypothesis holds."""
    rng = np.random.default_rng(seed)
    draws = rng.random(201)
    if discrete:  # scores of a small test set take few values, so ties are common
        draws = np.round(draws * 6) / 6
    return float(draws[0]), (lambda i: float(draws[1 + i]))


@pytest.mark.parametrize("discrete", [False, True], ids=["continuous", "with-ties"])
def test_p_value_is_valid_under_the_null(discrete):
    # Definition of a valid p-value (common practice): under the null, P(p <= t) <= t. With the
    # observed and shuffled scores exchangeable, the share of p <= 0.05 over many seeds must stay
    # within sampling error of 0.05 or below (3 standard errors of a binomial share).
    runs = 3000
    p = np.array([sequential_test(*_null_case(s, discrete=discrete), cap=200).p_value
                  for s in range(runs)])
    for level in (0.02, 0.05, 0.1, 0.5):
        share = float(np.mean(p <= level + 1e-12))
        slack = 3 * np.sqrt(level * (1 - level) / runs)
        assert share <= level + slack, f"P(p <= {level}) = {share:.4f} under the null"
    if not discrete:
        # and not uselessly conservative: the first look alone rejects with chance 1/50
        assert np.mean(p <= 0.05) >= 0.03, f"P(p <= 0.05) = {np.mean(p <= 0.05):.4f}"


def test_clear_signal_stops_at_the_first_look():
    test = sequential_test(0.8, lambda i: 0.1 * (i % 5) / 5, cap=200)
    assert test.ended == "clear signal"
    assert test.count == FIRST_LOOK
    assert test.p_value == pytest.approx(1 / (FIRST_LOOK + 1))
    assert "clear signal" in test.method("Matthews correlation on the test rows")


def test_clear_null_stops_after_h_exceedances():
    # Besag and Clifford (1991), Biometrika 78: stop when h permuted scores have reached the
    # observed one after L shuffles; p = h / L.
    rng = np.random.default_rng(3)
    draws = rng.random(200)
    test = sequential_test(0.2, lambda i: float(draws[i]), cap=200, first_look=None)
    reached_at = np.flatnonzero(draws >= 0.2)[EXCEEDANCES - 1] + 1
    assert test.ended == "clear null"
    assert test.count == reached_at
    assert test.p_value == pytest.approx(EXCEEDANCES / reached_at)


def test_sequential_p_agrees_with_the_full_one_where_both_are_computed():
    rng = np.random.default_rng(7)
    for seed in range(40):
        draws = np.random.default_rng(seed).random(300)
        observed = float(rng.uniform(0.9, 1.0))
        full = full_p_value(observed, draws[:300])
        # without early stopping the two are the same computation on the same shuffles
        plain = sequential_test(observed, lambda i, d=draws: float(d[i]), cap=300,
                                exceedances=0, first_look=None)
        assert plain.ended == "full" and plain.p_value == pytest.approx(full)
        # with early stopping, a run that reaches the cap adds the first look's share only
        staged = sequential_test(observed, lambda i, d=draws: float(d[i]), cap=300)
        assert staged.scores == tuple(draws[:staged.count])
        if staged.ended == "cap":
            assert staged.p_value == pytest.approx(min(1, full + 1 / (FIRST_LOOK + 1)))


def test_same_numbers_whatever_the_number_of_workers():
    def score_of(i):  # seeded by the shuffle's index alone, as the separator does
        return float(np.random.default_rng([5, i]).normal())

    one = sequential_test(0.5, score_of, cap=150, workers=1)
    two = sequential_test(0.5, score_of, cap=150, workers=2)
    assert one == two


def test_progress_is_reported_and_a_stop_request_ends_the_test():
    seen = []
    reporter = Reporter(seen.append)
    reporter.phase("permutation test", total=100)
    sequential_test(0.9, lambda i: 0.0, cap=100, reporter=reporter)
    assert seen[-1].done == FIRST_LOOK and seen[-1].total == 100
    assert seen[-1].text == f"permutation test {FIRST_LOOK} of at most 100"

    stopper = Stopper()
    calls = []

    def score_of(i):
        calls.append(i)
        if i == 3:
            stopper.request()
        return 0.0

    reporter = Reporter(stopper=stopper)
    reporter.phase("permutation test", total=100)
    with pytest.raises(StepStopped, match="stopped by request during permutation test"):
        sequential_test(0.9, score_of, cap=100, reporter=reporter)
    assert len(calls) < 100


def test_small_cap_takes_no_first_look():
    test = sequential_test(0.9, lambda i: 0.0, cap=20)
    assert test.first_look == 0 and test.ended == "cap"
    assert test.p_value == pytest.approx(1 / 21)


def test_bad_cap_is_refused():
    with pytest.raises(StepError, match="at least 1 shuffle"):
        sequential_test(0.5, lambda i: 0.0, cap=0)


@pytest.mark.parametrize("workers", [1, 2])
def test_a_clear_signal_refits_no_shuffle_past_the_first_look(workers):
    # all permuted scores below the observed one: p = 1/(first_look + 1) after exactly
    # first_look shuffles (the ordinary Monte Carlo p-value, common practice); a shuffle
    # computed past the look would be work thrown away
    import threading

    calls = []
    lock = threading.Lock()

    def score_of(i):
        with lock:
            calls.append(i)
        return 0.0

    result = sequential_test(1.0, score_of, cap=200, workers=workers)
    assert result.ended == "clear signal"
    assert result.p_value == pytest.approx(1 / (FIRST_LOOK + 1))
    assert sorted(calls) == list(range(FIRST_LOOK)), f"shuffles refitted: {sorted(calls)}"
