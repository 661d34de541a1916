"""The typing of a table's columns: one rule for both data sources.

A column's cells are summed up block by block in *facts* (how many cells are missing, whole
numbers with their range, big integers, decimals, rationals written p/q, true/false words,
intervals and marker words, JSON-array text, list cells, the distinct values up to a cap):
:func:`block_facts` reads one block (a pandas series), :func:`merge_facts` joins the facts of
two consecutive blocks, and :func:`column_type` decides the column's dtype (and how to convert
its cells) from the merged facts. The in-memory table is one block; the partitioned Dask table
merges the facts of its partitions. Roles come from :func:`detect_role`, the loading warnings
from :func:`column_warnings`.

The words and rules that say what a cell is live here too: :data:`TRUE_WORDS` and
:data:`FALSE_WORDS` (:func:`reads_as_flag`), marked numbers (:class:`MarkerRule`,
:func:`read_marked_cell`), integers past 64 bits or past 2**53 with missing cells
(:func:`integer_type`), JSON-array text (:func:`reads_as_array_texts`) and labels with stray
spaces (:func:`label_merge_warning`).
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from decimal import Decimal
from fractions import Fraction

import numpy as np
import pandas as pd

from analysis.notes import Note

INT64_MAX = 2**63 - 1
# Past this, float64 no longer holds every integer exactly.
FLOAT_EXACT = 2**53
# The note of a column of integers that only missing cells and float64's 2**53 make big.
BEYOND_FLOAT_NOTE = "kept exact: beyond 2**53 with missing cells"
# A whole number written as text.
INTEGER_TEXT = r"\s*[+-]?\d+\s*"
_INTEGER_TEXT = re.compile(rf"^{INTEGER_TEXT}$")
# a cell read as an exact rational: an integer, or p/q with whole p and q
RATIONAL_TEXT = r"\s*[+-]?\d+\s*(?:/\s*\d+\s*)?"
# The words read as a flag's two values, in any case (besides 0 and 1): the one word set,
# for every reader of tables.
TRUE_WORDS = frozenset({"true", "yes", "t", "y"})
FALSE_WORDS = frozenset({"false", "no", "f", "n"})
# Column names that make a column of unique integers the id.
ID_NAMES = frozenset({"id", "name", "label", "key", "index"})
# Cell texts read as missing in CSV and TSV files, by both readers.
MISSING_WORDS = ("", "NA", "NaN", "nan", "null", "None", "N/A")
# Distinct values kept per column in facts; past this the distinct count is left to the
# reader (the partitioned one counts it exactly in a separate pass, by hash buckets).
DISTINCT_CAP = 100_000


def is_missing(value) -> bool:
    """Whether a cell value is a missing cell (None, pandas' NA or a float NaN)."""
    if value is None or value is pd.NA:
        return True
    return isinstance(value, float) and np.isnan(value)


def shown_value(value, width: int = 40) -> str:
    """A cell as messages quote it: its repr, cut to ``width`` characters."""
    if isinstance(value, np.generic):
        value = value.item()  # show 1, not np.int64(1)
    text = repr(value)
    return text if len(text) <= width else text[: width - 3] + "..."



@dataclass(frozen=True)
class MarkerRule:
    """When a column of numbers with intervals and words in it is read as an invariant.

    Public databases write an open value as an interval ``[low, high]`` and put a word where
    an invariant does not apply (``infty``, ``D.N.E.``, ``-``). A column is read as such
    *marked numbers* when every filled cell is a number, an interval or a word, and

    - at least one cell is an interval or a word, and at least one is a plain number (a column
      of two-element brackets only is an array column);
    - it has at most ``max_words`` different words;
    - word cells are at most ``max_share`` of the filled cells;
    - it never has more different words than different plain numbers.

    A user who gives such a column the role invariant asks for the reading outright: only the
    limit on different words applies then, and the column needs one number or interval.
    """

    max_words: int = 5
    max_share: Fraction = Fraction(1, 3)

    def describe(self) -> str:
        return (f"at most {self.max_words} different words, in at most "
                f"{self.max_share} of the filled cells, never more different words than "
                "different numbers, and at least one plain number")


# The one rule for reading marked numbers; a partitioned reader calls
# reads_as_marked_numbers with its merged counts and gets the same answer.
MARKER_RULE = MarkerRule()


def reads_as_marked_numbers(*, numbers: int, intervals: int, words: dict[str, int],
                            distinct_numbers: int, requested: bool = False,
                            rule: MarkerRule = MARKER_RULE) -> bool:
    """Whether a column is read as marked numbers (see :class:`MarkerRule`).

    ``numbers`` counts plain number cells, ``intervals`` interval cells, ``words`` maps each
    word to its cell count, ``distinct_numbers`` counts different plain numbers (only whether
    it reaches ``len(words)`` matters, so a reader may stop counting at ``rule.max_words``).
    ``requested`` is True when the user gave the column the role invariant.

    >>> reads_as_marked_numbers(numbers=9, intervals=1, words={"-": 2}, distinct_numbers=4)
    True
    >>> reads_as_marked_numbers(numbers=0, intervals=5, words={}, distinct_numbers=0)
    False
    """
    word_cells = sum(words.values())
    if len(words) > rule.max_words or (not words and not intervals):
        return False
    if requested:
        return numbers + intervals > 0
    if numbers == 0:
        return False
    filled = numbers + intervals + word_cells
    return word_cells <= rule.max_share * filled and len(words) <= distinct_numbers


_NUMBER = r"[+-]?(?:\d+\s*/\s*\d+|(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?)"
_NUMBER_TEXT = re.compile(rf"^\s*({_NUMBER})\s*$")
_INTERVAL_TEXT = re.compile(rf"^\s*\[\s*({_NUMBER})\s*,\s*({_NUMBER})\s*\]\s*$")


def read_marked_cell(value) -> tuple[str, object]:
    """One cell of a possibly marked column: ``(kind, value)``.

    Kinds: ``"missing"``; ``"number"`` (an int, a Fraction for ``p/q`` text, a float for
    decimals); ``"interval"`` with ``(low, high)`` (from text ``[a, b]``, spaces allowed, or a
    two-element list of numbers; ends typed as numbers are); ``"word"`` (any other text that
    is not bracketed, stripped); ``"other"`` (anything else: longer lists, records, booleans,
    text starting with a bracket). A zero denominator or an over-long integer is
    ``("invalid", reason)``. Low above high is still an interval: the caller says where.

    >>> read_marked_cell(" [1, 3/2] ")
    ('interval', (1, Fraction(3, 2)))
    >>> read_marked_cell("D.N.E.")
    ('word', 'D.N.E.')
    """
    if is_missing(value):
        return "missing", None
    if isinstance(value, (bool, np.bool_)):
        return "other", value
    if isinstance(value, (int, np.integer)):
        return "number", int(value)
    if isinstance(value, (float, np.floating)):
        return "number", float(value)
    if isinstance(value, (list, tuple, np.ndarray)):
        ends = list(value.tolist() if isinstance(value, np.ndarray) else value)
        if len(ends) == 2 and all(isinstance(x, (int, float)) and not isinstance(x, bool)
                                  for x in ends):
            return "interval", (ends[0], ends[1])
        return "other", value
    if not isinstance(value, str):
        return "other", value
    text = value.strip()
    try:
        match = _NUMBER_TEXT.match(text)
        if match:
            return "number", _number_text(match.group(1))
        match = _INTERVAL_TEXT.match(text)
        if match:
            return "interval", (_number_text(match.group(1)), _number_text(match.group(2)))
    except ZeroDivisionError:
        return "invalid", f"{text!r} divides by zero"
    except ValueError:
        return "invalid", f"{shown_value(text)} has more digits than Python reads from text"
    if not text:
        return "missing", None
    if text.startswith(("[", "{")):
        return "other", value
    return "word", text


def _number_text(text: str):
    if "/" in text:
        return Fraction(text.replace(" ", ""))
    if _INTEGER_TEXT.match(text):
        return int(text)
    return float(text)


def marked_dtype(*, has_float: bool, has_fraction: bool) -> str:
    """The dtype of a marked column from the kinds among its plain numbers and interval ends
    (as :func:`read_marked_cell` types them): real with any float, else rational with any
    fraction, else integer.

    >>> marked_dtype(has_float=False, has_fraction=True)
    'rational'
    """
    if has_float:
        return "real"
    return "rational" if has_fraction else "integer"


def marked_note(note: str, intervals: int, words: dict[str, int]) -> str:
    """A marked column's note: ``note`` (from its numbers), then its intervals and its words
    with their counts, most frequent first.

    >>> marked_note("has missing cells", 2, {"infty": 3})
    "has missing cells; 2 intervals; words read as missing: 'infty' (3)"
    """
    shown = [f"{intervals} interval{'s' if intervals != 1 else ''}"] if intervals else []
    if words:
        shown.append("words read as missing: " + ", ".join(
            f"{w!r} ({n})" for w, n in sorted(words.items(), key=lambda kv: (-kv[1], kv[0]))))
    return "; ".join(([note] if note else []) + shown)


def marker_counts(words: dict[str, int]) -> dict[str, int]:
    """``ColumnInfo.markers`` from word counts: each word and its count, most frequent first."""
    return dict(sorted(words.items(), key=lambda kv: (-kv[1], kv[0])))


def incomplete_integer_dtype(low: int, high: int) -> tuple[str, str]:
    """(dtype, note) of a column of integers from ``low`` to ``high`` with missing cells.

    float64 holds integers exactly only up to 2**53, so past that the column keeps exact
    Python integers ("big integer"), as it does past 64 bits.

    >>> incomplete_integer_dtype(0, 9)
    ('integer', 'has missing cells')
    >>> incomplete_integer_dtype(0, 2**60)
    ('big integer', 'kept exact: beyond 2**53 with missing cells')
    """
    if high > INT64_MAX or low < -INT64_MAX - 1:
        return "big integer", ""
    if max(abs(low), abs(high)) > FLOAT_EXACT:
        return "big integer", BEYOND_FLOAT_NOTE
    return "integer", "has missing cells"


def label_merge_warning(name: str, column: str, *, padded: int, written: int, labels: int,
                        missing: int, rows: int) -> str | None:
    """The warning for a text column read without the spaces around its labels, or None
    when its labels stay as written (only a column whose stripped labels make a category is
    merged). ``padded`` counts the cells with such spaces, ``written`` the different labels
    as written, ``labels`` those without the spaces.
    """
    words = label_merge_words(column, padded=padded, written=written, labels=labels,
                              missing=missing, rows=rows)
    return None if words is None else Note("labels_merged", f"{name}: column {column!r}: "
                                           f"{words}", column=column, padded=padded,
                                           written=written, labels=labels)


def label_merge_words(column: str, *, padded: int, written: int, labels: int, missing: int,
                      rows: int) -> str | None:
    """What :func:`label_merge_warning` says of the column, without naming it (the column's
    own note), or None when its labels stay as written."""
    if not padded or detect_role(column, "text", labels, missing, rows, True) != "category":
        return None
    cells_word = "cell has" if padded == 1 else "cells have"
    said = f"{padded} {cells_word} spaces around the label, read without them"
    if written == labels:
        return f"{said}."
    return (f"{said}, so the column's {written} labels as written are {labels} "
            f"label{'' if labels == 1 else 's'}.")


def reads_as_flag(words: set[str]) -> bool:
    """Whether a column whose filled cells hold these (stripped) texts is a flag.

    Every text is one of TRUE_WORDS or FALSE_WORDS in any case (``Y``/``N``, ``yes``/``no``,
    ``T``/``F``, ``true``/``false``), with at most one spelling for each of the two values.
    Columns of 0 and 1 are flags too; they are told apart before text is looked at.

    >>> reads_as_flag({"Y", "N"}), reads_as_flag({"yes", "y"}), reads_as_flag({"x", "y"})
    (True, False, False)
    """
    lowered = {w.lower() for w in words}
    return bool(lowered) and lowered <= TRUE_WORDS | FALSE_WORDS and \
        len(lowered & TRUE_WORDS) <= 1 and len(lowered & FALSE_WORDS) <= 1


def detect_role(column: str, dtype: str, distinct: int, missing: int, n: int,
                 id_taken: bool) -> str:
    unique = distinct == n - missing and missing == 0 and n > 1
    if dtype == "array":
        return "array"
    if dtype == "boolean":
        return "flag"
    if dtype == "empty":
        return "text"
    if dtype in ("integer", "big integer", "rational", "real"):
        if not id_taken and unique and dtype == "integer" and column.strip().lower() in ID_NAMES:
            return "id"
        return "invariant"
    # text-valued columns
    if not id_taken and unique:
        return "id"
    if distinct <= max(20, int(0.05 * n)) and distinct < n:
        return "category"
    return "text"


def flag_spelling_warning(name: str, column: str, labels) -> str | None:
    """The warning for a category whose labels are all true/false words but in more than
    one spelling of a value (``Y`` beside ``True``): each spelling is then a class of its
    own, which is seldom what the table meant. None for any other column."""
    words = sorted({str(w).strip() for w in labels})
    lowered = {w.lower() for w in words}
    if len(words) < 3 or not lowered <= TRUE_WORDS | FALSE_WORDS or reads_as_flag(set(words)):
        return None
    return Note("flag_spellings", f"{name}: column {column!r} holds only true/false words, in "
                f"more than one spelling ({', '.join(words)}), so it is read as a category of "
                f"{len(words)} labels, each spelling a class of its own. Give the column the "
                "role flag, or write one spelling for each value (such as Y and N), to read it "
                "as a flag.", column=column, spellings=tuple(words))


def reads_as_boolean(words) -> bool:
    """Whether a column whose present cells are these words is read as true/false: the one
    rule of :func:`reads_as_flag`, under the name the partitioned reader uses."""
    return reads_as_flag({str(w).strip() for w in words})


def is_true_word(word) -> bool:
    """Whether a true/false word (any case, spaces around it ignored) means true."""
    return str(word).strip().lower() in TRUE_WORDS


def column_warnings(name: str, column: str, dtype: str, note: str, distinct: int, n: int,
                    role: str, labels=None) -> list[str]:
    """The loading warnings a typed column gives (big integers, empty, constant, true/false
    words in several spellings). ``labels``: a category's distinct labels, when known."""
    out = []
    if role == "category" and labels is not None:
        spelled = flag_spelling_warning(name, column, labels)
        if spelled:
            out.append(spelled)
    if dtype == "big integer":
        beyond = "2**53 and missing cells" if note == BEYOND_FLOAT_NOTE else "64 bits"
        out.append(Note(
            "big_integers",
            f"{name}: column {column!r} has integers beyond {beyond}; they are kept exact, "
            "and features derived from them use the signed log scale sign(x)*log10(1+|x|).",
            column=column))
    if dtype == "empty":
        out.append(Note("column_empty", f"{name}: column {column!r} is empty in every row.",
                        column=column))
    elif distinct == 1 and n > 1 and role != "id":
        out.append(Note("column_constant", f"{name}: column {column!r} is constant; it carries "
                        "no information.", column=column))
    return out


def reads_as_array_texts(brackets: int, filled: int) -> bool:
    """Whether a column of text cells (not numbers, flags or marked numbers) is read as
    arrays: when at least half of its ``filled`` cells start with ``[`` (``brackets``, after
    stripping spaces). Every filled cell must then be a JSON array.

    >>> reads_as_array_texts(3, 5), reads_as_array_texts(2, 5)
    (True, False)
    """
    return brackets > 0 and 2 * brackets >= filled


def from_decimal(value):
    """A Parquet decimal as an exact int or Fraction (NaN as missing, infinities as floats);
    any other value as it is. Both engines read decimals through it.

    >>> from_decimal(Decimal("3.50"))
    Fraction(7, 2)
    """
    if not isinstance(value, Decimal):
        return value
    if value.is_nan():
        return None
    if value.is_infinite():
        return float(value)
    exact = Fraction(value)
    return exact.numerator if exact.denominator == 1 else exact
