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
from dataclasses import dataclass, field, replace
from decimal import Decimal
from fractions import Fraction

import numpy as np
import pandas as pd

from analysis.errors import TableError
from analysis.notes import Note, note_code

INT64_MAX = 2**63 - 1
# Past this, float64 no longer holds every integer exactly.
FLOAT_EXACT = 2**53
# The note of a column of integers that only missing cells and float64's 2**53 make big.
BEYOND_FLOAT_NOTE = "kept exact: beyond 2**53 with missing cells"
# the note of a real column with inf or -inf cells
INFINITE_NOTE = "has infinite values"
# the note of a text column that would read as marked numbers but for its share of words
MOSTLY_NUMBERS_NOTE = "mostly numbers, too many words to read as marked numbers"
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
# What a kind of facts holds, in the message for a column of mixed kinds.
_KIND_WORDS = {"int": "number", "uint": "number", "float": "number", "bool": "true/false",
               "bigint": "number", "text": "text", "list": "array"}


@dataclass(frozen=True)
class ColumnInfo:
    """What the program knows about one column."""

    name: str
    role: str
    dtype: str
    missing: int
    distinct: int
    detected_role: str
    note: str = ""
    intervals: int = 0
    markers: dict[str, int] = field(default_factory=dict, hash=False)

    def to_json(self) -> dict:
        return {
            "name": self.name,
            "role": self.role,
            "dtype": self.dtype,
            "missing": int(self.missing),
            "distinct": int(self.distinct),
            "detected_role": self.detected_role,
            "note": self.note,
            "intervals": int(self.intervals),
            "markers": {str(word): int(count) for word, count in self.markers.items()},
        }


def column_named(table_name: str, columns, name: str) -> ColumnInfo:
    """The column ``name`` among ``columns`` (a table's ColumnInfo records, on either
    engine); TableError naming the table and its columns when there is none."""
    for info in columns:
        if info.name == name:
            return info
    known = ", ".join(repr(c.name) for c in columns[:30])
    raise TableError(f"{table_name}: no column named {name!r}. Columns are: {known}.")


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
      of two-element brackets only is an array column); or else every cell is a plain number,
      some written as text (JSON from some databases quotes a number now and then);
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
    if not words and not intervals:
        return numbers > 0       # numbers only, some of them text
    if len(words) > rule.max_words:
        return False
    if requested:
        return numbers + intervals > 0
    if numbers == 0:
        return False
    filled = numbers + intervals + word_cells
    return word_cells <= rule.max_share * filled and len(words) <= distinct_numbers


_NUMBER = r"[+-]?(?:\d+\s*/\s*\d+|(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?)"
_NUMBER_TEXT = re.compile(rf"^\s*({_NUMBER})\s*$")
# a whole cell that is a plain number (spaces around it allowed)
_NUMBER_CELL = re.compile(rf"\s*{_NUMBER}\s*")
# digits in groups of three after a first group: 249,525 or 1 000 000 or 1_000
_GROUPED = re.compile(r"[+-]?\d{1,3}(?:[, _]\d{3})+(?:\.\d+)?")
# a product of prime powers as databases write group orders: 2^10 * 3^4 * 5
_POWERS = re.compile(r"\d+(?:\s*\^\s*\d+)?(?:\s*[*x\u00b7\u00d7]\s*\d+(?:\s*\^\s*\d+)?)+"
                     r"|\d+\s*\^\s*\d+")
# A text column with numbers in at least this share of its filled cells says what keeps the
# others from being read (see numbers_as_text).
NUMBERS_AS_TEXT_SHARE = Fraction(4, 5)
_INTERVAL_TEXT = re.compile(rf"^\s*\[\s*({_NUMBER})\s*,\s*({_NUMBER})\s*\]\s*$")


def read_marked_cell(value) -> tuple[str, object]:
    """One cell of a possibly marked column: ``(kind, value)``.

    Kinds: ``"missing"``; ``"number"`` (an int, a Fraction for ``p/q`` text, a float for
    decimals); ``"interval"`` with ``(low, high)`` (from text ``[a, b]``, spaces allowed, or a
    two-element list of numbers; ends typed as numbers are); ``"word"`` (any other text that
    is not bracketed, stripped); ``"other"`` (anything else: longer lists, records, booleans,
    text starting with a bracket, a number spelled as :func:`number_hint` names). A zero
    denominator or an over-long integer is ``("invalid", reason)``. Low above high is still
    an interval: the caller says where.

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
    if text[:1] in _NUMBER_START and number_hint(text):
        # a number in a spelling no reading takes (7,700 or a typographic minus) is no
        # marker word: read as missing, it would silently lose a value (see numbers_as_text)
        return "other", value
    return "word", text


_NUMBER_START = frozenset("+-\u22120123456789")


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
    """The warning for a category whose labels are all true/false words (0 and 1 among them,
    perhaps) but in more than one spelling of a value (``Y`` beside ``True``): each spelling
    is then a class of its own, which is seldom what the table meant. None for any other
    column."""
    words = sorted({str(w).strip() for w in labels})
    lowered = {w.lower() for w in words}
    spelled = lowered & (TRUE_WORDS | FALSE_WORDS)
    if len(words) < 3 or not spelled or not lowered <= TRUE_WORDS | FALSE_WORDS | {"0", "1"} \
            or reads_as_flag(set(words)):
        return None
    kinds = "true/false words" if spelled == lowered else "true/false words and 0/1"
    return Note("flag_spellings", f"{name}: column {column!r} holds only {kinds}, in "
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
                    role: str, labels=None, missing: int = 0) -> list[str]:
    """The loading warnings a typed column gives (big integers, empty, constant, true/false
    words in several spellings). ``labels``: a category's distinct labels, when known;
    ``missing``: the column's missing cells."""
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
    if note == INFINITE_NOTE:
        out.append(Note(
            "infinite_cells",
            f"{name}: column {column!r} holds infinite values (inf or -inf); the table keeps "
            "them, and features read them as missing values, so steps leave those rows out "
            "or impute them.", column=column))
    if note == MOSTLY_NUMBERS_NOTE:
        out.append(Note(
            "mostly_numbers",
            f"{name}: column {column!r} holds numbers in most of its filled cells, but words "
            f"in more than {MARKER_RULE.max_share} of them, so it is read as "
            f"{'a category' if role == 'category' else 'text'}. If the "
            "words mean that the invariant does not apply, give the column the role "
            "invariant: its numbers are read and its words counted as missing values.",
            column=column))
    if note_code(note) == "numbers_as_text":
        figures = note.figures
        hint = number_hint(figures["text"])
        spelled = figures["spelled"]
        kinds = (f"numbers ({spelled} of them written in a way no reading takes)" if spelled
                 else "numbers")
        out.append(Note(
            "numbers_as_text",
            f"{name}: column {column!r} is read as text, though "
            f"{figures['numbers'] + spelled} of its {figures['filled']} filled cells "
            f"are {kinds}; row {figures['row'] + 1} holds "
            f"{shown_value(figures['text'])}{f' ({hint})' if hint else ''}. The file is "
            "left as it is: write such cells as plain numbers in a copy to read the column "
            "as numbers.", column=column, **figures))
    if dtype == "empty":
        out.append(Note("column_empty", f"{name}: column {column!r} is empty in every row.",
                        column=column))
    elif distinct == 1 and n > 1 and role != "id" and missing:
        out.append(Note("column_constant", f"{name}: column {column!r} holds one value, in "
                        f"{n - missing} rows, and no value in the other {missing}: it tells "
                        "objects apart only by which rows hold it.",
                        column=column, filled=n - missing))
    elif distinct == 1 and n > 1 and role != "id":
        out.append(Note("column_constant", f"{name}: column {column!r} is constant; it carries "
                        "no information.", column=column))
    return out


