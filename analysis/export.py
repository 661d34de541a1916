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
    # The whole cell must be the number: stripping first would let "\t-3" or "-3\n=..." pass.
    if isinstance(value, str) and value.startswith(_FORMULA_START) \
            and not _NUMBER.fullmatch(value):
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
    # Lines end in CR LF (RFC 4180), which also makes the writer quote any cell holding a lone
    # carriage return: unquoted, a spreadsheet would start a new row there, and the text
    # after it (perhaps "=...") would begin a cell that was never neutralized.
    safe_frame(frame).to_csv(buffer, index=False, lineterminator="\r\n")
    return buffer.getvalue()


def write_csv(frame: pd.DataFrame, path: str | Path) -> None:
    """Write ``frame`` as spreadsheet-safe CSV."""
    Path(path).write_text(csv_text(frame), encoding="utf-8", newline="")
