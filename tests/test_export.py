"""Spreadsheet-safe CSV: no cell or column name may start a formula; real numbers stay as they are.

The characters come from the common guidance on CSV injection (OWASP, "CSV Injection"): a
cell that starts with =, +, -, @, tab (0x09) or carriage return (0x0D) may be run as a
formula by a spreadsheet, so such text is prefixed with a single quote.
"""

from __future__ import annotations

import csv
import io

import numpy as np
import pandas as pd
import pytest

from analysis.export import csv_text, neutralize, safe_frame, write_csv

DANGEROUS = [
    "=1+1",
    "=HYPERLINK(\"http://example.invalid\",\"click\")",
    "+1+cmd|' /C calc'!A0",
    "-2+3",
    "-cmd",
    "@SUM(A1:A9)",
    "\t=1+1",
    "\r=1+1",
    "\t-3",  # a tab first: text, even though a number follows
    "\r-3",
    "-3\n=1+1",  # a number on the first line only
    "=",
    "-",
    "+",
    "@",
    "-1/2",
    "-inf",
    "- 3",
]
NUMBERS = ["-3", "-1.5", "+2", "1e-3", "-1.5e3", "+1E+5", "-.5", "5.", "0", "-0", "42",
           "-12345678901234567890123"]


@pytest.mark.parametrize("text", DANGEROUS, ids=repr)
def test_formula_starts_are_neutralized(text):
    assert neutralize(text) == "'" + text


@pytest.mark.parametrize("text", NUMBERS)
def test_real_numbers_are_left_alone(text):
    assert neutralize(text) == text


@pytest.mark.parametrize("text", ["abc", "x=1", "1+1", " =1", "", "[1, -2]", "\u22123"],
                         ids=repr)
def test_other_text_is_left_alone(text):
    # only the first character matters; " =1" starts with a space, "\u22123" with a minus sign
    # that is not the ASCII hyphen-minus
    assert neutralize(text) == text


@pytest.mark.parametrize("value", [-3, -1.5, np.int64(-7), np.float64(-2.5), None, np.nan],
                         ids=repr)
def test_non_text_values_are_left_alone(value):
    result = neutralize(value)
    assert result is value or (isinstance(value, float) and np.isnan(result))


def _read_back(text: str) -> list[list[str]]:
    return list(csv.reader(io.StringIO(text, newline="")))


def test_csv_text_neutralizes_cells_and_column_names():
    frame = pd.DataFrame({
        "=bad name": ["=1+1", "ok"],
        "-2": ["@x", "-3"],
        "score": [-1.5, 2.0],
        "count": [-3, 4],
        "reason": ["+2", "\t=cmd"],
    })
    rows = _read_back(csv_text(frame))
    assert rows[0] == ["'=bad name", "-2", "score", "count", "reason"]
    assert rows[1] == ["'=1+1", "'@x", "-1.5", "-3", "+2"]
    assert rows[2] == ["ok", "-3", "2.0", "4", "'\t=cmd"]


def test_every_written_cell_is_safe():
    cells = DANGEROUS + NUMBERS + ["plain"]
    frame = pd.DataFrame({"text": cells, "n": range(len(cells))})
    for row in _read_back(csv_text(frame))[1:]:
        cell = row[0]
        if cell.startswith(("=", "+", "-", "@", "\t", "\r")):
            assert cell in NUMBERS, f"{cell!r} would start a formula"


def test_category_and_string_dtypes_are_neutralized():
    frame = pd.DataFrame({
        "c": pd.Categorical(["=1", "x", "=1"]),
        "s": pd.array(["@y", None, "z"], dtype="string"),
    })
    rows = _read_back(csv_text(frame))
    assert [r[0] for r in rows[1:]] == ["'=1", "x", "'=1"]
    assert [r[1] for r in rows[1:]] == ["'@y", "", "z"]


def test_the_frame_given_is_not_changed():
    frame = pd.DataFrame({"=a": ["=1", "-3"]})
    copy = frame.copy()
    safe = safe_frame(frame)
    pd.testing.assert_frame_equal(frame, copy)
    assert list(safe.columns) == ["'=a"] and safe["'=a"].tolist() == ["'=1", "-3"]


def test_write_csv_writes_the_same_text(tmp_path):
    frame = pd.DataFrame({"row": ["=x", "b"], "score": [-0.5, 1.0]})
    path = tmp_path / "out.csv"
    write_csv(frame, path)
    written = path.read_bytes().decode("utf-8")
    assert written == csv_text(frame)
    assert _read_back(written)[1] == ["'=x", "-0.5"]


def test_a_carriage_return_inside_a_cell_does_not_start_a_new_row():
    # Unquoted, "ok\r=1+1" would read as two rows, the second starting with a formula.
    frame = pd.DataFrame({"text": ["ok\r=1+1", "a\nb", "\r=2"], "n": [1, 2, 3]})
    rows = _read_back(csv_text(frame))
    assert rows == [["text", "n"], ["ok\r=1+1", "1"], ["a\nb", "2"], ["'\r=2", "3"]]
    # the same holds for pandas reading it back
    back = pd.read_csv(io.StringIO(csv_text(frame), newline=""))
    assert back["text"].tolist() == ["ok\r=1+1", "a\nb", "'\r=2"]
