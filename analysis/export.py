"""Writing tables that people open in spreadsheets, without letting a cell run as a formula."""

from __future__ import annotations

import io
import re
from pathlib import Path

import pandas as pd

# A cell a spreadsheet may run as a formula starts with one of these characters.
_FORMULA_START = ("=", "+", "-", "@", "\t", "\r")
_NUMBER = re.compile(r"^[+-]?(\d+(\.\d*)?|\.\d+)([eE][+-]?\d+)?$")


def neutralize(value):
    """Prefix a text cell that a spreadsheet would run as a formula with a single quote.

    Real numbers (including negative ones written as text, such as "-3" or "-1.5e3") are left
    alone, following the usual guidance on CSV injection: only text that is not a number and
    starts with =, +, -, @, tab or carriage return is changed.
    """
    if isinstance(value, str) and value.startswith(_FORMULA_START) \
            and not _NUMBER.match(value.strip()):
        return "'" + value
    return value


def safe_frame(frame: pd.DataFrame) -> pd.DataFrame:
    """A copy of ``frame`` with text cells and column names neutralized."""
    out = frame.copy()
    out.columns = [neutralize(str(c)) for c in out.columns]
    for column in out.columns:
        if out[column].dtype == object or pd.api.types.is_string_dtype(out[column]):
            out[column] = out[column].map(neutralize)
    return out


def csv_text(frame: pd.DataFrame) -> str:
    """The frame as CSV text that is safe to open in a spreadsheet."""
    buffer = io.StringIO()
    safe_frame(frame).to_csv(buffer, index=False)
    return buffer.getvalue()


def write_csv(frame: pd.DataFrame, path: str | Path) -> None:
    """Write ``frame`` as spreadsheet-safe CSV."""
    Path(path).write_text(csv_text(frame), encoding="utf-8")
