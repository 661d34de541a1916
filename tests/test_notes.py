"""Notes as records: words for the reader, a code and figures for the code that must tell one
note from another."""

from __future__ import annotations

import dataclasses
import json
import pickle
import re
from fractions import Fraction
from pathlib import Path

import pytest

from analysis.equations import SCOPE_NOTES, gap_note, rounding_note, sample_wording
from analysis.notes import Note, note_code

SAMPLE_TABLES = Path(__file__).resolve().parent.parent / "sample_tables"


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


# Every kind of step on the sample tables, with settings that reach the notes of sampling,
# arrays, marked numbers, dropped rows, integer targets and kernels. The rule checked is the
# design's (shared/design.md, "Two data sources, one step"): notes and warnings are records.
SAMPLE_RUNS = {
    "graphs_as_downloaded.csv": [
        ("overview", {}), ("projection", {"method": "lda", "target": "planar"}),
        ("clustering", {"method": "kmeans", "k": 3, "compare": "bipartite"}),
        ("clustering", {"method": "hdbscan", "k": 3}),
        ("separator", {"target": "planar", "model": "linear"}),
        ("relations", {}), ("outliers", {"target": "planar"}),
    ],
    "quadratic_fields.csv": [
        ("separator", {"target": "class_number"}),
        ("separator", {"target": "disc_mod_8", "model": "rbf", "reading": "classes"}),
        ("outliers", {"target": "class_number"}),
    ],
    "symmetric_matrices.json": [
        ("projection", {"method": "pca"}), ("clustering", {"method": "gmm", "k": 2}),
        ("relations", {}),
    ],
}
NOTE_CODE = re.compile(r"^[a-z][a-z0-9_]*$")


def _said(value, where, out, noteish=False):
    """Every note and warning a result holds: (where, words), walking its records."""
    if isinstance(value, str):
        if noteish and value:
            out.append((where, value))
    elif dataclasses.is_dataclass(value) and not isinstance(value, type):
        for field in dataclasses.fields(value):
            said = noteish or "note" in field.name or "warning" in field.name
            _said(getattr(value, field.name), f"{where}.{field.name}", out, said)
    elif isinstance(value, (list, tuple)):
        for item in value:
            _said(item, where, out, noteish)
    elif isinstance(value, dict):
        for item in value.values():
            _said(item, where, out, noteish)


def _parts(note):
    return note.figures["parts"] if note_code(note) == "several" else (note,)


@pytest.fixture(scope="module")
def sample_notes():
    from analysis.steps import make_step
    from analysis.table import read_table

    found = []
    for name, runs in SAMPLE_RUNS.items():
        table = read_table((SAMPLE_TABLES / name).read_bytes(), name)
        for kind, params in runs:
            _said(make_step(kind, params).run(table), f"{name} {kind} {params}", found)
    return found


def test_every_note_of_every_kind_of_step_is_a_record_with_a_code(sample_notes):
    kinds = {where.split()[1] for where, _ in sample_notes}
    assert kinds == {"overview", "projection", "clustering", "separator", "relations",
                     "outliers"}, kinds
    plain = [(where, text) for where, text in sample_notes if note_code(text) is None]
    assert not plain, plain[:5]
    assert all(NOTE_CODE.match(note.code) for _, note in sample_notes)
    codes = {note.code for _, note in sample_notes}
    # the settings above reach these: HDBSCAN's k unused, a kernel, rows dropped for a
    # missing value, interval rows held against bounds, LDA's one axis for two classes
    assert {"hdbscan_k_unused", "kernel", "rows_dropped", "interval_rows_held",
            "one_discriminant"} <= codes, sorted(codes)


def test_the_whole_numbers_a_note_cites_are_the_ones_its_words_say(sample_notes):
    for where, note in sample_notes:
        for part in _parts(note):
            said = set(re.findall(r"\d+", str(part)))
            for name, value in part.figures.items():
                if isinstance(value, int) and not isinstance(value, bool):
                    assert str(value) in said, (where, part, name, value)
