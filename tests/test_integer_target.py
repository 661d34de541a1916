"""Integer targets: the rule that recognises them and the share of exact predictions."""

import numpy as np
import pytest

from analysis.integer_target import (
    INTEGER_TARGET_SPAN,
    exact_share,
    is_integer_target,
    most_common_value,
)


@pytest.mark.parametrize(("values", "expected"), [
    ([1, 2, 3, 7], True),
    ([0, 1, 0, 1], False),                       # two values: a class target
    ([0.5, 1.0, 2.0], False),                    # not whole numbers
    ([1, 2, np.nan, 4], True),                   # missing cells do not count
    ([0, 3, INTEGER_TARGET_SPAN + 5], False),    # too wide a range for exact hits to matter
], ids=["small", "two-values", "halves", "missing", "wide"])
def test_integer_target_rule(values, expected):
    assert is_integer_target(values) is expected


def test_exact_share_and_its_wilson_interval():
    truth = np.array([1, 2, 3, 4, 5, 6, 7, 8, 9, 10] * 4)
    predicted = truth + np.array([0.2, -0.4, 0.6, 0.0, 1.2, 0, 0, 0.49, -0.51, 3] * 4)
    found = exact_share(truth, predicted)
    # rounding: 0.2, -0.4, 0.0, 0, 0, 0.49 round to the truth; 0.6, 1.2, -0.51 and 3 do not
    assert found.hits == 24 and found.rows == 40
    # Reference: scipy's binomial test interval with Wilson's score method.
    from scipy.stats import binomtest

    reference = binomtest(24, 40).proportion_ci(confidence_level=0.95, method="wilson")
    assert found.low == pytest.approx(reference.low, abs=1e-9)
    assert found.high == pytest.approx(reference.high, abs=1e-9)


def test_most_common_value_breaks_ties_towards_the_smaller():
    assert most_common_value([3, 1, 3, 1, 2]) == 1.0
    assert most_common_value([4, 4, 2]) == 4.0
