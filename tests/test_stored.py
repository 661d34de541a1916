"""Results written into a study file and read back: every step kind on scikit-learn's iris
data gives the same JSON after the trip, and a file naming anything but a result record is
refused with the place named."""

from __future__ import annotations

import json
from fractions import Fraction

import numpy as np
import pytest
from conftest import iris_csv

from analysis.notes import Note, note_code
from analysis.steps import STEP_KINDS
from analysis.stored import StoredResultError, decode, encode
from analysis.study import default_study, run_study
from analysis.table import read_table


def iris_table():
    """scikit-learn's iris data (150 flowers, 4 measurements, 3 species) as a CSV table."""
    return read_table(iris_csv(), "iris.csv")


@pytest.fixture(scope="module")
def iris_run():
    table = iris_table()
    return run_study(default_study(table, target="species"), table)


def _through_a_file(value):
    return decode(json.loads(json.dumps(encode(value), allow_nan=False)))


def test_every_kind_of_result_comes_back_with_the_same_json(iris_run):
    assert [o.kind for o in iris_run.outcomes] == list(STEP_KINDS)
    for outcome in iris_run.outcomes:
        assert outcome.ok, outcome.error
        back = _through_a_file(outcome.result)
        assert type(back) is type(outcome.result)
        assert json.dumps(back.to_json(), sort_keys=True) == \
            json.dumps(outcome.result.to_json(), sort_keys=True), outcome.kind
    overview = _through_a_file(iris_run.outcomes[0].result)
    # scikit-learn's documentation of load_iris: 150 samples, 50 of each of 3 classes.
    assert overview.rows == 150


def test_arrays_fractions_and_odd_floats_keep_their_type_and_value():
    value = {"ids": np.array(["a", 3], dtype=object), "x": np.array([[1.5, np.nan]]),
             "k": np.int8(-3), 7: (Fraction(-2, 3), float("inf"), 2**70)}
    back = _through_a_file(value)
    assert back["ids"].dtype == object and back["ids"].tolist() == ["a", 3]
    assert back["x"].shape == (1, 2) and back["x"][0, 0] == 1.5 and np.isnan(back["x"][0, 1])
    assert back["k"].dtype == np.int8 and back["k"] == -3
    assert back[7] == (Fraction(-2, 3), float("inf"), 2**70)


@pytest.mark.parametrize("data, words", [
    ({"$dataclass": "os.system", "fields": {}}, "not a record"),
    ({"$dataclass": "builtins.eval", "fields": {}}, "not a record"),
    ({"$dataclass": "analysis.study.Study", "fields": {}}, "not a record"),
    ({"$dataclass": "analysis.separation._Run", "fields": {}}, "not a record"),
    ({"$dataclass": "analysis.separation.np", "fields": {}}, "not a record"),
    ({"$dataclass": "analysis.equations.Term", "fields": {"feature": "a"}}, "no fields"),
    ({"$dataclass": "analysis.equations.Term",
      "fields": {"feature": "a", "coef": 1, "factors": [], "run": 1}}, "unknown fields"),
    ({"$array": {"dtype": "int64", "shape": [3], "data": [1, 2]}}, "holds 2 values"),
    ({"$array": {"dtype": "datetime64[s]", "shape": [1], "data": [1]}}, "cannot be read"),
    ({"$array": {"dtype": "no such type", "shape": [1], "data": [1]}}, "not an array type"),
    ({"$array": {"dtype": "int8", "shape": [1], "data": [1000]}}, "do not fit"),
    ({"$fraction": "1/0"}, "not a fraction"),
    ({"$float": "huge"}, "malformed tag"),
    ({"$pickle": "gASV"}, "malformed tag"),
    ({"$note": {"code": "Not Snake", "text": "a", "figures": {"$dict": []}}}, "snake_case"),
    ({"$note": {"code": "a", "text": 3, "figures": {"$dict": []}}}, "needs a code"),
    ({"$note": {"code": "a", "text": "b", "figures": [1]}}, "figures are a dict"),
    ({"$note": {"code": "a", "text": "b"}}, "needs a code"),
    ({"plain": 1}, "malformed tag"),
])
def test_anything_but_a_stored_value_is_refused_naming_where(data, words):
    with pytest.raises(StoredResultError, match=words) as caught:
        decode({"$tuple": [0, data]}, where="step 2")
    assert "step 2[1]" in str(caught.value)


def _notes_of(result):
    return [n for n in (*getattr(result, "warnings", ()), *getattr(result, "notes", ()))]


def test_a_note_comes_back_with_its_code_its_words_and_its_figures():
    note = Note("rows_dropped", "3 rows dropped", rows=3, share=0.25, columns=("a", "b"),
                code="a figure may be called code")
    back = _through_a_file({"notes": (note, "words only")})["notes"]
    assert type(back[0]) is Note and note_code(back[1]) is None
    assert (str(back[0]), back[0].code, back[0].figures) == \
        ("3 rows dropped", "rows_dropped",
         {"rows": 3, "share": 0.25, "columns": ("a", "b"), "code": "a figure may be called code"})


def test_the_notes_of_every_kind_of_result_keep_their_codes_and_figures(iris_run):
    seen = 0
    for outcome in iris_run.outcomes:
        before = _notes_of(outcome.result)
        after = _notes_of(_through_a_file(outcome.result))
        assert after == before, outcome.kind
        assert [(note_code(n), n.figures) for n in after] == \
            [(note_code(n), n.figures) for n in before], outcome.kind
        assert None not in [note_code(n) for n in after], outcome.kind
        seen += len(after)
    assert seen, "no step of the iris study carried a note"


def test_only_values_of_results_can_be_written():
    with pytest.raises(StoredResultError, match="a set cannot be stored"):
        encode({"a": {1, 2}})
