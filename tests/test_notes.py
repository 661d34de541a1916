"""Notes as records: words for the reader, a code and figures for the code that must tell one
note from another."""

from __future__ import annotations

import json
import pickle
from fractions import Fraction

from analysis.equations import SCOPE_NOTES, gap_note, rounding_note, sample_wording
from analysis.notes import Note, note_code


def test_a_note_reads_as_its_words_and_travels_with_its_code_and_figures():
    note = Note("hint_violations", "the fitted separator before rounding makes 3 violations "
                "on all 40 rows", violations=3, rows=40)
    assert json.dumps([note]) == json.dumps([str(note)])
    again = pickle.loads(pickle.dumps(note))   # as Dask sends results between processes
    assert (again, again.code, again.figures) == (note, "hint_violations",
                                                  {"violations": 3, "rows": 40})
    assert note_code("words only") is None


def test_the_equation_module_words_its_notes_for_a_sample_and_names_its_scope_notes():
    note = Note("hint_violations", "…", violations=3, rows=40)
    assert sample_wording(note) == ("the fitted separator before rounding makes 3 violations "
                                    "on the 40 rows of the sample")
    assert sample_wording("evaluated exactly in integer arithmetic") == \
        "evaluated exactly in integer arithmetic"
    gap = gap_note(Fraction(7, 2), Fraction(4), ">=", True)
    assert gap == "any constant c with 7/2 < c <= 4 gives the same rows"
    assert {note_code(gap), note_code(rounding_note(Fraction(4), 5, 3))} <= set(SCOPE_NOTES)