def reads_as_array_texts(brackets: int, filled: int) -> bool:
    """Whether a column of text cells (not numbers, flags or marked numbers) is read as
    arrays: when at least half of its ``filled`` cells start with ``[`` or are lists in
    braces (``brackets``, after stripping spaces; :func:`list_text`). Every filled cell must
    then be an array.

    >>> reads_as_array_texts(3, 5), reads_as_array_texts(2, 5)
    (True, False)
    """
    return brackets > 0 and 2 * brackets >= filled


# How a cut-off list cell is named in a column's counts of cells read as missing.
CUT_ARRAY_MARK = "[\u2026]"

# A list in braces, as computer algebra systems and database dumps write lists and matrices
# ({1, 2, 3}, {{1, 0}, {0, 1}}, {} for none): numbers (or an ellipsis, for a list cut short)
# in at most two levels of braces, so records ({"a": 1}) and sets of words stay text.
_BRACE_ITEM = r"(?:[+\-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+\-]?\d+)?|\.\.\.|\u2026)"
_BRACE_ROW = rf"\{{\s*(?:{_BRACE_ITEM}(?:\s*,\s*{_BRACE_ITEM})*)?\s*\}}"
_BRACE_LIST = (rf"\{{\s*(?:(?:{_BRACE_ITEM}|{_BRACE_ROW})"
               rf"(?:\s*,\s*(?:{_BRACE_ITEM}|{_BRACE_ROW}))*)?\s*\}}")


def list_text(text: str) -> str:
    """A stripped cell holding a list in braces, written in brackets as JSON writes it; any
    other text as it is.

    >>> list_text("{{1,0},{0,-1}}"), list_text("{2., .5, +1}"), list_text('{"a": 1}')
    ('[[1,0],[0,-1]]', '[2.0, 0.5, 1]', '{"a": 1}')
    """
    if not (text.startswith("{") and re.fullmatch(_BRACE_LIST, text)):
        return text
    text = text.replace("{", "[").replace("}", "]")
    # the spellings JSON lacks: 2. and .5 (as machine reals are written) and a leading +
    text = re.sub(r"(\d)\.(?![\d.])", r"\1.0", text)
    text = re.sub(r"(?<![\d.])\.(\d)", r"0.\1", text)
    return re.sub(r"\+(?=[\d.])", "", text)


def array_mark(text: str) -> str | None:
    """What an array column reads as missing in this stripped cell ``text``, by name, or
    None for a cell to parse as an array: a list cut short with an ellipsis (``[1, 2, ...]``
    or ``[…]``, as exports shorten long lists; number arrays hold no ellipsis otherwise) is
    :data:`CUT_ARRAY_MARK`; a word that is not bracketed (``read_marked_cell``'s kind "word",
    such as ``?`` or ``n/a``) is itself. At most ``MARKER_RULE.max_words`` different words
    may stand in one column.

    >>> array_mark("[2, 3, 5, 7, ...]"), array_mark("n/a"), array_mark("[1, 2]")
    ('[…]', 'n/a', None)
    """
    text = list_text(text)
    if text.startswith("[") and ("\u2026" in text or "..." in text):
        return CUT_ARRAY_MARK
    kind, word = read_marked_cell(text)
    return word if kind == "word" else None


def reads_array_words(words: dict[str, int], filled: int, *, requested: bool = False,
                      rule: MarkerRule = MARKER_RULE) -> bool:
    """Whether an array column with ``filled`` filled cells reads these marker ``words``
    (each with its cell count; cut-off lists are not words) as missing values: some cell is
    no word, there are at most ``rule.max_words`` different words, and (unless the user
    asked for the role array) word cells are at most ``rule.max_share`` of the filled cells,
    as for marked numbers.

    >>> reads_array_words({"?": 2}, 10), reads_array_words({"?": 6}, 10)
    (True, False)
    """
    cells = sum(words.values())
    if len(words) > rule.max_words or cells >= filled:
        return False
    return requested or cells <= rule.max_share * filled


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


def frame_facts(frame: pd.DataFrame, conversions=()) -> dict:
    """Per-column facts of one raw partition (a pandas frame); see :func:`merge_facts`."""
    csv_columns = {c for c, how in conversions if how == "csv"}
    text_columns = {c for c, how in conversions if how in ("text", "as_text")}
    asked = {c for c, how in conversions if how == "as_text"}
    out: dict = {"__rows__": len(frame)}
    for column in frame.columns:
        series = frame[column]
        out[column] = block_facts(series, column in csv_columns, column in text_columns,
                                    exact_decimals=column not in asked)
    return out


