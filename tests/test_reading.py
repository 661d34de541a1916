"""A whole-number target read as a number or as classes, as a learning curve favours."""

from __future__ import annotations

import numpy as np
import pytest

from analysis.reading import choose_reading
from analysis.separation import SeparatorStep
from analysis.table import read_table


def _table(rows: list[tuple], header: str, name: str = "t.csv"):
    lines = [header] + [",".join(str(v) for v in row) for row in rows]
    return read_table("\n".join(lines).encode(), name, id_column="obj")


def _sums(n: int = 400, seed: int = 1):
    # planted truth: the target is a + b, a linear rule with 19 values, which a number reading
    # gets exactly right and 19 classes from 2 features do not
    rng = np.random.default_rng(seed)
    a, b = rng.integers(0, 10, n), rng.integers(0, 10, n)
    return _table([(f"o{i}", a[i], b[i], a[i] + b[i]) for i in range(n)], "obj,a,b,total")


def _not_in_order(n: int = 400, seed: int = 2):
    # planted truth: the target is 2, 7 or 1 as x is 0, 1 or 2; no line through the values
    # fits, while a class reading follows them
    rng = np.random.default_rng(seed)
    x = rng.integers(0, 3, n)
    noise = rng.normal(size=n).round(3)
    value = np.array([2, 7, 1])[x]
    return _table([(f"o{i}", x[i], noise[i], value[i]) for i in range(n)], "obj,x,noise,value")


def test_a_linear_whole_number_target_is_read_as_a_number():
    table = _sums()
    values = np.column_stack([table.numeric("a"), table.numeric("b")])
    reading = choose_reading(table, "total", "auto", values, table.numeric("total"), seed=0)
    assert reading.number and reading.chosen_by == "learning curve"
    assert reading.curve["number"][-1] == 1.0
    assert reading.curve["classes"][-1] < reading.curve["number"][-1]
    assert "read as a number" in reading.text


def test_values_out_of_order_are_read_as_classes_and_the_step_says_so():
    table = _not_in_order()
    result = SeparatorStep(target="value", model="linear", repeats=2, seed=0).run(table)
    assert result.task == "classification"
    assert result.reading.chosen_by == "learning curve" and not result.reading.number
    assert result.reading.curve["classes"][-1] > result.reading.curve["number"][-1]
    data = result.to_json()["reading"]
    assert data["used"] == "classes" and data["chosen_by"] == "learning curve"
    assert "read as classes" in result.summary()


@pytest.mark.parametrize("reading, number", [("number", True), ("classes", False)])
def test_a_stated_reading_is_kept(reading, number):
    table = _not_in_order(n=120)
    result = SeparatorStep(target="value", model="linear", repeats=2, seed=0,
                           reading=reading).run(table)
    assert result.reading.chosen_by == "setting" and result.reading.number is number
    assert result.task == ("regression" if number else "classification")
