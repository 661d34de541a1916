"""Small helpers that turn table values and numbers into text a reader takes in at a glance."""

from __future__ import annotations

import math
from fractions import Fraction

import numpy as np
import pandas as pd
import streamlit as st

from analysis.report import FOLD_LIMIT

# Widest a cell of a listed row is shown before it is shortened.
CELL_WIDTH = 80


def number(value, digits: int = 3) -> str:
    """A number for reading: integers as they are, reals with a few significant digits."""
    if value is None:
        return "n/a"
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, (int, np.integer)):
        return f"{int(value):,}".replace(",", "\u2009") if abs(int(value)) >= 10_000 \
            else str(int(value))
    if isinstance(value, Fraction):
        return str(value)
    try:
        value = float(value)
    except (TypeError, ValueError):
        return str(value)
    if not math.isfinite(value):
        return "n/a"
    if value == 0:
        return "0"
    if abs(value) >= 1e5 or abs(value) < 1e-3:
        return f"{value:.{digits}g}"
    return f"{value:.{digits}g}" if abs(value) < 1 else f"{value:,.{max(digits - 1, 0)}f}"


def cell(value) -> object:
    """A table cell as something a data grid shows faithfully (exact numbers as text)."""
    if value is None:
        return None
    if isinstance(value, float) and math.isnan(value):
        return None
    if isinstance(value, np.ndarray):
        text = np.array2string(value, separator=",", threshold=50, max_line_width=10_000)
        text = " ".join(text.split())
        return text if len(text) <= CELL_WIDTH else text[: CELL_WIDTH - 1] + "\u2026"
    if isinstance(value, Fraction):
        return str(value)
    if isinstance(value, int) and not isinstance(value, bool) and abs(value) >= 2**53:
        return str(value)
    if isinstance(value, str) and len(value) > CELL_WIDTH:
        return value[: CELL_WIDTH - 1] + "\u2026"
    return value


def rows_frame(table, row_ids, columns: list[str] | None = None) -> pd.DataFrame:
    """The rows of ``table`` with the given ids, in that order, ready to show.

    The id column (or the row number) comes first; ``columns`` picks the rest (default all).
    """
    ids = list(row_ids)
    if not ids:
        return pd.DataFrame()
    all_ids = table.row_ids
    position = {row_key(v): i for i, v in enumerate(all_ids)}
    rows = [position[row_key(v)] for v in ids if row_key(v) in position]
    names = [c.name for c in table.columns if c.name != table.id_column]
    if columns is not None:
        names = [n for n in columns if n in names]
    frame = table.frame.iloc[rows][names]
    shown = pd.DataFrame({name: [cell(v) for v in frame[name].tolist()] for name in names})
    label = table.id_column or "row"
    shown.insert(0, label, [cell(all_ids[r]) for r in rows])
    return shown


def row_key(value):
    """Row ids from JSON, numpy or the table compare equal when they name the same row."""
    if isinstance(value, (np.integer,)):
        return int(value)
    if isinstance(value, np.generic):
        return value.item()
    if isinstance(value, float) and value.is_integer():
        return int(value)
    return value


def sentence(text: str) -> str:
    """``text`` with its first letter made upper case and the rest left as written (column
    names and abbreviations such as RBF keep their case, which str.capitalize would lose)."""
    return text[:1].upper() + text[1:]


def duration(seconds: float) -> str:
    """A span of time as people say it: "0.4 s", "12 s", "3 min 5 s", "1 h 2 min"."""
    if round(seconds, 1) < 10:
        return f"{seconds:.1f} s"
    whole = round(seconds)
    if whole < 60:
        return f"{whole} s"
    if whole < 3600:
        return f"{whole // 60} min {whole % 60} s"
    return f"{whole // 3600} h {whole % 3600 // 60} min"


def plural(count: int, word: str, many: str | None = None) -> str:
    return f"{count} {word}" if count == 1 else f"{count} {many or word + 's'}"


def _latex_name(name: str) -> str:
    escaped = name.replace("\\", r"\backslash ").replace("_", r"\_").replace("{", r"\{") \
        .replace("}", r"\}").replace("#", r"\#").replace("%", r"\%").replace("&", r"\&") \
        .replace("$", r"\$").replace("^", r"\^{}").replace("~", r"\~{}")
    return r"\mathrm{" + escaped + "}"


def _latex_number(value) -> str:
    value = Fraction(value)
    if value < 0:
        return "-" + _latex_number(-value)
    if value.denominator == 1:
        return str(value.numerator)
    return r"\tfrac{" + str(value.numerator) + "}{" + str(value.denominator) + "}"


def linear_latex(terms, relation: str, constant) -> str:
    """LaTeX for ``sum(coef * column) relation constant`` with exact rational coefficients.

    ``terms`` are (column name, coefficient) pairs, as relations and bounds give them.
    """
    parts = []
    for position, (name, coef) in enumerate(terms):
        coef = Fraction(coef)
        size = abs(coef)
        body = _latex_name(name) if size == 1 else f"{_latex_number(size)}\\,{_latex_name(name)}"
        if position == 0:
            parts.append(body if coef > 0 else f"-{body}")
        else:
            parts.append(f"{'+' if coef > 0 else '-'} {body}")
    symbol = {"=": "=", "<=": r"\leq", ">=": r"\geq"}.get(relation, relation)
    return f"{' '.join(parts) or '0'} {symbol} {_latex_number(constant)}"


def warnings(lines) -> None:
    """A step's warnings (rows or columns it lost), each in a warning box, first in its box."""
    for line in lines or ():
        st.warning(str(line))


def notes(lines) -> None:
    """A step's notes (what was sampled, scaled, dropped or approximated) as one quiet line."""
    lines = [str(line).strip().rstrip(".") for line in lines if str(line).strip()]
    if lines:
        st.caption("Notes: " + "; ".join(lines) + ".")


def names_list(label: str, names, *, container=st) -> None:
    """Names (features, columns) after ``label`` on one line; more than ``FOLD_LIMIT`` of
    them are folded under a title that counts them, as in the report."""
    names = [str(name) for name in names or ()]
    if not names:
        return
    text = ", ".join(f"`{name}`" for name in names)
    if len(names) <= FOLD_LIMIT:
        container.markdown(f"{label}: {text}")
        return
    with container.expander(f"{label} ({len(names)})"):
        st.markdown(text)