def block_facts(series: pd.Series, from_text: bool, as_text: bool = False,
                exact_decimals: bool = True) -> dict:
    """The facts of one block of a column's raw cells (a pandas series); see merge_facts.

    ``from_text``: the cells are CSV text, numbers where pandas reads them as numbers (other
    text cells are numbers only when every one is a whole number); ``as_text``: every cell
    is read as text, as written; ``exact_decimals``: Parquet decimals are read as the text
    of their exact values.
    """
    n = len(series)
    missing_mask = series.isna().to_numpy()
    facts: dict = {"n": n, "missing": int(missing_mask.sum()), "kind": None}
    if facts["missing"] == n:
        return facts   # says nothing about the column's kind
    if exact_decimals and _holds_decimals(series, missing_mask):
        series = decimal_texts(series)
        facts["decimal"] = True
    kind = series.dtype.kind
    if as_text:
        present = series[~missing_mask]
        text = present.map(lambda v: str(v)) if present.dtype == object else present.astype(str)
        facts["words"] = None
        return _text_facts(facts, text, present, missing_mask)
    if not from_text and kind in "biuf":
        # nullable integers and flags (pandas' Int64, boolean) hold missing cells too
        facts.update(_number_facts(series[~missing_mask] if kind == "f" or facts["missing"]
                                   else series))
        return facts
    present = series[~missing_mask]
    if isinstance(present.iloc[0], (list, tuple, np.ndarray)):
        facts["kind"] = "list"
        facts.update(array_facts(present.tolist(), str(series.name)))
        return facts
    text = present.astype(str)
    # CSV cells are numbers when pandas would read them as numbers; other text cells only
    # when every one is a whole number, as analysis.table reads text cells in memory
    integers = bool(text.str.fullmatch(INTEGER_TEXT).all())
    if integers and int(text.str.strip().str.lstrip("+-").str.len().max()) >= 16:
        # past 2**53 a float would round: keep exact Python integers
        facts.update(_number_facts(pd.Series([int(t) for t in text], dtype=object)))
        facts["parsed"] = True
        return facts
    if integers or from_text:
        numbers = pd.to_numeric(text, errors="coerce")
        if not numbers.isna().any():
            facts.update(_number_facts(numbers))
            facts["parsed"] = True
            return facts
    return _text_facts(facts, text, present, missing_mask)


def text_block_facts(series: pd.Series, *, counts: bool = True) -> dict:
    """The facts of one block of cells read as text (missing cells among them), which
    :func:`text_reading` reads; ``counts`` False leaves out the count of every label."""
    missing_mask = series.isna().to_numpy()
    present = series[~missing_mask]
    facts: dict = {"n": len(series), "missing": int(missing_mask.sum()), "kind": None}
    return _text_facts(facts, present.astype(str), present, missing_mask, counts)


def _text_facts(facts: dict, text: pd.Series, present: pd.Series, missing_mask,
                counts: bool = True) -> dict:
    """The facts of a run of text cells: counts, marked numbers, brackets, rationals, and
    its true/false words (``words``, None past two) unless the caller set them."""
    facts["kind"] = "text"
    if "words" not in facts:
        lowered = set(text.str.strip().str.lower().unique().tolist())
        facts["words"] = lowered if len(lowered) <= 2 else None
    if counts:
        facts.update(_text_counts(text, ~missing_mask))
    facts["marked"] = marked_facts(present.tolist(), np.flatnonzero(~missing_mask))
    facts.update(_number_cells(text, missing_mask))
    stripped = text.str.strip()
    facts["brackets"] = int((stripped.str.startswith("[")
                             | stripped.str.fullmatch(_BRACE_LIST)).sum())
    # every cell an integer or p/q: the column is read as exact rationals, as in memory
    facts["rational"] = bool(text.str.fullmatch(RATIONAL_TEXT).all())
    facts["integers"] = bool(facts["rational"] and text.str.fullmatch(INTEGER_TEXT).all())
    return facts


def _number_cells(text: pd.Series, missing_mask) -> dict:
    """How many text cells are plain numbers (as :func:`read_marked_cell` reads them), how
    many others are numbers in a spelling :func:`number_hint` names, and the first cell that
    is not a plain number: (its position in the run, its text)."""
    numbers = text.str.fullmatch(_NUMBER_CELL).to_numpy(dtype=bool)
    odd = np.flatnonzero(~numbers)
    first = None
    if len(odd):
        first = (int(np.flatnonzero(~missing_mask)[odd[0]]), str(text.iloc[odd[0]]).strip())
    return {"number_cells": int(numbers.sum()),
            "spelled_cells": _spelled_numbers(text.iloc[odd]) if len(odd) else 0,
            "first_not_number": first}


def _spelled_numbers(odd: pd.Series) -> int:
    """How many of these cells (none a plain number) are numbers in a spelling that
    :func:`number_hint` names: grouped digits, the typographic minus, a product of powers, a
    percentage. Only cells that start like a number are matched (a quick scan first)."""
    odd = odd.str.strip()
    odd = odd[odd.str.match(r"[+\-\u2212]?\d")]
    if not len(odd):
        return 0
    spelled = odd.str.fullmatch(_GROUPED) | odd.str.fullmatch(_POWERS) \
        | odd.str.replace("\u2212", "-", regex=False).str.fullmatch(_NUMBER_CELL) \
        | (odd.str.endswith("%") & odd.str[:-1].str.fullmatch(_NUMBER_CELL))
    return int(spelled.sum())


def numbers_as_text(f: dict) -> Note | None:
    """The note of a text column most of whose cells are numbers (NUMBERS_AS_TEXT_SHARE of
    the filled ones or more, counting numbers in the spellings :func:`number_hint` names,
    such as ``249,525``, a typographic minus or ``2^4 * 3``) while others keep it from being
    read as numbers; None for any other column."""
    first = f.get("first_not_number")
    filled = f["n"] - f["missing"]
    count = f.get("number_cells", 0)
    spelled = f.get("spelled_cells", 0)
    if f.get("kind") != "text" or first is None or not filled \
            or count + spelled < NUMBERS_AS_TEXT_SHARE * filled:
        return None
    return Note("numbers_as_text", f"{count + spelled} of {filled} filled cells are numbers",
                numbers=count, spelled=spelled, filled=filled, row=first[0], text=first[1])


