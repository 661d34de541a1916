"""Turning results into plain JSON values: exact rationals as strings, numpy scalars as numbers."""

from __future__ import annotations

import math
from fractions import Fraction

import numpy as np


def fraction_text(value: Fraction | int) -> str:
    """An exact rational as text: "3", "-1/2"."""
    value = Fraction(value)
    if value.denominator == 1:
        return str(value.numerator)
    return f"{value.numerator}/{value.denominator}"


def plain(value):
    """Recursively convert to JSON-ready Python values.

    Fractions become "p/q" strings (the contract for coefficients), numpy scalars and arrays
    become numbers and lists, non-finite floats become None, tuples and sets become lists.
    """
    if value is None or isinstance(value, (bool, str)):
        return value
    if isinstance(value, Fraction):
        return fraction_text(value)
    if isinstance(value, (np.bool_,)):
        return bool(value)
    if isinstance(value, (int, np.integer)):
        return int(value)
    if isinstance(value, (float, np.floating)):
        value = float(value)
        return value if math.isfinite(value) else None
    if isinstance(value, np.ndarray):
        return [plain(v) for v in value.tolist()]
    if isinstance(value, dict):
        return {str(k): plain(v) for k, v in value.items()}
    if isinstance(value, (list, tuple, set, frozenset)):
        return [plain(v) for v in value]
    if hasattr(value, "to_json"):
        return value.to_json()
    return str(value)


def row_id(value):
    """A row id as a plain JSON value (int or str)."""
    if isinstance(value, (np.integer, int)) and not isinstance(value, bool):
        return int(value)
    return plain(value)