def number_hint(text: str) -> str:
    """What keeps a number-like cell from being read as a number, in words ('' when
    nothing familiar does)."""
    if "\u2212" in text and _NUMBER_CELL.fullmatch(text.replace("\u2212", "-")):
        return "its minus sign is the typographic U+2212; write '-'"
    if _GROUPED.fullmatch(text):
        return f"its digits are grouped with separators; write {re.sub(r'[, _]', '', text)}"
    if _POWERS.fullmatch(text):
        return "it is a product of powers; write the integer it equals"
    if text.endswith("%") and _NUMBER_CELL.fullmatch(text[:-1]):
        return "it is a percentage; write the number without '%'"
    return ""


def array_facts(values: list, column: str) -> dict:
    """Shapes and distinct cells of list or matrix cells, each read by analysis.table's rule
    (a cell it refuses counts as "not an array")."""
    # table.py, which imports this module, reads array cells: imported when first needed
    from analysis.table import Limits, array_token, array_value

    limits = Limits()
    shapes: dict[str, int] = {}
    tokens: set | None = set()
    for value in values:
        try:
            array = array_value(value, "", 0, column, limits)
        except TableError:
            shapes["not an array"] = shapes.get("not an array", 0) + 1
            continue
        shape = "x".join(map(str, array.shape))
        shapes[shape] = shapes.get(shape, 0) + 1
        if tokens is not None:
            tokens.add(array_token(array))
            tokens = tokens if len(tokens) <= DISTINCT_CAP else None
    return {"shapes": shapes, "tokens": tokens}


def _union_capped(a: set | None, b: set | None) -> set | None:
    if a is None or b is None:
        return None
    both = a | b
    return both if len(both) <= DISTINCT_CAP else None


def _number_facts(values: pd.Series) -> dict:
    """Facts of numbers (no missing cells among them, except NaN for floats)."""
    kind = values.dtype.kind
    if kind == "b":
        array = values.to_numpy(dtype=np.int64)
        kind_name = "bool"
    elif kind == "O":
        array = values.to_numpy()
        kind_name = "bigint"
    else:
        array = values.to_numpy()
        kind_name = {"i": "int", "u": "uint", "f": "float"}.get(kind, "float")
    facts: dict = {"kind": kind_name}
    if kind_name == "bigint":
        ints = [int(v) for v in array]
        facts.update(count=len(ints), inf=False, integral=True,
                     minimum=min(ints) if ints else None, maximum=max(ints) if ints else None,
                     total=float(sum(ints)) if ints else 0.0,
                     big=any(abs(v) > INT64_MAX for v in ints),
                     values=_capped(np.array(sorted(set(ints)), dtype=object)))
        return facts
    if kind_name == "float":
        finite = array[np.isfinite(array)]
        facts["inf"] = bool(np.isinf(array).any())
        facts["integral"] = bool(len(finite) == 0 or (
            (finite == np.round(finite)).all() and np.abs(finite).max() < 2**53))
    else:
        finite = array
        facts["inf"] = False
        facts["integral"] = True
    facts["count"] = int(len(finite))
    facts["big"] = bool(kind_name == "uint" and len(finite) and finite.max() > INT64_MAX)
    if len(finite):
        lo, hi = finite.min(), finite.max()
        facts["minimum"] = int(lo) if kind_name != "float" else float(lo)
        facts["maximum"] = int(hi) if kind_name != "float" else float(hi)
        facts["total"] = float(np.sum(finite, dtype=np.float64))
    else:
        facts["minimum"] = facts["maximum"] = None
        facts["total"] = 0.0
    nonmissing = array[~np.isnan(array)] if kind_name == "float" else array
    facts["values"] = _capped(np.unique(nonmissing))
    return facts


def _holds_decimals(series: pd.Series, missing_mask: np.ndarray) -> bool:
    """Whether a raw column holds Parquet decimals (its first filled cell is one)."""
    return series.dtype.kind == "O" and isinstance(
        series.iloc[int(np.argmin(missing_mask))], Decimal)


def decimal_texts(series: pd.Series) -> pd.Series:
    """Parquet decimals as the text of their exact values (``7/2``, ``3``), which are then
    typed as text cells are: the values analysis.table reads decimals as."""
    exact = [None if is_missing(v) else from_decimal(v) for v in series.tolist()]
    return pd.Series([None if v is None else str(v) for v in exact], dtype=object,
                     index=series.index)


def _text_counts(text: pd.Series, present_mask: np.ndarray) -> dict:
    positions = np.flatnonzero(present_mask)
    counts = text.value_counts(sort=False)
    if len(counts) > DISTINCT_CAP:
        first = text.iloc[:5].tolist()
        return {"counts": None, "first_values": first, "first_positions": positions[:5].tolist()}
    firsts = pd.Series(positions, index=text.index).groupby(text.to_numpy()).min()
    table = {str(k): (int(v), int(firsts[k])) for k, v in counts.items()}
    return {"counts": table, "first_values": text.iloc[:5].tolist(),
            "first_positions": positions[:5].tolist()}


def _capped(values: np.ndarray):
    return values if len(values) <= DISTINCT_CAP else None


def merge_facts(a: dict, b: dict) -> dict:
    """Merge the facts of two consecutive runs of rows (``a`` before ``b``)."""
    if a["kind"] is None or b["kind"] is None or a["kind"] != b["kind"]:
        kinds = {a["kind"], b["kind"]} - {None}
        if not kinds:
            return {"n": a["n"] + b["n"], "missing": a["missing"] + b["missing"], "kind": None}
        if len(kinds) == 1:
            a, b = (_like(a, b) if a["kind"] is None else a), (_like(b, a) if b["kind"] is None
                                                                else b)
        elif kinds <= {"int", "uint", "float", "bool", "bigint"}:
            a, b = _widen(a), _widen(b)
        else:
            words = sorted({_KIND_WORDS.get(k, k) for k in kinds})
            raise TableError(f"holds {' and '.join(words)} values in different "
                             "partitions; on the dask engine a column must hold one kind of "
                             "value (all numbers, all text, or all arrays). Fix the cells, or "
                             "use --engine local")
    out = {"n": a["n"] + b["n"], "missing": a["missing"] + b["missing"], "kind": a["kind"],
           "parsed": a.get("parsed", False) or b.get("parsed", False),
           "decimal": a.get("decimal", False) or b.get("decimal", False)}
    kind = out["kind"]
    if kind == "list":
        shapes = dict(a["shapes"])
        for k, v in b["shapes"].items():
            shapes[k] = shapes.get(k, 0) + v
        out["shapes"] = shapes
        out["tokens"] = _union_capped(a.get("tokens"), b.get("tokens"))
        marks = dict(a.get("marks", {}))
        for k, v in b.get("marks", {}).items():
            marks[k] = marks.get(k, 0) + v
        out["marks"] = marks
        return out
    if kind == "text":
        words_a, words_b = a["words"], b["words"]
        words = None if words_a is None or words_b is None else words_a | words_b
        out["words"] = words if words is not None and len(words) <= 2 else None
        out["first_values"] = (a["first_values"] + b["first_values"])[:5]
        out["first_positions"] = (a["first_positions"]
                                  + [p + a["n"] for p in b["first_positions"]])[:5]
        if a["counts"] is None or b["counts"] is None:
            out["counts"] = None
        else:
            counts = dict(a["counts"])
            for key, (count, first) in b["counts"].items():
                if key in counts:
                    counts[key] = (counts[key][0] + count, counts[key][1])
                else:
                    counts[key] = (count, first + a["n"])
            out["counts"] = counts if len(counts) <= DISTINCT_CAP else None
        out["marked"] = merge_marked(a.get("marked"), b.get("marked"), a["n"])
        out["brackets"] = a.get("brackets", 0) + b.get("brackets", 0)
        out["number_cells"] = a.get("number_cells", 0) + b.get("number_cells", 0)
        out["spelled_cells"] = a.get("spelled_cells", 0) + b.get("spelled_cells", 0)
        later = b.get("first_not_number")
        out["first_not_number"] = a.get("first_not_number") or (
            None if later is None else (later[0] + a["n"], later[1]))
        out["rational"] = a.get("rational", False) and b.get("rational", False)
        out["integers"] = a.get("integers", False) and b.get("integers", False)
        return out
    out["count"] = a["count"] + b["count"]
    out["inf"] = a["inf"] or b["inf"]
    out["integral"] = a["integral"] and b["integral"]
    out["big"] = a["big"] or b["big"]
    out["total"] = a["total"] + b["total"]
    lows = [v for v in (a["minimum"], b["minimum"]) if v is not None]
    highs = [v for v in (a["maximum"], b["maximum"]) if v is not None]
    out["minimum"] = min(lows) if lows else None
    out["maximum"] = max(highs) if highs else None
    if a["values"] is None or b["values"] is None:
        out["values"] = None
    elif kind == "bigint":
        out["values"] = _capped(np.array(sorted(set(a["values"].tolist())
                                                | set(b["values"].tolist())), dtype=object))
    else:
        out["values"] = _capped(np.union1d(a["values"], b["values"]))
    return out


def _widen(facts: dict) -> dict:
    """Facts of integers or flags read as floats, for a column mixing them across blocks."""
    if facts["kind"] in ("float", "bigint"):
        return facts
    out = dict(facts)
    out["kind"] = "float"
    if out["values"] is not None:
        out["values"] = out["values"].astype(np.float64)
    return out


def _like(empty: dict, other: dict) -> dict:
    """Facts for a run of rows where the column is entirely missing, shaped like ``other``."""
    out = {"n": empty["n"], "missing": empty["missing"], "kind": other["kind"]}
    kind = other["kind"]
    if kind == "list":
        out["shapes"], out["tokens"] = {}, set()
    elif kind == "text":
        out.update(words=set(), counts={}, first_values=[], first_positions=[],
                   marked=marked_facts([], []), rational=True,
                   integers=True)
    else:
        values = other["values"]
        out.update(count=0, inf=False, integral=True, big=False, total=0.0, minimum=None,
                   maximum=None, values=None if values is None else values[:0])
    return out


def marked_texts(values: list, offset: int = 0) -> dict[int, str]:
    """The texts of the cells of a marked column that are intervals or words, by position
    (``offset`` plus the cell's place in ``values``): what ``Table.marks`` keeps of them."""
    texts = {}
    for place, value in enumerate(values):
        kind, parsed = read_marked_cell(value)
        if kind == "interval":
            texts[offset + place] = str(value).strip()
        elif kind == "word":
            texts[offset + place] = parsed
    return texts


def marked_facts(values: list, positions) -> dict | None:
    """What a run of filled cells says about reading its column as marked numbers.

    ``values`` are the cells, ``positions`` their 0-based rows in the run. None when a cell
    rules the reading out (a cell that is no number, interval or word, or more different words
    than :data:`analysis.table.MARKER_RULE` allows); cells are typed by
    :func:`analysis.table.read_marked_cell`, as in memory.
    """
    out = {"numbers": 0, "intervals": 0, "words": {}, "distinct": set(), "float": False,
           "fraction": False, "inf": False, "minimum": None, "maximum": None, "total": 0.0,
           "invalid": None, "backwards": None}
    for position, value in zip(positions, values):
        kind, parsed = read_marked_cell(value)
        if kind == "number":
            _add_number(out, parsed)
        elif kind == "interval":
            out["intervals"] += 1
            low, high = parsed
            out["float"] |= isinstance(low, float) or isinstance(high, float)
            out["fraction"] |= isinstance(low, Fraction) or isinstance(high, Fraction)
            if out["backwards"] is None and Fraction(low) > Fraction(high):
                out["backwards"] = (int(position), str(value).strip(), low, high)
        elif kind == "word":
            out["words"][parsed] = out["words"].get(parsed, 0) + 1
            if len(out["words"]) > MARKER_RULE.max_words:
                return None
        elif kind == "invalid":
            out["invalid"] = out["invalid"] or (int(position), parsed)
        elif kind != "missing":
            return None
    return out


def _add_number(out: dict, value) -> None:
    out["numbers"] += 1
    out["float"] |= isinstance(value, float)
    out["fraction"] |= isinstance(value, Fraction)
    out["inf"] |= isinstance(value, float) and np.isinf(value)
    out["minimum"] = value if out["minimum"] is None else min(out["minimum"], value)
    out["maximum"] = value if out["maximum"] is None else max(out["maximum"], value)
    out["total"] += float(value)
    if out["distinct"] is not None:
        out["distinct"].add(value)
        if len(out["distinct"]) > DISTINCT_CAP:
            out["distinct"] = None


def merge_marked(a: dict | None, b: dict | None, offset: int) -> dict | None:
    """The marked facts of two consecutive runs (``b`` starts at row ``offset`` of ``a``)."""
    if a is None or b is None:
        return None
    words = dict(a["words"])
    for word, count in b["words"].items():
        words[word] = words.get(word, 0) + count
    if len(words) > MARKER_RULE.max_words:
        return None
    distinct = None if a["distinct"] is None or b["distinct"] is None \
        else a["distinct"] | b["distinct"]
    ends = [v for v in (a["minimum"], b["minimum"]) if v is not None]
    tops = [v for v in (a["maximum"], b["maximum"]) if v is not None]
    later = {key: None if b[key] is None else (b[key][0] + offset, *b[key][1:])
             for key in ("invalid", "backwards")}
    return {"numbers": a["numbers"] + b["numbers"], "intervals": a["intervals"] + b["intervals"],
            "words": words,
            "distinct": distinct if distinct is None or len(distinct) <= DISTINCT_CAP else None,
            "float": a["float"] or b["float"], "fraction": a["fraction"] or b["fraction"],
            "inf": a["inf"] or b["inf"], "minimum": min(ends) if ends else None,
            "maximum": max(tops) if tops else None, "total": a["total"] + b["total"],
            "invalid": a["invalid"] or later["invalid"],
            "backwards": a["backwards"] or later["backwards"]}


def reads_marked(f: dict, requested: bool = False) -> bool:
    """Whether a column's merged facts read as marked numbers (analysis.table's rule);
    ``requested`` when the user gave the column the role invariant."""
    m = f.get("marked") if f.get("kind") == "text" else None
    if m is None:
        return False
    if not requested and f.get("words") and reads_as_boolean(f["words"]):
        return False   # true/false words come first, as in memory
    distinct = DISTINCT_CAP if m["distinct"] is None else len(m["distinct"])
    # a cell that fails to parse counts as a mark, so that its column is read (and refused)
    return reads_as_marked_numbers(numbers=m["numbers"],
                                   intervals=m["intervals"] + (m["invalid"] is not None),
                                   words=m["words"], distinct_numbers=distinct,
                                   requested=requested)


def text_reading(f: dict, *, marked: bool = True) -> str:
    """How a column of text cells is read, from its (merged) facts, the first that holds of
    "integer" (every cell a whole number), "rational" (integers and p/q), "flag" (true/false
    words, :func:`reads_as_flag`), "marked" (numbers with intervals and words,
    :class:`MarkerRule`; only when ``marked``), "array" (JSON-array text) and "text".
    """
    if f.get("integers"):
        return "integer"
    if reads_rational(f):
        return "rational"
    if f.get("words") and reads_as_boolean(f["words"]):
        return "flag"
    if marked and reads_marked(f):
        return "marked"
    if reads_as_array_texts(f.get("brackets", 0), f["n"] - f["missing"]):
        return "array"
    return "text"


def mostly_numbers(f: dict) -> bool:
    """Whether a text column that is not read as marked numbers would be, were it not for
    the share of its word cells: numbers (and intervals) in at least half of its filled
    cells, words in the rest, few enough different words for the role invariant to read it
    (:class:`MarkerRule`). Such a column's note says so, and a warning names it."""
    m = f.get("marked") if f.get("kind") == "text" else None
    if m is None or not m["words"] or reads_marked(f):
        return False
    if f.get("words") and reads_as_boolean(f["words"]):
        return False
    words = sum(m["words"].values())
    return m["numbers"] + m["intervals"] >= words and reads_marked(f, requested=True)


def reads_rational(f: dict) -> bool:
    """Whether a text column's cells are all integers or p/q (analysis.table's rational
    rule), not all integers: read as exact rationals."""
    return bool(f.get("kind") == "text" and f.get("rational") and not f.get("integers"))


def marked_type(m: dict) -> str:
    dtype = marked_dtype(has_float=m["float"], has_fraction=m["fraction"])
    if dtype == "integer" and m["numbers"]:
        dtype = incomplete_integer_dtype(int(m["minimum"]), int(m["maximum"]))[0]
    return dtype


def marked_column(name: str, column: str, f: dict) -> tuple[dict, ColumnInfo]:
    """Number facts (for the overview and ranges) and the column's description, for a column
    whose merged facts read as marked numbers; a bad interval or cell is a TableError."""
    m = f["marked"]
    if m["invalid"] is not None:
        row, reason = m["invalid"]
        raise TableError(f"{name}, row {row + 1}, column {column!r}: {reason}. Fix the cell "
                         "or mark the column as text.")
    if m["backwards"] is not None:
        row, text, low, high = m["backwards"]
        raise TableError(f"{name}, row {row + 1}, column {column!r}: the interval {text!r} "
                         f"has its low end {low} above its high end {high}. Write intervals "
                         "as [low, high] with low <= high.")
    dtype = marked_type(m)
    note = ""
    if dtype == "real":
        note = INFINITE_NOTE if m["inf"] else ""
    elif dtype in ("integer", "big integer") and m["numbers"]:
        note = incomplete_integer_dtype(int(m["minimum"]), int(m["maximum"]))[1]
    distinct = f.get("distinct")
    values = m["distinct"]
    if values is not None:
        convert = {"real": float, "rational": Fraction}.get(dtype, int)
        values = sorted({convert(v) for v in values})
        distinct = len(values)
    word_cells = sum(m["words"].values())
    missing = f["missing"] + m["intervals"] + word_cells
    wide = dtype in ("real", "integer")
    number_facts = {
        "n": f["n"], "missing": missing, "kind": "float" if wide else "bigint",
        "count": m["numbers"], "inf": m["inf"], "integral": dtype != "real", "big": False,
        "total": m["total"], "minimum": m["minimum"], "maximum": m["maximum"],
        "values": None if values is None else np.array(
            values, dtype=np.float64 if wide else object),
        "distinct": distinct, "marked": m}
    info = ColumnInfo(column, "invariant", dtype, missing, distinct, "invariant",
                      marked_note(note, m["intervals"], m["words"]), m["intervals"],
                      marker_counts(m["words"]))
    return number_facts, info


def marked_values(series: pd.Series, dtype: str) -> pd.Series:
    """A raw marked column typed as in memory: plain numbers kept, other cells missing."""
    numbers = []
    for value in series.tolist():
        kind, parsed = read_marked_cell(value)
        numbers.append(parsed if kind == "number" else None)
    if dtype in ("integer", "real"):
        return pd.Series([np.nan if v is None else float(v) for v in numbers],
                         dtype=np.float64, index=series.index)
    convert = Fraction if dtype == "rational" else int
    return pd.Series([None if v is None else convert(v) for v in numbers], dtype=object,
                     index=series.index)


def text_note(f: dict) -> str:
    """The note of a column read as text: mostly numbers with too many words, numbers
    written in a way no reading takes, or nothing."""
    if mostly_numbers(f):
        return MOSTLY_NUMBERS_NOTE
    return numbers_as_text(f) or ""


def column_type(f: dict, fmt: str) -> tuple[str, str, str]:
    """(dtype, note, conversion for :func:`typed_block`) from a column's merged facts.

    Text columns that read as marked numbers, rationals or JSON-array text are told apart
    by the reader first (:func:`text_reading`); here they are text or true/false words.
    """
    kind = f["kind"]
    if kind is None:
        return "empty", "", ""
    if kind == "list":
        return "array", "", "arrays"
    if kind == "text":
        words = f["words"]
        if words and reads_as_boolean(words):
            return "boolean", "", "words"
        return "text", text_note(f), ""
    if kind == "bool":
        return "boolean", "", "flags" if f["missing"] else ""
    if f["count"] == 0:
        return "empty", "", ""
    csv = fmt == "csv" or f.get("parsed", False)
    if kind == "float" and f["inf"]:
        return "real", INFINITE_NOTE, "number" if csv else ""
    if kind == "float" and not f["integral"]:
        return "real", "", "number" if csv else ""
    values = f["values"]
    zero_one = values is not None and len(values) == 2 and set(values.tolist()) == {0, 1}
    dtype, note = integer_type(int(f["minimum"]), int(f["maximum"]),
                               complete=not f["missing"], zero_one=zero_one)
    return dtype, note, _integer_conversion(dtype, f, csv)


def _integer_conversion(dtype: str, f: dict, csv: bool) -> str:
    """How typed_block turns a column of whole numbers into ``dtype`` (see integer_type)."""
    prefix = "csv+" if csv else ""
    if dtype == "big integer":
        return "bigint"
    if dtype == "boolean":
        return prefix + ("flags" if f["missing"] else "bool")
    if f["missing"]:
        return prefix + "float" if f["kind"] != "float" or csv else ""
    if f["kind"] in ("int", "uint") and not csv:
        return "int64" if f["kind"] == "uint" else ""
    return prefix + "int64"


def integer_type(low: int, high: int, *, complete: bool, zero_one: bool,
                 flags: bool = True) -> tuple[str, str]:
    """(dtype, note) of a column of whole numbers from ``low`` to ``high``: the one rule.

    Only 0 and 1 (``zero_one``, missing cells allowed) make a flag, unless ``flags`` is
    False; otherwise an integer column, or big integer past 64 bits, or past 2**53 when a
    cell is missing (``complete`` False), as :func:`incomplete_integer_dtype` says.

    >>> integer_type(0, 1, complete=False, zero_one=True)
    ('boolean', '0/1 read as false/true')
    >>> integer_type(0, 2**60, complete=False, zero_one=False)
    ('big integer', 'kept exact: beyond 2**53 with missing cells')
    """
    if flags and zero_one:
        return "boolean", "0/1 read as false/true"
    if not complete:
        return incomplete_integer_dtype(low, high)
    if high > INT64_MAX or low < -INT64_MAX - 1:
        return "big integer", ""
    return "integer", ""


def distinct_of(f: dict, dtype: str) -> int:
    if "distinct" in f:
        return f["distinct"]
    kind = f.get("kind")
    if kind is None:
        return 0
    if kind == "list":
        return -1 if f.get("tokens") is None else len(f["tokens"])
    if kind == "text":
        if dtype == "boolean":
            return len({is_true_word(w) for w in f["words"]})
        return len(f["counts"])
    return len(f["values"])


def typed_block(frame: pd.DataFrame, conversions) -> pd.DataFrame:
    """A raw partition with its columns converted to the dtypes ``Table.frame`` would hold.

    ``conversions`` pairs a column with how to convert it: "number" (text to numbers),
    "float", "int64", "bool", "words" (true/false words), "bigint" (exact Python integers),
    "text" (values as strings) or "bool_to_int"; "csv+X" reads text as numbers first;
    "marked:<dtype>" keeps the plain numbers of marked numbers, intervals and words missing;
    "array_text" reads JSON-array text as arrays, "arrays" list cells as numpy arrays;
    "strip" reads labels without surrounding spaces; "decimal+X" reads Parquet decimals as
    the text of their exact values first.
    """
    from analysis.table import Limits, array_cells, array_value  # see array_facts

    frame = frame.copy(deep=False)
    for column, how in conversions:
        if column not in frame.columns:
            continue
        series = frame[column]
        if how.startswith("decimal+"):
            series, how = decimal_texts(series), how[len("decimal+"):]
        if how.startswith("marked:"):
            frame[column] = marked_values(series, how.split(":", 1)[1])
            continue
        if how == "array_text":
            frame[column] = array_cells(series, "", column)
            continue
        if how == "arrays":
            frame[column] = pd.Series([None if is_missing(v) else array_value(v, "", 0, column,
                                                                              Limits())
                                       for v in series.tolist()], dtype=object,
                                      index=series.index)
            continue
        if how == "strip":
            frame[column] = pd.Series([None if is_missing(v) else str(v).strip()
                                       for v in series.tolist()], dtype=object,
                                      index=series.index)
            continue
        if how.startswith("csv+"):
            how = how[4:]
            if how in ("float", "int64", "bool", "flags"):
                series = pd.to_numeric(series, errors="coerce")
        if how == "number":
            series = pd.to_numeric(series, errors="coerce")
        elif how == "float":
            series = series.astype(np.float64)
        elif how == "int64":
            series = series.astype(np.int64)
        elif how == "bool":
            series = series.astype(bool)
        elif how == "flags":
            series = pd.Series([None if is_missing(v) else bool(v) for v in series.tolist()],
                               dtype=object, index=series.index)
        elif how == "words":
            series = pd.Series([None if is_missing(v) else is_true_word(v)
                                for v in series.tolist()], dtype=object, index=series.index)
        elif how == "bigint":
            series = pd.Series([None if is_missing(v) else int(v) for v in series.tolist()],
                               dtype=object, index=series.index)
        elif how == "text":
            series = pd.Series([None if is_missing(v) else str(v) for v in series.tolist()],
                               dtype=object, index=series.index)
        elif how == "bool_to_int":
            series = series.map(lambda v: None if is_missing(v) else int(bool(v))).astype(
                np.float64 if series.isna().any() else np.int64)
        frame[column] = series
    return frame


def type_columns(name: str, header: list[str], facts: dict, n: int, warnings: list[str],
                  fmt: str, as_text: set[str] = frozenset(),
                  ) -> tuple[list[ColumnInfo], list[tuple[str, str]]]:
    """Each column's description and its conversion for :func:`typed_block`, from the facts
    merged over every block; ``as_text`` columns are text as asked. Warnings go to
    ``warnings`` in the order the in-memory reader gives them."""
    infos: list[ColumnInfo] = []
    how: list[tuple[str, str]] = []
    id_taken = False
    merged: list[str] = []   # said before the columns' own warnings, as in memory
    start = len(warnings)
    for column in header:
        f = facts[column]
        marked = None
        if column in as_text:
            dtype, note, convert = ("text", "", "text") if f["kind"] else ("empty", "", "")
            missing, distinct = f["missing"], distinct_of(f, dtype)
        elif f["kind"] == "text" and text_reading(f) in ("marked", "rational"):
            facts[column], marked = marked_column(name, column, f)
            dtype, note, convert = marked.dtype, marked.note, "marked:" + marked.dtype
            missing, distinct = marked.missing, marked.distinct
        else:
            dtype, note, convert = column_type(f, fmt)
            missing, distinct = f["missing"], distinct_of(f, dtype)
            if f["kind"] == "text" and text_reading(f) == "array":
                # JSON-array text: arrays, every cell checked by analysis.table's reader
                dtype, note, convert, distinct = "array", "", "array_text", -1
            elif dtype == "text" and _merge_labels(name, column, f, n, merged):
                convert, distinct = "strip", len(f["counts"])
        if convert and f.get("decimal"):
            convert = "decimal+" + convert
        if convert:
            how.append((column, convert))
        role = detect_role(column, dtype, distinct, missing, n, id_taken)
        if role == "id":
            id_taken = True
        labels = list(f["counts"]) if role == "category" and dtype == "text" \
            and f.get("counts") is not None else None
        warnings.extend(column_warnings(name, column, dtype, note, distinct, n, role, labels,
                                        missing))
        info = ColumnInfo(column, role, dtype, missing, distinct, role, note)
        infos.append(info if marked is None else replace(marked, role=role, detected_role=role))
    warnings[start:start] = merged
    return infos, how


def _merge_labels(name: str, column: str, f: dict, n: int, merged: list[str]) -> bool:
    """Labels differing only by surrounding spaces made one, when analysis.table's rule
    says so: the column's counts are merged and the warning goes to ``merged``."""
    counts = f.get("counts")
    if counts is None:
        return False
    stripped: dict[str, tuple[int, int]] = {}
    for label, (count, first) in counts.items():
        key = label.strip()
        had = stripped.get(key, (0, first))
        stripped[key] = (had[0] + count, min(had[1], first))
    padded = sum(count for label, (count, _) in counts.items() if label != label.strip())
    warning = label_merge_warning(name, column, padded=padded, written=len(counts),
                                  labels=len(stripped), missing=f["missing"], rows=n)
    if warning is None:
        return False
    merged.append(warning)
    f["counts"] = stripped
    return True


def array_text_facts(frame: pd.DataFrame, columns, name: str, first_row: int) -> dict:
    """The list facts of JSON-array text ``columns`` of one block, every cell checked by the
    in-memory reader (``first_row``: the block's first row in the whole table)."""
    from analysis.table import array_cells  # see array_facts

    out = {}
    for column in columns:
        raw = frame[column].tolist()
        read = array_cells(frame[column], name, column, first_row=first_row).tolist()
        cells = [v for v in read if v is not None]
        marks: dict[str, int] = {}
        for text, value in zip(raw, read):
            if value is None and not is_missing(text):
                mark = array_mark(str(text).strip())
                marks[mark] = marks.get(mark, 0) + 1
        out[column] = {"n": len(frame), "missing": len(frame) - len(cells), "kind": "list",
                       **array_facts(cells, column), "marks": marks}
    return out


def bucketed_uniques(frame: pd.DataFrame, columns, csv_columns, buckets: int,
                      marked: dict) -> dict:
    """The distinct values of ``columns`` in one block, split into ``buckets`` by hash, so
    that buckets can be counted apart; ``marked`` maps a marked column to its dtype."""
    out = {}
    for column in columns:
        series = frame[column].dropna()
        if column in marked:
            series = marked_values(series, marked[column]).dropna()
            if marked[column] not in ("integer", "real"):
                series = series.map(str)   # exact values hash alike by their text
        elif column in csv_columns:
            numbers = pd.to_numeric(series, errors="coerce")
            if not numbers.isna().any():
                series = numbers
        values = pd.unique(series.to_numpy())
        hashed = pd.util.hash_array(np.asarray(values, dtype=object)
                                    if values.dtype == object else values) % buckets
        out[column] = [values[hashed == b] for b in range(buckets)]
    return out
