"""Reading a table of invariants: parse, type, assign roles, validate.

A table file goes in as bytes and is never written to. Out comes a :class:`Table`: a pandas
frame of typed values (exact Python integers past 64 bits, fractions for rationals, numpy
arrays for list- and matrix-valued cells), one role per column, and a digest of the bytes
that keys every cached result.

Integers stay exact at any size. Parquet has no integer type past 64 bits, so such integers
are read from text columns of digits or from decimal columns of scale 0 (decimals with a
scale become exact rationals). Integers longer than Python's digit limit for reading text
(4300 digits unless PYTHONINTMAXSTRDIGITS says otherwise) are refused with a message saying
so; a column given the role text or category is kept as text without being parsed.

Tables from public databases write an open value as an interval ``[1,2]`` and put a word
where an invariant does not apply (``infty``, ``D.N.E.``). A column of numbers with a few such
cells is still an invariant: see :class:`analysis.column_facts.MarkerRule` for when (the
typing rule of both readers lives in :mod:`analysis.column_facts`), :meth:`Table.intervals`
for the intervals, and ``ColumnInfo.intervals`` and ``ColumnInfo.markers`` for the counts. A
cell of JSON-array text is an array unless its column also holds plain numbers: a column whose
every filled cell is a two-element list stays an array column, while plain numbers mixed with
two-element brackets are numbers and intervals. Flags are 0/1 and the words of
``TRUE_WORDS`` and ``FALSE_WORDS`` in any case (see ``column_facts.reads_as_flag``). Category
labels are read without surrounding spaces, with a warning.

``ColumnInfo.missing`` counts every cell with no single value in the typed frame: empty
cells, marker words and intervals.

Every failure is a :class:`~analysis.errors.TableError` whose message names the file and,
where it applies, the row and column. Rows are counted from 1 after the header in messages,
the way a spreadsheet shows them; row ids in results are 0-based positions when the table
has no id column.
"""

from __future__ import annotations

import csv
import hashlib
import io
import json
import math
import re
import sys
from dataclasses import dataclass, field, replace
from decimal import Decimal
from fractions import Fraction
from pathlib import Path
from typing import NamedTuple

import numpy as np
import pandas as pd

from analysis.column_facts import (
    CUT_ARRAY_MARK,
    FALSE_WORDS,
    FLOAT_EXACT,
    INFINITE_NOTE,
    INT64_MAX,
    INTEGER_TEXT,
    MARKER_RULE,
    MISSING_WORDS,
    RATIONAL_TEXT,
    TRUE_WORDS,
    ColumnInfo,
    array_mark,
    column_named,
    column_warnings,
    detect_role,
    from_decimal,
    incomplete_integer_dtype,
    integer_type,
    is_missing,
    label_merge_warning,
    label_merge_words,
    list_text,
    marked_column,
    marked_dtype,
    marked_note,
    marker_counts,
    read_marked_cell,
    reads_array_words,
    reads_as_marked_numbers,
    reads_marked,
    shown_value,
    text_block_facts,
    text_note,
    text_reading,
)
from analysis.errors import StepError, TableError
from analysis.notes import Note

ROLES = ("id", "invariant", "category", "flag", "array", "text")
_NUMBER_DTYPES = ("integer", "big integer", "rational", "real")
FORMATS = ("csv", "tsv", "json", "jsonl", "parquet")
_EXTENSIONS = {
    ".csv": "csv",
    ".txt": "csv",
    ".tsv": "tsv",
    ".tab": "tsv",
    ".json": "json",
    ".jsonl": "jsonl",
    ".ndjson": "jsonl",
    ".parquet": "parquet",
    ".pq": "parquet",
}
_INTEGER_TEXT = re.compile(rf"^{INTEGER_TEXT}$")
_RATIONAL_TEXT = re.compile(rf"^{RATIONAL_TEXT}$")
_MISSING_WORDS = list(MISSING_WORDS)
# The header is looked for in this many leading characters of a delimited file.
_HEADER_CHARS = 64 * 1024 * 1024
# Up to this many retyped columns are replaced one by one in the parsed frame; past it, one
# new frame is built (a replacement costs a lookup over the frame's columns).
_REPLACED_COLUMNS = 64


@dataclass(frozen=True)
class Limits:
    """Resource limits for one table; each can be raised deliberately by the caller.

    The defaults suit a laptop with 8 GB or more. ``max_bytes`` applies to the file, ``max_cell``
    to one cell's text, ``max_array`` to the entries of one array cell and ``max_depth`` to the
    nesting of JSON values.
    """

    max_rows: int = 20_000_000
    max_columns: int = 10_000
    max_bytes: int = 4 * 1024**3
    max_cell: int = 1_000_000
    max_array: int = 100_000
    max_depth: int = 64


class ColumnLookup:
    """Column descriptions by name and by role, for a table with ``name`` and ``columns``
    (:class:`Table`, and the Dask engine's partitioned table)."""

    def column(self, name: str) -> ColumnInfo:
        return column_named(self.name, self.columns, name)

    def role(self, name: str) -> str:
        return self.column(name).role

    def names_with_role(self, *roles: str) -> list[str]:
        return [c.name for c in self.columns if c.role in roles]


@dataclass(frozen=True)
class Table(ColumnLookup):
    """A parsed, typed table. Treat ``frame`` as read-only: steps never change it."""

    name: str
    digest: str
    frame: pd.DataFrame = field(repr=False)
    columns: tuple[ColumnInfo, ...]
    warnings: tuple[str, ...] = ()
    id_column: str | None = None
    format: str = "csv"
    limits: Limits = field(default_factory=Limits, repr=False, compare=False)
    # interval cells and cell texts of marked columns, by column (see Table.intervals)
    marks: dict = field(default_factory=dict, repr=False, compare=False)

    @property
    def n_rows(self) -> int:
        return len(self.frame)

    @property
    def row_ids(self) -> np.ndarray:
        if self.id_column is None:
            return np.arange(self.n_rows)
        return self.frame[self.id_column].to_numpy()

    def intervals(self, name: str) -> Intervals:
        """The interval cells ``[low, high]`` of a column (none for most columns).

        In ``frame`` (and so in ``numeric`` and ``exact``) these cells are missing values;
        here are their positions, row ids and ends, for steps that use what is known of
        them: a feature may take the low end, high end or midpoint, and a statement is
        broken by an interval row only when every value in the interval breaks it.

        >>> table.intervals("chromatic_bounds").numeric("midpoint")   # doctest: +SKIP
        """
        self.column(name)
        marks = self.marks.get(name)
        positions = np.array(marks.positions if marks else (), dtype=np.int64)
        return Intervals(column=name, positions=positions, row_ids=self.row_ids[positions],
                         low=marks.low if marks else (), high=marks.high if marks else ())

    def numeric(self, name: str) -> np.ndarray:
        """The column as float64, NaN where missing. Huge integers may become +-inf."""
        info = self.column(name)
        series = self.frame[name]
        if info.dtype in ("integer", "real"):
            return series.to_numpy(dtype=np.float64, na_value=np.nan)
        if info.dtype == "boolean":
            return np.array([np.nan if v is None or v is pd.NA else float(bool(v))
                             for v in series], dtype=np.float64) \
                if series.dtype == object else series.to_numpy(dtype=np.float64)
        if info.dtype in ("big integer", "rational"):
            return np.array([_to_float(v) for v in series], dtype=np.float64)
        raise TableError(
            f"{self.name}: column {name!r} holds {info.dtype} values, not numbers. "
            "Choose a numeric column or change its role."
        )

    def exact(self, name: str) -> list:
        """The column as exact Python values: int, Fraction, or None where missing.

        An infinite real has no exact value and is None too, as it counts as missing in
        features.
        """
        info = self.column(name)
        series = self.frame[name]
        if info.dtype == "integer":
            if series.dtype.kind in "iu":
                return [int(v) for v in series.tolist()]
            return [None if is_missing(v) else int(v) for v in series.tolist()]
        if info.dtype == "boolean":
            return [None if is_missing(v) else int(bool(v)) for v in series.tolist()]
        if info.dtype in ("big integer", "rational"):
            return [None if is_missing(v) else v for v in series.tolist()]
        if info.dtype == "real":
            return [None if is_missing(v) or math.isinf(v) else Fraction(v)
                    for v in series.tolist()]
        raise TableError(
            f"{self.name}: column {name!r} holds {info.dtype} values, which have no exact "
            "numeric form. Choose an integer, rational or flag column."
        )

    def with_roles(self, roles: dict[str, str] | None = None, *,
                   id_column: str | None | type[...] = ...) -> Table:
        """A new Table with some roles overridden (validated cell by cell)."""
        changes = requested_roles(self.name, self.columns, roles, id_column)
        frame = self.frame
        marks = dict(self.marks)
        ids = None if self.id_column is None else self.frame[self.id_column].tolist()
        infos = []
        for info in self.columns:
            role = changes.get(info.name)
            if role is None:
                infos.append(info)
                continue
            new_values, new_info, new_marks = _retype(
                self.name, frame[info.name], info, role, self.limits, marks.get(info.name), ids)
            marks.pop(info.name, None)
            if new_marks is not None:
                marks[info.name] = new_marks
            if new_values is not None:
                if frame is self.frame:
                    frame = frame.copy(deep=False)
                frame[info.name] = new_values
            infos.append(new_info)
        new_id = single_id(self.name, infos)
        if new_id is not None:
            _check_unique_ids(self.name, frame[new_id])
        return replace(self, frame=frame, columns=tuple(infos), id_column=new_id, marks=marks)

    def marked_lines(self) -> list[str]:
        """One line of text per marked column: its intervals and its words with their counts.

        For the command line's ``inspect`` summary; empty when no column is marked.
        """
        lines = []
        for info in self.columns:
            if not info.intervals and not info.markers:
                continue
            parts = []
            if info.intervals:
                parts.append(f"{info.intervals} interval{'s' if info.intervals != 1 else ''} "
                             "[low, high] kept apart")
            if info.markers:
                parts.append("read as missing: " + ", ".join(
                    f"{word!r} in {count} row{'s' if count != 1 else ''}"
                    for word, count in info.markers.items()))
            lines.append(f"  {info.name}: " + "; ".join(parts))
        if lines:
            lines.insert(0, "numbers with marks (intervals and words are missing values "
                            "in the typed columns):")
        return lines

    def summary(self) -> dict:
        """The `inspect` result as plain JSON."""
        return {
            "table": self.name,
            "digest": self.digest,
            "format": self.format,
            "rows": self.n_rows,
            "id_column": self.id_column,
            "columns": [c.to_json() for c in self.columns],
            "warnings": list(self.warnings),
        }


# ----------------------------------------------------------------------------------------
# Entry points


def load_table(path: str | Path, *, id_column: str | None = None,
               roles: dict[str, str] | None = None, limits: Limits | None = None,
               format: str | None = None) -> Table:
    """Read a table file (CSV, TSV, JSON, JSON Lines, Parquet) without changing it.

    >>> table = load_table("sample_tables/lattice_polygons.csv")   # doctest: +SKIP
    >>> table.role("vertex_list")                                  # doctest: +SKIP
    'array'
    """
    path = Path(path)
    limits = limits or Limits()
    name = path.name
    try:
        size = path.stat().st_size
    except FileNotFoundError:
        raise TableError(f"{path}: no such file. Check the path.") from None
    except OSError as exc:
        raise TableError(f"{path}: cannot be read ({exc.strerror}).") from None
    if path.is_dir():
        raise TableError(f"{path}: is a folder, not a table file.")
    if size > limits.max_bytes:
        raise TableError(
            f"{name}: the file is {size / 1024**3:.1f} GB, over the limit of "
            f"{limits.max_bytes / 1024**3:.1f} GB. Convert it to Parquet and use the dask engine, "
            "or raise it with --limit max_bytes=N."
        )
    try:
        data = path.read_bytes()
    except OSError as exc:
        raise TableError(f"{path}: cannot be read ({exc.strerror}).") from None
    return read_table(data, name, id_column=id_column, roles=roles, limits=limits,
                      format=format)


def read_table(data: bytes, name: str, *, id_column: str | None = None,
               roles: dict[str, str] | None = None, limits: Limits | None = None,
               format: str | None = None) -> Table:
    """Parse a table from its bytes; ``name`` (a file name) picks the format and labels messages."""
    limits = limits or Limits()
    if len(data) > limits.max_bytes:
        raise TableError(
            f"{name}: {len(data)} bytes is over the limit of {limits.max_bytes} bytes. "
            "Raise it with --limit max_bytes=N or use the dask engine on a Parquet file."
        )
    digest = hashlib.sha256(data).hexdigest()
    suffix = Path(name).suffix.lower()
    if format is None and suffix not in _EXTENSIONS and data[:4] == b"PK\x03\x04":
        raise TableError(
            f"{name}: a zip archive (a spreadsheet workbook such as .xlsx or .ods is one), not "
            "a table format read here. Save the sheet as CSV (or TSV, JSON, JSON Lines, "
            "Parquet) and load that."
        )
    fmt = format or format_of(name, data)
    if fmt not in FORMATS:
        raise TableError(f"{name}: unknown format {fmt!r}; use one of {', '.join(FORMATS)}.")
    if not data.strip():
        raise TableError(f"{name}: the file is empty. A table needs a header and rows.")
    warnings: list[str] = []
    if fmt in ("csv", "tsv"):
        frame = _read_delimited(data, name, fmt, warnings, limits)
    elif fmt == "json":
        frame = _read_json(data, name, warnings, limits)
    elif fmt == "jsonl":
        frame = _read_json_lines(data, name, warnings, limits)
    else:
        frame = _read_parquet(data, name)
    if len(frame.columns) == 0:
        raise TableError(f"{name}: no columns found. A table needs a header row.")
    if len(frame) == 0:
        raise TableError(f"{name}: a header but no rows. Add at least two rows of data.")
    if len(frame) > limits.max_rows:
        raise TableError(
            f"{name}: more than {limits.max_rows} rows, over the limit of {limits.max_rows}. "
            "Use the dask engine on a Parquet file, or raise it with --limit max_rows=N."
        )
    if len(frame.columns) > limits.max_columns:
        raise TableError(
            f"{name}: {len(frame.columns)} columns is over the limit of {limits.max_columns}. "
            "Select the columns you need first, or raise it with --limit max_columns=N."
        )
    frame.columns = [str(c) for c in frame.columns]
    frame = _drop_unnamed(frame, name, warnings)
    check_column_names(name, list(frame.columns))
    if len(frame) == 1:
        warnings.append(Note("one_row", f"{name}: only one row; most steps need many more."))
    # Columns the caller wants as text are not parsed, so a cell that would not parse (an
    # over-long integer, a ragged matrix) can be kept by giving its column the role text.
    as_text = set(text_roles(roles))
    table = _type_columns(frame, name, digest, fmt, warnings, limits, as_text, id_column)
    if roles or id_column is not None:
        table = table.with_roles(roles, id_column=id_column if id_column is not None else ...)
    return table


def text_roles(roles: dict[str, str] | None) -> list[str]:
    """The columns asked to be text or a category: both readers keep their cells as written,
    unparsed, so that a cell that would not parse can be kept."""
    return [column for column, role in (roles or {}).items() if role in ("text", "category")]


# ----------------------------------------------------------------------------------------
# Parsing per format


def format_of(name: str, data: bytes) -> str:
    """The format of a table file named ``name`` whose bytes start with ``data``: by its
    suffix, else by its first bytes (Parquet's magic number, a JSON array or record)."""
    suffix = Path(name).suffix.lower()
    if suffix in _EXTENSIONS:
        return _EXTENSIONS[suffix]
    head = data[:4096].lstrip()
    if data[:4] == b"PAR1":
        return "parquet"
    if head.startswith(b"["):
        return "json"
    if head.startswith(b"{"):
        return "jsonl"
    return "csv"


def _decode(data: bytes, name: str, warnings: list[str]) -> str:
    if data.startswith((b"\xff\xfe", b"\xfe\xff")):
        try:
            text = data.decode("utf-16")
        except UnicodeDecodeError as exc:
            raise TableError(f"{name}: starts like UTF-16 but is not ({exc.reason}). "
                             "Re-save the file as UTF-8.") from None
        warnings.append(Note("utf16", f"{name}: read as UTF-16 (byte-order mark found)."))
        return text
    try:
        return data.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        line = data[: exc.start].count(b"\n") + 1
        bad = data[exc.start: exc.start + 4]
        raise TableError(
            f"{name}, line {line}: bytes {bad!r} at offset {exc.start} are not UTF-8. "
            "Re-save the file as UTF-8 (most spreadsheet programs offer 'CSV UTF-8')."
        ) from None


def _read_delimited(data: bytes, name: str, fmt: str, warnings: list[str],
                    limits: Limits) -> pd.DataFrame:
    text = _decode(data, name, warnings)
    # pandas parses UTF-8 bytes directly, several times faster than a str (and without the
    # str's four bytes per character): the file's own bytes when they are UTF-8
    if data.startswith(b"\xef\xbb\xbf"):
        raw = data[3:]
    elif data.startswith((b"\xff\xfe", b"\xfe\xff")):
        raw = text.encode("utf-8")
    else:
        raw = data
    if b"\x00" in raw:
        raise TableError(f"{name}: contains NUL bytes; this is not a text table. "
                         "Check that the file is CSV or TSV.")
    delimiter, header = delimited_layout(text, name, fmt)
    check_column_names(name, header)
    if len(header) > limits.max_columns:
        raise TableError(
            f"{name}: {len(header)} columns is over the limit of {limits.max_columns}. "
            "Select the columns you need first, or raise it with --limit max_columns=N."
        )
    try:
        frame = pd.read_csv(
            io.BytesIO(raw), encoding="utf-8", sep=delimiter, skipinitialspace=False,
            keep_default_na=False, na_values=_MISSING_WORDS,
            # one row past the limit is enough to know the limit is passed
            nrows=limits.max_rows + 1,
        )
    except pd.errors.EmptyDataError:
        raise TableError(f"{name}: the file is empty. A table needs a header and rows.") from None
    except pd.errors.ParserError as exc:
        raise TableError(f"{name}: {_parser_message(str(exc), header)}") from None
    except (ValueError, OverflowError, MemoryError) as exc:
        raise TableError(f"{name}: could not be parsed as a delimited table "
                         f"({one_line(exc)}).") from None
    if not frame.index.equals(pd.RangeIndex(len(frame))):
        # pandas makes the first cells an index when the first row is longer than the header
        _check_long_rows(text, delimiter, len(header), name)
    frame.columns = header if len(header) == len(frame.columns) else frame.columns
    if len(frame) and frame.iloc[:, -1].isna().any():
        _check_short_rows(text, delimiter, len(header), name)
    frame = _exact_integers(frame, text, delimiter, limits)
    said = delimiter_warning(name, delimiter)
    if said:
        warnings.append(said)
    return frame


def delimited_layout(text: str, name: str, fmt: str) -> tuple[str, list[str]]:
    """The delimiter (a tab for TSV, else sniffed) and the header's names, stripped, of the
    text of a delimited table; TableError when the first line names no column."""
    delimiter = "\t" if fmt == "tsv" else sniff_delimiter(text)
    header = [h.strip() for h in header_record(text, delimiter)]
    if not any(header):
        raise TableError(f"{name}: the first line is empty; it must name the columns.")
    return delimiter, header


def delimiter_warning(name: str, delimiter: str) -> str | None:
    """The warning for a delimited table whose cells are not separated by commas."""
    if delimiter == ",":
        return None
    shown = {"\t": "tab", ";": "semicolon", "|": "vertical bar"}.get(delimiter, delimiter)
    return Note("delimiter", f"{name}: columns separated by {shown}.", delimiter=delimiter)


def _exact_integers(frame: pd.DataFrame, text: str, delimiter: str,
                    limits: Limits) -> pd.DataFrame:
    """Undo two ways pandas loses exact integers, by re-reading those columns as text.

    A column of integers with a missing cell is read as float64, which rounds integers past
    2**53; and some columns of huge integers come back as text with empty cells left as "".
    """
    positions = []
    for position, (_, series) in enumerate(frame.items()):
        if series.dtype.kind in "biu":
            continue  # exact already
        if series.dtype.kind == "f":
            raw = series.to_numpy()
            finite = raw[np.isfinite(raw)]
            if len(finite) and np.isnan(raw).any() and np.abs(finite).max() >= FLOAT_EXACT \
                    and bool((finite == np.round(finite)).all()):
                positions.append(position)
        elif series.dtype.kind == "O" or pd.api.types.is_string_dtype(series):
            if series.isin(_MISSING_WORDS).any():
                frame = frame.copy(deep=False) if not positions else frame
                frame.isetitem(position, series.astype(object).where(
                    ~series.isin(_MISSING_WORDS), None))
    if not positions:
        return frame
    texts = pd.read_csv(
        io.StringIO(text), sep=delimiter, usecols=positions, dtype=str,
        keep_default_na=False, na_values=_MISSING_WORDS, nrows=limits.max_rows + 1,
    )
    frame = frame.copy(deep=False)
    for k, position in enumerate(positions):
        cells = texts.iloc[:, k]
        present = cells.dropna()
        # only when every cell is an integer: "1e20" and "2.0" stay the reals they are
        if present.map(lambda t: bool(_INTEGER_TEXT.match(t))).all():
            frame.isetitem(position, cells.astype(object).where(cells.notna(), None))
    return frame


def header_record(text: str, delimiter: str) -> list[str]:
    """The header's names as written (strip them to use them): the first record, read the
    way pandas reads it: a quoted name may hold a line break, and old files end lines with
    a lone carriage return.

    Read from the first megabyte when a second record starts there (so the first one ended
    inside it); otherwise from up to _HEADER_CHARS characters. Copying a whole large file
    into the csv module's reader would take a fifth of the loading time.
    """
    short = 1 << 20
    if len(text) > short:
        reader = csv.reader(io.StringIO(text[:short], newline=""), delimiter=delimiter)
        try:
            header = next(reader)
            next(reader)
            return header
        except (csv.Error, StopIteration):
            pass
    try:
        return next(csv.reader(io.StringIO(text[:_HEADER_CHARS], newline=""),
                               delimiter=delimiter))
    except (csv.Error, StopIteration):
        return []


def sniff_delimiter(text: str) -> str:
    """The delimiter of a CSV-like text (comma, semicolon, tab or vertical bar), from its first
    50 lines; a comma when nothing else stands out."""
    sample = "\n".join(text[:65536].splitlines()[:50])
    try:
        return csv.Sniffer().sniff(sample, delimiters=",;\t|").delimiter
    except csv.Error:
        first = sample.split("\n", 1)[0]
        counts = {d: first.count(d) for d in ",;\t|"}
        best = max(counts, key=counts.get)
        return best if counts[best] else ","


def _parser_message(message: str, header: list[str]) -> str:
    match = re.search(r"Expected (\d+) fields in line (\d+), saw (\d+)", message)
    if match:
        expected, line, saw = (int(g) for g in match.groups())
        return (f"row {line - 1} (line {line}) has {saw} cells but the header names "
                f"{len(header) or expected} columns. {_LONG_ROW_ADVICE}")
    if "EOF inside string" in message or "EOF" in message:
        return ("a quoted cell is never closed (a lone \" character). "
                "Close the quote or remove it.")
    return f"could not be parsed as a delimited table ({one_line(message)})."


# What to do about a row with more cells than the header: the usual cause in downloaded
# tables is an interval or a list written with the delimiter inside it.
_LONG_ROW_ADVICE = ("Fix that row, or quote cells that contain the delimiter (an interval "
                    "such as [0,2] or a list such as [1,2,3] must be in double quotes).")


def _check_long_rows(text: str, delimiter: str, width: int, name: str) -> None:
    """Name the first row with more cells than the header (pandas would have made an index
    of its first cells and shifted every column)."""
    reader = csv.reader(io.StringIO(text, newline=""), delimiter=delimiter)
    try:
        next(reader, None)
        rows = (cells for cells in reader if cells)
        for number, cells in enumerate(rows, start=1):
            if len(cells) > width:
                raise TableError(f"{name}, row {number} (line {reader.line_num}): "
                                 f"{len(cells)} cells but the header names {width} columns. "
                                 f"{_LONG_ROW_ADVICE}")
    except csv.Error:
        pass
    raise TableError(f"{name}: a row has more cells than the header names columns. "
                     f"{_LONG_ROW_ADVICE}")


def _check_short_rows(text: str, delimiter: str, width: int, name: str) -> None:
    # newline="" lets the csv module see carriage returns inside quoted cells, as pandas did
    reader = csv.reader(io.StringIO(text, newline=""), delimiter=delimiter)
    try:
        next(reader, None)
        # blank lines are skipped by pandas, so they do not count as rows here either
        rows = (cells for cells in reader if cells)
        for number, cells in enumerate(rows, start=1):
            if len(cells) < width:
                raise TableError(
                    f"{name}, row {number} (line {reader.line_num}): {len(cells)} cells but the "
                    f"header names {width} columns. Fill the missing cells (leave them empty "
                    "between delimiters to mark them missing)."
                )
    except csv.Error:
        # pandas accepted the layout; a row count the csv module cannot follow is not a
        # short row, so the cells pandas left empty stay missing.
        return


def _depth_ok(text: str, limit: int) -> int:
    """Deepest bracket nesting in JSON text, ignoring brackets inside strings."""
    depth = deepest = 0
    in_string = escaped = False
    for ch in text:
        if in_string:
            if escaped:
                escaped = False
            elif ch == "\\":
                escaped = True
            elif ch == '"':
                in_string = False
        elif ch == '"':
            in_string = True
        elif ch in "[{":
            depth += 1
            if depth > deepest:
                deepest = depth
                if deepest > limit:
                    return deepest
        elif ch in "]}":
            depth -= 1
    return deepest


def _json_loads(text: str, name: str, where: str, limits: Limits,
                constants: set[str] | None = None):
    """Parse JSON text; ``where`` (", line N" for JSON Lines) places messages in the file.

    NaN and Infinity are not standard JSON, but Python's json module writes them; they are
    read (as a missing value and as infinities) and recorded in ``constants`` so that the
    caller can tell the user.
    """
    if constants is None:
        constants = set()

    def note_constant(word: str) -> float:
        constants.add(word)
        return float(word)

    try:
        value = json.loads(text, parse_constant=note_constant)
    except RecursionError:
        raise TableError(
            f"{name}{where}: JSON nested too deeply (more than {limits.max_depth} levels). "
            "A table is an array of flat records whose cells hold at most matrices."
        ) from None
    except ValueError as exc:
        if isinstance(exc, json.JSONDecodeError):
            end = " (the file may be cut short)" if exc.pos >= len(text.rstrip()) - 1 else ""
            place = f", column {exc.colno}" if where else \
                f", line {exc.lineno}, column {exc.colno}"
            raise TableError(
                f"{name}{where}{place}: invalid JSON: {exc.msg}{end}. Fix the file or "
                "export it again."
            ) from None
        if "integer string conversion" in str(exc):
            raise TableError(_too_many_digits(name, where, text)) from None
        raise TableError(f"{name}{where}: invalid JSON: {one_line(exc)}.") from None
    return value


def _constants_warning(name: str, constants: set[str]) -> str:
    return Note("json_constants",
                f"{name}: found {', '.join(sorted(constants))}, which standard JSON does not "
                "allow; NaN is read as a missing value, Infinity as an infinite number.",
                constants=sorted(constants))


def _too_many_digits(name: str, where: str, text: str, column: str | None = None) -> str:
    """The message for an integer longer than Python converts from text by default."""
    limit = sys.get_int_max_str_digits()
    found = re.search(r"\d{" + str(limit + 1) + ",}", text) if limit else None
    digits = len(found.group()) if found else limit + 1
    line = f", line {text.count(chr(10), 0, found.start()) + 1}" if found and not where \
        and column is None else ""
    place = f", column {column!r}" if column is not None else ""
    return (
        f"{name}{where}{line}{place}: an integer of {digits} digits is over Python's limit of "
        f"{limit} digits for reading integers from text. Raise the limit by setting the "
        "environment variable PYTHONINTMAXSTRDIGITS=0 (or call sys.set_int_max_str_digits(0)), "
        "or give the column the role text."
    )


def _read_json(data: bytes, name: str, warnings: list[str], limits: Limits) -> pd.DataFrame:
    text = _decode(data, name, warnings)
    if len(text) < 50_000_000 and _depth_ok(text, limits.max_depth) > limits.max_depth:
        raise TableError(
            f"{name}: JSON nested more than {limits.max_depth} levels deep. A table is an "
            "array of flat records whose cells hold at most matrices."
        )
    constants: set[str] = set()
    records = _json_loads(text, name, "", limits, constants)
    if constants:
        warnings.append(_constants_warning(name, constants))
    if isinstance(records, dict):
        for key in ("rows", "records", "data"):
            if isinstance(records.get(key), list):
                warnings.append(Note("records_key",
                                     f"{name}: read the records under the key {key!r}.", key=key))
                records = records[key]
                break
    if not isinstance(records, list):
        kind = type(records).__name__.replace("dict", "object").replace("list", "array")
        raise TableError(
            f"{name}: expected a JSON array of records like [{{\"a\": 1}}, ...], got "
            f"a JSON {kind}. Export the table as an array of records."
        )
    return _records_frame(records, name, "row")


def _read_json_lines(data: bytes, name: str, warnings: list[str],
                     limits: Limits) -> pd.DataFrame:
    text = _decode(data, name, warnings)
    records = []
    constants: set[str] = set()
    for number, line in enumerate(text.splitlines(), start=1):
        if not line.strip():
            continue
        if _depth_ok(line, limits.max_depth) > limits.max_depth:
            raise TableError(f"{name}, line {number}: JSON nested more than "
                             f"{limits.max_depth} levels deep.")
        records.append(_json_loads(line, name, f", line {number}", limits, constants))
        if len(records) > limits.max_rows:
            break  # one record past the limit is enough for read_table to say so
    if constants:
        warnings.append(_constants_warning(name, constants))
    return _records_frame(records, name, "line")


def _records_frame(records: list, name: str, unit: str) -> pd.DataFrame:
    if not records:
        raise TableError(f"{name}: no records. A table needs at least one row.")
    columns: dict[str, None] = {}
    for number, record in enumerate(records, start=1):
        if not isinstance(record, dict):
            raise TableError(
                f"{name}, {unit} {number}: expected a record (an object like {{\"a\": 1}}), "
                f"got {shown_value(record)}. Every element of the array must be a record."
            )
        for key in record:
            columns.setdefault(key, None)
    names = list(columns)
    data = {key: [record.get(key) for record in records] for key in names}
    frame = pd.DataFrame({key: pd.Series(values, dtype=object) for key, values in data.items()})
    return frame


def _read_parquet(data: bytes, name: str) -> pd.DataFrame:
    import pyarrow as pa
    import pyarrow.parquet as pq

    try:
        source = pq.ParquetFile(pa.BufferReader(data))
        schema = source.schema_arrow
        names = schema.names
        check_column_names(name, [str(n) for n in names])
        # a column at a time, each integer column narrowed before the next is read: peak
        # memory near one wide column plus the narrowed table, not the whole table twice
        # (see bench/RESULTS.md)
        columns = [_narrowed(source.read(columns=[n]).column(0))
                   for n in names]
        arrow = pa.table(columns, names=names).replace_schema_metadata(schema.metadata)
        del columns
    except (pa.ArrowException, OSError, ValueError) as exc:
        raise TableError(f"{name}: not a readable Parquet file ({one_line(exc)}). "
                         "Check the file or export it again.") from None
    try:
        # integer columns with nulls come back as Python ints and None rather than float64,
        # which would round integers past 2**53. One block per column, each column's Arrow
        # memory released as it is converted
        return arrow.to_pandas(types_mapper=None, integer_object_nulls=True,
                               split_blocks=True, self_destruct=True)
    except (pa.ArrowException, ValueError, TypeError) as exc:
        raise TableError(f"{name}: Parquet columns could not be converted "
                         f"({one_line(exc)}).") from None


def _narrowed(column):
    """An Arrow integer column with no gap, in the smallest signed type holding it exactly;
    any other column as it is."""
    import pyarrow as pa
    import pyarrow.compute as pc

    if not pa.types.is_integer(column.type) or column.null_count or len(column) == 0:
        return column
    extremes = pc.min_max(column)
    low, high = extremes["min"].as_py(), extremes["max"].as_py()
    if high > INT64_MAX:
        return column
    narrow = pa.from_numpy_dtype(_smallest_integer_type(low, high))
    return column if narrow == column.type else column.cast(narrow)


def _drop_unnamed(frame: pd.DataFrame, name: str, warnings: list[str]) -> pd.DataFrame:
    """Drop columns with no name and no values (a delimiter at the end of every line); a
    column with values but no name is an error, since steps and messages need its name."""
    keep = []
    for position, column in enumerate(frame.columns):
        if column.strip():
            keep.append(position)
            continue
        values = frame.iloc[:, position]
        filled = values.notna() & (values.astype(str).str.strip() != "")
        if filled.any():
            row = int(np.flatnonzero(filled.to_numpy())[0])
            unnamed_column_error(name, position, row, values.iloc[row])
        warnings.append(unnamed_column_warning(name, position))
    if len(keep) == frame.shape[1]:
        return frame
    return frame.iloc[:, keep]


def unnamed_column_warning(name: str, position: int) -> str:
    """The warning for the column at 0-based ``position``, with no name and no values."""
    return Note("unnamed_empty_column",
                f"{name}: column {position + 1} has no name and no values; ignored.",
                column=position + 1)


def unnamed_column_error(name: str, position: int, row: int, value) -> None:
    """Refuse the column at ``position`` with no name but a ``value`` in 0-based ``row``."""
    raise TableError(
        f"{name}: column {position + 1} has no name in the header but holds values "
        f"(row {row + 1}: {shown_value(value)}). Name it in the header."
    )


def check_column_names(name: str, header: list[str]) -> None:
    """Refuse a header naming one column twice (unnamed columns are looked at apart)."""
    seen: dict[str, int] = {}
    for position, column in enumerate(header, start=1):
        if not column.strip():
            continue  # unnamed columns are dropped or reported by _drop_unnamed
        if column in seen:
            raise TableError(
                f"{name}: column name {column!r} appears twice (columns {seen[column]} and "
                f"{position}). Rename one of them."
            )
        seen[column] = position


# ----------------------------------------------------------------------------------------
# Marked numbers: intervals and marker words among the numbers of a column


@dataclass(frozen=True)
class Intervals:
    """The interval cells of one column: where they are and their two ends.

    ``positions`` are 0-based row positions (increasing), ``row_ids`` the matching row ids.
    ``low`` and ``high`` are exact (int or Fraction) in integer and rational columns and
    floats in real ones. In ``Table.frame`` these cells are missing values.
    """

    column: str
    positions: np.ndarray
    row_ids: np.ndarray
    low: tuple
    high: tuple

    def __len__(self) -> int:
        return len(self.positions)

    def exact(self, end: str = "low") -> list:
        """One exact value per interval: ``end`` is "low", "high" or "midpoint"."""
        lows = [v if isinstance(v, (int, Fraction)) else Fraction(v) for v in self.low]
        highs = [v if isinstance(v, (int, Fraction)) else Fraction(v) for v in self.high]
        if end == "low":
            return lows
        if end == "high":
            return highs
        if end == "midpoint":
            return [Fraction(a + b, 2) for a, b in zip(lows, highs)]
        raise TableError(f"column {self.column!r}: an interval end is 'low', 'high' or "
                         f"'midpoint', not {end!r}.")

    def numeric(self, end: str = "low") -> np.ndarray:
        """One float64 value per interval: ``end`` is "low", "high" or "midpoint"."""
        if end == "low":
            return np.array([_to_float(v) for v in self.low], dtype=np.float64)
        if end == "high":
            return np.array([_to_float(v) for v in self.high], dtype=np.float64)
        if end == "midpoint":
            return np.array([_to_float(v) for v in self.exact("midpoint")], dtype=np.float64)
        return self.exact(end)  # raises the message for an unknown end


@dataclass(frozen=True)
class _Marks:
    """What a marked column keeps beside its typed values: interval cells and cell texts."""

    positions: tuple[int, ...]
    low: tuple
    high: tuple
    texts: tuple[tuple[int, str], ...]   # (position, stripped text) of every marked cell


class _CellProblem(Exception):
    """A cell that fits no reading; raised while typing, turned into a TableError once the
    id column is known so that the message can name the object."""

    def __init__(self, row: int, column: str, message: str):
        super().__init__(message)
        self.row, self.column, self.message = row, column, message


def _where(name: str, row: int, column: str, ids=None) -> str:
    """'t.csv, row 5 (id 'K7a1'), column 'volume'': rows counted from 1 after the header."""
    shown = ""
    if ids is not None and 0 <= row < len(ids) and not is_missing(ids[row]):
        shown = f" (id {shown_value(ids[row])})"
    return f"{name}, row {row + 1}{shown}, column {column!r}"


def _marked(series: pd.Series, present: list, column: str, limits: Limits,
            requested: bool = False):
    """(values, dtype, note, marks) when the column reads as marked numbers, else None.

    Raises _CellProblem for a reversed interval or a zero denominator in a column that reads
    as marked numbers, and (when ``requested``) for the first cell that fits no reading.
    """
    numbers, intervals, word_cells = [], [], []
    words: dict[str, int] = {}
    invalid = None
    for i, value in present:
        kind, parsed = read_marked_cell(value)
        if kind == "number":
            numbers.append((i, parsed))
        elif kind == "interval":
            intervals.append((i, parsed))
        elif kind == "word":
            if parsed not in words and len(words) == MARKER_RULE.max_words:
                if not requested:
                    return None
                shown = ", ".join(repr(w) for w in words)
                raise _CellProblem(i, column, (
                    f"expected a number or an interval like [1, 2], got {shown_value(parsed)}; a "
                    f"column of numbers may hold at most {MARKER_RULE.max_words} different "
                    f"words read as missing, and this one already has {shown}"))
            words[parsed] = words.get(parsed, 0) + 1
            word_cells.append((i, parsed))
        elif kind == "invalid":
            invalid = invalid or (i, parsed)
        elif kind != "missing":
            if not requested:
                return None
            raise _CellProblem(i, column, (
                f"expected a number or an interval like [1, 2], got {shown_value(value)}"))
    distinct = len({v for _, v in numbers})
    # a cell that fails to parse counts as a mark, so that its column is read (and refused)
    if not reads_as_marked_numbers(numbers=len(numbers),
                                   intervals=len(intervals) + (invalid is not None),
                                   words=words, distinct_numbers=distinct,
                                   requested=requested):
        if requested:
            row = word_cells[0][0] if word_cells else present[0][0] if present else 0
            raise _CellProblem(row, column, (
                f"expected a number, got {shown_value(series.iloc[row])}; the column holds no "
                "number or interval"))
        return None
    if invalid is not None:
        raise _CellProblem(invalid[0], column, invalid[1])
    for i, (low, high) in intervals:
        if Fraction(low) > Fraction(high):
            raise _CellProblem(i, column, (
                f"the interval {shown_value(str(series.iloc[i]).strip())} has its low end {low} "
                f"above its high end {high}. Write intervals as [low, high] with low <= high"))
    return _marked_values(series, numbers, intervals, word_cells, words, column, limits)



def _marked_values(series, numbers, intervals, word_cells, words, column, limits):
    ends = [v for _, pair in intervals for v in pair]
    every = [v for _, v in numbers] + ends
    dtype = marked_dtype(has_float=any(isinstance(v, float) for v in every),
                         has_fraction=any(isinstance(v, Fraction) for v in every))
    convert = {"real": float, "rational": Fraction, "integer": int}[dtype]
    note = ""
    if dtype == "real":
        floats = np.full(len(series), np.nan)
        for i, v in numbers:
            floats[i] = float(v)
        values = pd.Series(floats, index=series.index)
        if np.isinf(floats).any():
            note = INFINITE_NOTE
    elif dtype == "rational":
        values = _rebuild(series, numbers, Fraction, object)
    elif numbers:
        values, dtype, note = _integers(series, numbers, "", column, flags=False)
    else:
        values = pd.Series(np.full(len(series), np.nan), index=series.index)
    texts = sorted([(i, str(series.iloc[i]).strip()) for i, _ in intervals]
                   + [(i, w) for i, w in word_cells])
    marks = _Marks(positions=tuple(i for i, _ in intervals),
                   low=tuple(convert(a) for _, (a, _) in intervals),
                   high=tuple(convert(b) for _, (_, b) in intervals),
                   texts=tuple(texts))
    return values, dtype, marked_note(note, len(intervals), words), marks


def _marker_counts(marks: _Marks | None) -> dict[str, int]:
    """Each marker word of a marked column and its count, most frequent first."""
    if marks is None:
        return {}
    intervals = set(marks.positions)
    counts: dict[str, int] = {}
    for position, text in marks.texts:
        if position not in intervals:
            name = array_mark(text) or text   # a cut-off list is counted under one name
            counts[name] = counts.get(name, 0) + 1
    return marker_counts(counts)


# ----------------------------------------------------------------------------------------
# Typing columns and detecting roles


def _type_columns(frame: pd.DataFrame, name: str, digest: str, fmt: str,
                  warnings: list[str], limits: Limits, as_text: set[str] = frozenset(),
                  id_hint: str | None = None) -> Table:
    infos = []
    # one pass over the columns, and one new frame at the end: per-column lookups and
    # assignments on a frame with thousands of columns would dominate the loading time
    typed: dict[str, pd.Series] = {}
    changed: list[int] = []
    marks: dict[str, _Marks] = {}
    problems: list[_CellProblem] = []
    for position, (column, series) in enumerate(frame.items()):
        found: dict = {}
        if column in as_text:
            values, dtype, note = _as_text(series, name, column, limits)
        else:
            try:
                values, dtype, note = _type_one(series, name, column, limits, found)
            except _CellProblem as problem:
                # said once the id column is known, so that the message names the object
                problems.append(problem)
                values, dtype, note = _as_text(series, name, column, limits)
        if dtype == "text" and column not in as_text:
            merged = _merged_labels(series if values is None else values, column)
            if merged is not None:
                values = merged[0]
                warnings.append(label_merge_warning(name, column, **merged[1]))
        if "marks" in found:
            marks[column] = found["marks"]
        typed[column] = series if values is None else values
        if values is not None:
            changed.append(position)
        infos.append((column, dtype, note))
    if len(changed) > _REPLACED_COLUMNS:
        frame = pd.DataFrame(typed, index=frame.index)
    elif changed:
        # a few columns retyped (0/1 integers read as flags, say): replace just those, and
        # leave the others where they are rather than copying the whole table once more
        frame = frame.copy(deep=False)
        for position in changed:
            frame.isetitem(position, typed[frame.columns[position]])
    n = len(frame)
    columns = []
    id_taken = False
    for column, dtype, note in infos:
        series = typed[column]
        missing, distinct = _missing_and_distinct(series, dtype)
        role = detect_role(column, dtype, distinct, missing, n, id_taken)
        if role == "id":
            id_taken = True
        labels = series.dropna().unique() if role == "category" and dtype == "text" else None
        warnings.extend(column_warnings(name, column, dtype, note, distinct, n, role, labels,
                                        missing))
        counts = _marker_counts(marks.get(column))
        intervals = len(marks[column].positions) if column in marks else 0
        columns.append(ColumnInfo(column, role, dtype, missing, distinct, role, note,
                                  intervals, counts))
    id_column = next((c.name for c in columns if c.role == "id"), None)
    if problems:
        problem = problems[0]
        shown = id_hint if id_hint in typed else id_column
        ids = typed[shown].tolist() if shown not in (None, problem.column) else None
        raise TableError(f"{_where(name, problem.row, problem.column, ids)}: "
                         f"{problem.message}.")
    return Table(name=name, digest=digest, frame=frame, columns=tuple(columns),
                 warnings=tuple(warnings), id_column=id_column, format=fmt, limits=limits,
                 marks=marks)


def _merged_labels(series: pd.Series, column: str) -> tuple[pd.Series, dict] | None:
    """A text column whose labels differ only by surrounding spaces, as one label each.

    Only when the stripped labels make a category (a few values): then " toric" and "toric"
    are one label. Returns the merged labels and the counts that :func:`label_merge_warning`
    words, or None when nothing is merged. The file is not changed.
    """
    cells = series.tolist()
    padded = [i for i, v in enumerate(cells) if isinstance(v, str) and v != v.strip()]
    if not padded:
        return None
    stripped = [v.strip() if isinstance(v, str) else v for v in cells]
    counts = dict(padded=len(padded), written=len({v for v in cells if not is_missing(v)}),
                  labels=len({v for v in stripped if not is_missing(v)}),
                  missing=sum(is_missing(v) for v in cells), rows=len(cells))
    if label_merge_words(column, **counts) is None:
        return None
    return pd.Series(stripped, dtype=object, index=series.index), counts



def _missing_and_distinct(series: pd.Series, dtype: str) -> tuple[int, int]:
    if series.dtype.kind in "biu":
        return 0, _count_distinct(series.to_numpy())
    if series.dtype.kind == "f":
        raw = series.to_numpy()
        present = raw[~np.isnan(raw)]
        return len(raw) - len(present), _count_distinct(present)
    if dtype == "array":
        return int(sum(v is None for v in series)), _distinct(series, dtype)
    return int(series.isna().sum()), _distinct(series, dtype)


def _count_distinct(values: np.ndarray) -> int:
    """How many distinct values a numeric array without NaN holds (0.0 and -0.0 are one).

    Counted by sorting: np.unique hashes integers, which takes many times longer on a
    column of a million values (see bench/RESULTS.md).
    """
    if len(values) == 0:
        return 0
    if values.dtype.kind in "iu":
        low, high = int(values.min()), int(values.max())
        if high - low < 4 * len(values):
            # integers in a short range (most invariants): one count per value in it; the
            # offsets are taken in int64 (signed) or in the unsigned type, so none wraps
            offsets = values.astype(np.int64, copy=False) - low if values.dtype.kind == "i" \
                else values - values.dtype.type(low)
            return int(np.count_nonzero(np.bincount(offsets)))
    ordered = np.sort(values)
    return 1 + int(np.count_nonzero(ordered[1:] != ordered[:-1]))


def _distinct(series: pd.Series, dtype: str) -> int:
    if dtype == "array":
        return len({array_token(v) for v in series if v is not None})
    try:
        return int(series.nunique(dropna=True))
    except TypeError:
        return len({repr(v) for v in series if not is_missing(v)})


def array_token(value: np.ndarray) -> tuple:
    """What makes two array cells (as :func:`array_value` reads them) one distinct value."""
    return (value.shape, value.tobytes() if value.dtype != object else repr(value.tolist()))



def _nullable_integers(series: pd.Series, name: str, column: str, limits: Limits,
                       marks_out: dict | None):
    """A column of pandas' nullable integers (Parquet written from Int64, say) typed as the
    same integers read from text are: numpy integers without gaps, float64 with NaN for
    gaps while every value is exact there, Python integers past that."""
    present = series.dropna()
    if len(present) < len(series) and len(present) and incomplete_integer_dtype(
            int(present.min()), int(present.max()))[0] == "big integer":
        values = [None if pd.isna(v) else int(v) for v in series.tolist()]
        return pd.Series(values, dtype=object, index=series.index), \
            *incomplete_integer_dtype(int(present.min()), int(present.max()))
    if len(present) < len(series):
        plain = series.astype("float64")
    else:
        plain = series.astype(np.int64 if series.dtype.kind == "i" else np.uint64)
    values, dtype, note = _type_one(plain, name, column, limits, marks_out)
    return (plain if values is None else values), dtype, note


def _type_one(series: pd.Series, name: str, column: str, limits: Limits,
              marks_out: dict | None = None):
    """Return (new values or None, dtype label, note); a marked column's _Marks go to
    ``marks_out``."""
    kind = series.dtype.kind
    if kind == "b" and not isinstance(series.dtype, np.dtype):
        # pandas' nullable flags: True, False and None, as flags with missing cells are
        present = [(i, v) for i, v in enumerate(series.tolist()) if not is_missing(v)]
        return _booleans(series, present), "boolean", ""
    if kind == "b":
        return None, "boolean", ""
    if kind in "iu" and not isinstance(series.dtype, np.dtype):
        return _nullable_integers(series, name, column, limits, marks_out)
    if kind in "iu":
        if not len(series):
            return None, "integer", ""
        raw = series.to_numpy()
        low, high = int(raw.min()), int(raw.max())
        dtype, note = integer_type(low, high, complete=True, zero_one=low == 0 and high == 1)
        if dtype == "big integer":
            return pd.Series([int(v) for v in series.tolist()], dtype=object,
                             index=series.index), dtype, note
        if dtype == "boolean":
            return series.astype(bool), dtype, note
        smallest = _smallest_integer_type(low, high)
        if smallest != raw.dtype:
            # the smallest signed type that holds every value exactly: a quarter of the
            # memory for most invariants, and no unsigned arithmetic surprises later
            return series.astype(smallest), dtype, note
        return None, dtype, note
    if kind == "f":
        return _type_floats(series)
    return _type_object(series, name, column, limits, marks_out)


def _type_floats(series: pd.Series):
    """(new values or None, dtype, note) of a float64 column: whole numbers below 2**53 are
    integers (or flags) by :func:`integer_type`."""
    raw = series.to_numpy()
    if np.isinf(raw).any():
        return None, "real", INFINITE_NOTE
    finite = series[np.isfinite(raw)]
    if len(finite) == 0:
        if series.isna().all():
            return None, "empty", ""
        return None, "real", ""
    if not (bool((finite == np.round(finite)).all()) and finite.abs().max() < FLOAT_EXACT):
        return None, "real", ""
    low, high = int(finite.min()), int(finite.max())
    dtype, note = integer_type(low, high, complete=not series.isna().any(),
                               zero_one=_is_zero_one(series))
    if dtype == "boolean":
        flags = [(i, v) for i, v in enumerate(raw.tolist()) if not np.isnan(v)]
        return _booleans(series, flags), dtype, note
    if series.isna().any():
        return None, dtype, note
    return series.astype(_smallest_integer_type(low, high)), dtype, note


def _plain_json_value(value):
    """What json.dumps cannot write itself: numpy arrays as lists, numpy numbers as numbers."""
    if isinstance(value, np.ndarray):
        return value.tolist()
    if isinstance(value, np.generic):
        return value.item()
    raise TypeError(f"{type(value).__name__} is not a table cell")


def _as_text(series: pd.Series, name: str, column: str, limits: Limits):
    """A column kept as text at the caller's request: cells as given, not parsed."""
    values = []
    for row, value in enumerate(series.tolist()):
        if is_missing(value):
            values.append(None)
            continue
        if isinstance(value, (list, tuple, dict, np.ndarray)):
            # Parquet's list cells are numpy arrays, nested ones arrays of arrays
            value = json.dumps(value, default=_plain_json_value)
        text = value if isinstance(value, str) else str(value)
        if len(text) > limits.max_cell:
            raise TableError(
                f"{name}, row {row + 1}, column {column!r}: a cell of {len(text)} characters "
                f"is over the limit of {limits.max_cell}. Shorten it or raise it with "
                "--limit max_cell=N."
            )
        values.append(text)
    if all(v is None for v in values):
        return None, "empty", ""
    return pd.Series(values, dtype=object, index=series.index), "text", ""


def _smallest_integer_type(low: int, high: int) -> np.dtype:
    """The narrowest signed numpy integer type holding every value in [low, high]."""
    for candidate in (np.int8, np.int16, np.int32):
        info = np.iinfo(candidate)
        if info.min <= low and high <= info.max:
            return np.dtype(candidate)
    return np.dtype(np.int64)


def _is_zero_one(series: pd.Series) -> bool:
    if series.dtype.kind in "iuf":
        raw = series.to_numpy()
        raw = raw[~np.isnan(raw)] if raw.dtype.kind == "f" else raw
        # a quick look at the range first: most integer columns are not 0/1
        if not len(raw) or raw.min() != 0 or raw.max() != 1:
            return False
        return bool(np.isin(raw, (0, 1)).all())
    values = series.dropna().unique()
    return len(values) == 2 and set(values.tolist()) == {0, 1}


def _type_object(series: pd.Series, name: str, column: str, limits: Limits,
                 marks_out: dict | None = None):
    """Type a column of Python objects; a marked column's _Marks go to ``marks_out["marks"]``
    (it is read as plain text when no ``marks_out`` is given)."""
    present = [(i, v) for i, v in enumerate(series.tolist()) if not is_missing(v)]
    if not present:
        return None, "empty", ""
    values = [v for _, v in present]
    kinds = {_kind_of(v) for v in values}
    # Cells that are already Python objects (from JSON or Parquet).
    if kinds <= {"bool"}:
        return _booleans(series, present), "boolean", ""
    if kinds <= {"int", "bool"} and "int" in kinds:
        return _integers(series, present, name, column)
    if kinds <= {"int", "float", "bool"}:
        floats = np.array([_to_float(v) for v in series.tolist()])
        ints = _integers_from_floats(floats, series.index)
        if ints is not None:
            if _is_zero_one(ints):
                flags = [(i, v) for i, v in enumerate(floats.tolist()) if not np.isnan(v)]
                return _booleans(series, flags), "boolean", "0/1 read as false/true"
            return ints, "integer", ("has missing cells" if np.isnan(floats).any() else "")
        note = INFINITE_NOTE if np.isinf(floats).any() else ""
        return pd.Series(floats, index=series.index), "real", note
    if "decimal" in kinds:
        # Parquet decimals: exact rationals, read through their text so that integers and
        # fractions get the same types as in a CSV file.
        return _type_object(series.map(from_decimal), name, column, limits, marks_out)
    if kinds <= {"list"}:
        return _arrays(series, present, name, column, limits), "array", ""
    if marks_out is not None and "list" in kinds and kinds <= {"int", "float", "list", "text"}:
        # numbers with two-element lists (intervals) and words, from JSON
        marked = _marked(series, present, column, limits)
        if marked is not None:
            marks_out["marks"] = marked[3]
            return marked[:3]
    if "list" in kinds:
        row, bad = next((i, v) for i, v in present if _kind_of(v) != "list")
        good_row = next(i for i, v in present if _kind_of(v) == "list")
        raise TableError(
            f"{name}, row {row + 1}, column {column!r}: expected an array like [1, 2] (row "
            f"{good_row + 1} holds one), got {shown_value(bad)}. Make every cell of the column an "
            "array, or empty."
        )
    if kinds & {"dict"}:
        row, bad = next((i, v) for i, v in present if _kind_of(v) == "dict")
        raise TableError(
            f"{name}, row {row + 1}, column {column!r}: a cell holds a JSON object "
            f"{shown_value(bad)}; cells may hold numbers, text, or arrays. Flatten the record."
        )
    # Text cells: numbers, rationals, booleans or JSON arrays written as text.
    texts = [str(v) for v in values]
    longest = max(len(t) for t in texts)
    if longest > limits.max_cell:
        row = next(i for i, v in present if len(str(v)) == longest)
        raise TableError(
            f"{name}, row {row + 1}, column {column!r}: a cell of {longest} characters is "
            f"over the limit of {limits.max_cell}. Shorten it or raise it with --limit max_cell=N."
        )
    return _type_texts(series, present, name, column, limits, marks_out)


def _type_texts(series: pd.Series, present: list, name: str, column: str, limits: Limits,
                marks_out: dict | None):
    """Type a column of text cells by the reading its facts give (one block, see
    :func:`analysis.column_facts.text_reading`)."""
    stripped = [str(v).strip() for _, v in present]
    facts = text_block_facts(series, counts=False)
    reading = text_reading(facts, marked=marks_out is not None)
    if reading == "integer":
        parsed = [(i, _int_text(t, name, i, column)) for (i, _), t in zip(present, stripped)]
        return _integers(series, parsed, name, column)
    if reading == "rational":
        parsed = []
        for (i, _), t in zip(present, stripped):
            _int_text(t.split("/")[0], name, i, column)
            _int_text(t.split("/")[-1], name, i, column)
            try:
                parsed.append((i, Fraction(t.replace(" ", ""))))
            except ZeroDivisionError:
                raise TableError(
                    f"{name}, row {i + 1}, column {column!r}: {t!r} divides by zero. "
                    "Fix the cell or mark the column as text."
                ) from None
        return _rebuild(series, parsed, lambda v: v, object), "rational", ""
    if reading == "flag":
        parsed = [(i, t.lower() in TRUE_WORDS) for (i, _), t in zip(present, stripped)]
        return _booleans(series, parsed), "boolean", ""
    if reading == "marked":
        marked = _marked(series, present, column, limits)
        if marked is not None:
            marks_out["marks"] = marked[3]
            return marked[:3]
    if reading == "array":
        parsed = [(i, t) for (i, _), t in zip(present, stripped)]
        values, marks = _array_texts(series, parsed, name, column, limits)
        if marks is None:
            return values, "array", ""
        if marks_out is not None:
            marks_out["marks"] = marks
        return values, "array", marked_note("", 0, _marker_counts(marks))
    return None, "text", text_note(facts)


def array_cells(series: pd.Series, name: str, column: str, limits: Limits | None = None,
                first_row: int = 0) -> pd.Series:
    """A column of JSON-array text as numpy arrays (None where a cell is empty), each cell
    checked as :func:`load_table` checks it. ``first_row`` is the row of the first cell in
    the whole table, for the messages of a partition read on its own.
    """
    present = [(i, str(v).strip()) for i, v in enumerate(series.tolist()) if not is_missing(v)]
    # a partition alone cannot weigh the share of marker words: it reads every one it may
    return _array_texts(series, present, name, column, limits or Limits(), first_row,
                        partition=True)[0]


def _array_texts(series: pd.Series, present: list, name: str, column: str, limits: Limits,
                 first_row: int = 0, requested: bool = False,
                 partition: bool = False) -> tuple[pd.Series, _Marks | None]:
    """Arrays from cells holding JSON-array text (parsed as data, never evaluated), and the
    _Marks of the cells read as missing (:func:`column_facts.array_mark`,
    :func:`column_facts.reads_array_words`), or None. ``requested``: the user asked for
    the role array; ``partition``: the cells are one partition of a column already read
    as arrays, whose words may all be marks."""
    marks = {i: array_mark(t) for i, t in present}
    words: dict[str, int] = {}
    for mark in marks.values():
        if mark is not None and mark != CUT_ARRAY_MARK:
            words[mark] = words.get(mark, 0) + 1
    if not (len(words) <= MARKER_RULE.max_words if partition
            else reads_array_words(words, len(present), requested=requested)):
        marks = {i: m for i, m in marks.items() if m == CUT_ARRAY_MARK}
    decoded = [(i, _array_text(t, name, i + first_row, column, limits))
               for i, t in present if marks.get(i) is None]
    rebuilt = pd.Series([None] * len(series), dtype=object, index=series.index)
    for i, v in decoded:
        rebuilt.iat[i] = v
    marked = tuple((i, t) for i, t in present if marks.get(i) is not None)
    found = _Marks(positions=(), low=(), high=(), texts=marked) if marked else None
    return _arrays(rebuilt, decoded, name, column, limits, first_row), found


def _array_text(t: str, name: str, row: int, column: str, limits: Limits) -> list:
    """One JSON-array cell's list; a TableError naming ``row`` (0-based) when it is none."""
    where = f"{name}, row {row + 1}, column {column!r}"
    t = list_text(t)
    if not t.startswith("["):
        raise TableError(f"{where}: expected an array like [1, 2], got {shown_value(t)}. "
                         "Make every cell of the column an array, or empty.")
    if _depth_ok(t, limits.max_depth) > 2:
        raise TableError(f"{where}: arrays nested more than 2 deep; cells may hold lists or "
                         "matrices only.")
    try:
        value = json.loads(t)
    except ValueError as exc:
        if "integer string conversion" in str(exc):
            raise TableError(_too_many_digits(name, f", row {row + 1}", t, column)) from None
        raise TableError(f"{where}: not a valid JSON array ({one_line(exc)}). Write arrays "
                         "like [[1, 0], [0, 1]].") from None
    if not isinstance(value, list):
        raise TableError(f"{where}: expected an array like [1, 2], got {shown_value(value)}. "
                         "Make every cell of the column an array, or empty.")
    return value


def _integers(series: pd.Series, present: list, name: str, column: str, flags: bool = True):
    present = [(i, int(v)) for i, v in present]
    complete = len(present) == len(series)
    low, high = min(v for _, v in present), max(v for _, v in present)
    dtype, note = integer_type(low, high, complete=complete, flags=flags,
                               zero_one={v for _, v in present} == {0, 1})
    if dtype == "boolean":
        return _booleans(series, present), dtype, note
    if dtype == "big integer":
        return _rebuild(series, present, lambda v: v, object), dtype, note
    if complete:
        values = np.array([v for _, v in present], dtype=np.int64)
        return pd.Series(values, index=series.index), dtype, note
    # a column with missing cells is float64, exact below 2**53 (see integer_type)
    floats = np.full(len(series), np.nan)
    for i, v in present:
        floats[i] = float(v)
    return pd.Series(floats, index=series.index), dtype, note


def _booleans(series: pd.Series, present: list) -> pd.Series:
    """A bool column, or an object column with None where cells are missing."""
    if len(present) == len(series):
        return pd.Series([bool(v) for _, v in present], dtype=bool, index=series.index)
    return _rebuild(series, present, bool, object)


def _integers_from_floats(floats: np.ndarray, index):
    finite = floats[np.isfinite(floats)]
    if np.isinf(floats).any() or len(finite) == 0:
        return None
    if not (finite == np.round(finite)).all() or np.abs(finite).max() >= 2**53:
        return None
    if np.isnan(floats).any():
        return pd.Series(floats, index=index)
    return pd.Series(floats.astype(np.int64), index=index)


def _rebuild(series: pd.Series, present: list, convert, dtype) -> pd.Series:
    out = pd.Series([None] * len(series), dtype=dtype, index=series.index)
    values = out.to_numpy(copy=True)
    for i, v in present:
        values[i] = convert(v)
    return pd.Series(values, dtype=dtype, index=series.index)


def _arrays(series: pd.Series, present: list, name: str, column: str,
            limits: Limits, first_row: int = 0) -> pd.Series:
    out = np.empty(len(series), dtype=object)
    out[:] = None
    for i, value in present:
        out[i] = array_value(value, name, i + first_row, column, limits)
    return pd.Series(out, dtype=object, index=series.index)


def array_value(value, name: str, row: int, column: str, limits: Limits) -> np.ndarray:
    """One list or matrix cell (a list, or nested lists or numpy arrays) as a numpy array,
    checked (rectangular, numbers only, at most ``limits.max_array`` entries); a bad cell is a
    TableError naming ``name``, ``row`` (0-based) and ``column``."""
    where = f"{name}, row {row + 1}, column {column!r}"
    if isinstance(value, np.ndarray):
        value = value.tolist()
    if len(value) and all(isinstance(v, (list, np.ndarray)) for v in value):
        value = [list(v) if isinstance(v, np.ndarray) else v for v in value]
        widths = {len(v) for v in value}
        if len(widths) > 1:
            raise TableError(
                f"{where}: a ragged matrix (rows of lengths {sorted(widths)}). Every row of a "
                "matrix needs the same length."
            )
        flat = [x for v in value for x in v]
        if any(isinstance(x, (list, dict)) for x in flat):
            raise TableError(f"{where}: arrays nested more than 2 deep; cells may hold "
                             "lists or matrices only.")
        shape = (len(value), widths.pop() if widths else 0)
    elif any(isinstance(v, (list, dict, np.ndarray)) for v in value):
        raise TableError(
            f"{where}: an array mixing numbers and lists. Write a list like [1, 2] or a "
            "matrix like [[1, 2], [3, 4]]."
        )
    else:
        flat = list(value)
        shape = (len(value),)
    if len(flat) > limits.max_array:
        raise TableError(f"{where}: an array of {len(flat)} entries is over the limit of "
                         f"{limits.max_array}. Raise it with --limit max_array=N if you need it.")
    for x in flat:
        if isinstance(x, bool) or not isinstance(x, (int, float, np.integer, np.floating)):
            raise TableError(f"{where}: array entries must be numbers, got {shown_value(x)}.")
    if all(isinstance(x, (int, np.integer)) for x in flat):
        if flat and max(abs(int(x)) for x in flat) > INT64_MAX:
            return np.array([int(x) for x in flat], dtype=object).reshape(shape)
        return np.array(flat, dtype=np.int64).reshape(shape)
    return np.array(flat, dtype=np.float64).reshape(shape)


def requested_roles(table_name: str, columns, roles: dict[str, str] | None,
                    id_column: str | None | type[...] = ...) -> dict[str, str]:
    """The new role of each column whose role changes, by name, from role overrides and a
    chosen id column (``...``: none chosen; None: no id column), for either engine.

    A column given the role id alone becomes the id column, as ``id_column=`` makes it; the
    id column it displaces goes back to its detected role (text if that was id). Unknown
    columns and roles are refused by name.
    """
    roles = dict(roles or {})
    named_ids = [name for name, role in roles.items() if role == "id"]
    if id_column is ... and len(named_ids) == 1:
        # giving one column the role id moves the id there, as id_column= does
        id_column = named_ids[0]
    if id_column is not ... and id_column is not None:
        roles[id_column] = "id"
    for name, role in roles.items():
        column_named(table_name, columns, name)
        if role not in ROLES:
            raise TableError(f"{table_name}: column {name!r}: unknown role {role!r}. "
                             f"Roles are {', '.join(ROLES)}.")
    changes = {}
    for info in columns:
        role = roles.get(info.name)
        if id_column is not ... and info.role == "id" and info.name != id_column \
                and role is None:
            role = info.detected_role if info.detected_role != "id" else "text"
        if role is not None and role != info.role:
            changes[info.name] = role
    return changes


def single_id(table_name: str, columns) -> str | None:
    """The id column among ``columns`` (None for none); more than one is a TableError."""
    ids = [c.name for c in columns if c.role == "id"]
    if len(ids) > 1:
        raise TableError(
            f"{table_name}: only one column can be the id; got {', '.join(map(repr, ids))}. "
            "Give the others another role."
        )
    return ids[0] if ids else None


class RoleChange(NamedTuple):
    """A column's new description for a new role, the conversion its raw cells need for it
    (a ``how`` of :func:`analysis.column_facts.typed_block`; None: as before), and its typing
    facts (changed only when marked text is read as numbers)."""

    info: ColumnInfo
    conversion: str | None = None
    facts: dict | None = None


def role_change(table_name: str, info: ColumnInfo, role: str, n_rows: int,
                facts: dict | None = None) -> RoleChange:
    """What the role ``role`` makes of the column ``info`` (of a table of ``n_rows`` rows),
    decided from its description and, when given, its merged typing facts, without its cells.

    The partitioned reader decides every role change here; the in-memory one, which reads
    the cells, here only what needs none (numbers kept as invariants, a flag counted as 0/1,
    a column shown as text). What only the cells could settle is refused by name: arrays as
    text, flags from other values, invariants from text that is not marked numbers. An id
    column must be filled and unique by its counts (the in-memory reader names the rows).
    """
    column = info.name
    new = replace(info, role=role)
    if role in ("text", "category"):
        if info.dtype == "array":
            raise StepError(f"{table_name}: column {column!r}: turning arrays into text is not "
                            "done on the dask engine; use --engine local.")
        if info.dtype == "text":
            return RoleChange(new, None, facts)
        return RoleChange(_shown_as_text(info, role), "text", facts)
    if role == "invariant":
        if info.dtype in _NUMBER_DTYPES:
            return RoleChange(new, None, facts)
        if info.dtype == "boolean":
            return RoleChange(replace(new, dtype="integer"), "bool_to_int", facts)
        if info.dtype == "text" and facts is not None and reads_marked(facts, requested=True):
            # asked for outright: only the limit on different words applies, as in memory
            facts, marked = marked_column(table_name, column, facts)
            return RoleChange(replace(marked, detected_role=info.detected_role),
                              "marked:" + marked.dtype, facts)
        raise StepError(f"{table_name}: column {column!r} holds {info.dtype} values; on the "
                        "dask engine only numbers and flags can be invariants.")
    if role == "flag" and info.dtype != "boolean":
        raise StepError(f"{table_name}: column {column!r} holds {info.dtype} values; on the "
                        "dask engine only true/false or 0/1 columns can be flags.")
    if role == "id":
        if info.missing:
            raise _empty_id(table_name, column, f"in {info.missing} rows")
        if info.distinct != n_rows:
            raise _repeated_id(table_name, column,
                               f"it has {info.distinct} distinct values in {n_rows} rows")
    if role == "array" and info.dtype != "array":
        raise TableError(f"{table_name}: column {column!r} holds {info.dtype} values, not "
                         "arrays.")
    return RoleChange(new, None, facts)


def _shown_as_text(info: ColumnInfo, role: str) -> ColumnInfo:
    """The description of a column of other values given the role text or category."""
    return replace(info, role=role, dtype="text", note=f"shown as text (was {info.dtype})",
                   intervals=0, markers={})


def _empty_id(where: str, column: str, rows: str) -> TableError:
    return TableError(f"{where}: the id column {column!r} is empty {rows}. "
                      "Every row needs an id.")


def _repeated_id(table_name: str, column: str, reason: str) -> TableError:
    return TableError(f"{table_name}: column {column!r} cannot be the id: {reason}. "
                      "Choose a column with unique values.")


def _retype(table_name: str, series: pd.Series, info: ColumnInfo, role: str,
            limits: Limits | None = None, marks: _Marks | None = None, ids=None):
    """Values, ColumnInfo and _Marks (or None) for a column given a new role; checks every
    cell. ``marks`` are the column's marks so far, ``ids`` the row ids named in messages."""
    limits = limits or Limits()
    new = replace(info, role=role)
    if role == "invariant" and info.dtype in _NUMBER_DTYPES:
        return None, role_change(table_name, info, role, len(series)).info, marks
    unmarked = replace(new, intervals=0, markers={})
    if role in ("text", "category"):
        return (*_retype_text(table_name, series, info, role, unmarked, marks), None)
    if role == "invariant" and info.dtype != "boolean":
        return _as_invariant(table_name, series, info, new, limits, ids)
    if role == "array" and info.dtype in ("text", "category"):
        present = [(row, str(v).strip()) for row, v in enumerate(series.tolist())
                   if not is_missing(v)]
        if present:
            values, marks = _array_texts(series, present, table_name, info.name, limits,
                                         requested=True)
            note = marked_note(f"read as arrays (was {info.dtype})", 0, _marker_counts(marks))
            return values, replace(unmarked, dtype="array", note=note,
                                   markers=_marker_counts(marks),
                                   missing=info.missing + len(marks.texts if marks else ())), marks
    values, new = _retype_other(table_name, series, info, role, unmarked, limits)
    return values, new, None


def _retype_text(table_name: str, series: pd.Series, info: ColumnInfo, role: str,
                 new: ColumnInfo, marks: _Marks | None):
    """Values and ColumnInfo for a column given the role text or category."""
    if info.dtype in ("text", "category"):
        if role == "category":
            merged = _merged_labels(series, info.name)
            if merged is not None:
                return merged[0], replace(new, note=label_merge_words(info.name, **merged[1]))
        return None, new
    if info.dtype == "array":
        values = [None if v is None else json.dumps(v.tolist()) for v in series]
    elif info.dtype == "integer":
        # integers with missing cells are stored as floats: written as integers again
        values = [None if is_missing(v) else str(int(v)) for v in series.tolist()]
    else:
        values = [None if is_missing(v) else str(v) for v in series.tolist()]
    for position, text in (marks.texts if marks else ()):
        values[position] = text  # an interval or word as the file wrote it
    return pd.Series(values, dtype=object, index=series.index), _shown_as_text(info, role)


def _as_invariant(table_name: str, series: pd.Series, info: ColumnInfo, new: ColumnInfo,
                  limits: Limits, ids):
    """A text, category or array column given the role invariant: plain numbers, or marked
    numbers read as the user asks (only the limit on different words applies)."""
    column = info.name
    present = [(i, v) for i, v in enumerate(series.tolist()) if not is_missing(v)]
    if any(read_marked_cell(v)[0] != "number" for _, v in present):
        try:
            values, dtype, note, marks = _marked(series, present, column, limits,
                                                 requested=True)
        except _CellProblem as problem:
            shown = None if ids is None or info.role == "id" else ids
            raise TableError(
                f"{_where(table_name, problem.row, column, shown)}: {problem.message}. Fix "
                f"the cell, or keep the column as {info.role} (or mark it as text)."
            ) from None
        # intervals and words are missing cells now, and only plain numbers count as values
        missing, distinct = _missing_and_distinct(values, dtype)
        return values, replace(new, dtype=dtype, note=note, intervals=len(marks.positions),
                               markers=_marker_counts(marks), missing=missing,
                               distinct=distinct), marks
    typed, dtype, note = _type_object(series.astype(object), table_name, column, limits)
    if dtype not in ("integer", "big integer", "rational", "real", "boolean"):
        floats = pd.to_numeric(series, errors="coerce")
        return floats, replace(new, dtype="real"), None
    if dtype == "boolean":
        typed = typed.map(lambda v: None if v is None else int(v))
        dtype = "integer"
    return typed, replace(new, dtype=dtype, note=note), None


def _retype_other(table_name: str, series: pd.Series, info: ColumnInfo, role: str,
                  new: ColumnInfo, limits: Limits):
    """Values and ColumnInfo for the roles id, flag, array, and invariant from a flag."""
    column = info.name
    if role == "id":
        if info.dtype == "array":
            raise TableError(
                f"{table_name}, row {_first_present(series) + 1}, column {column!r}: an id "
                "names each row with text or a number, not an array. Choose another id column."
            )
        return None, new
    if role == "invariant":  # from a flag
        return series.map(lambda v: None if is_missing(v) else int(bool(v))).astype(
            "float64" if series.isna().any() else "int64"), role_change(
                table_name, info, role, len(series)).info
    if role == "flag":
        if info.dtype == "array":
            raise TableError(
                f"{table_name}, row {_first_present(series) + 1}, column {column!r}: a flag "
                "holds two values, not arrays. Keep the column as an array."
            )
        present = [v for v in series.tolist() if not is_missing(v)]
        levels = sorted({_flag_token(v) for v in present}, key=str)
        if any(isinstance(level, bool) for level in levels) and \
                {str(level) for level in levels if not isinstance(level, bool)} <= {"0", "1"}:
            # 0 and 1 beside true/false words are the same two values
            series = series.map(lambda v: v if is_missing(v) or str(v).strip() not in
                                ("0", "1") else str(v).strip() == "1")
            levels = sorted({_flag_token(v) for v in series.tolist() if not is_missing(v)},
                            key=str)
        if len(levels) > 2:
            seen: list = []
            for row, value in enumerate(series.tolist()):
                if is_missing(value) or _flag_token(value) in seen:
                    continue
                if len(seen) == 2:
                    raise TableError(
                        f"{table_name}, row {row + 1}, column {column!r}: a third value "
                        f"{shown_value(_flag_token(value))} (besides {shown_value(seen[0])} and "
                        f"{shown_value(seen[1])}); "
                        f"a flag has two values and this column has {len(levels)}. Use the "
                        "category role, or fix the cell."
                    )
                seen.append(_flag_token(value))
        truthy = _true_level(levels)
        values = [None if is_missing(v) else _flag_token(v) == truthy for v in series.tolist()]
        note = "" if info.dtype == "boolean" else (
            "read from true/false words" if truthy is True else f"true means {truthy!r}")
        return pd.Series(values, dtype=object if None in values else bool,
                         index=series.index), replace(new, dtype="boolean", note=note,
                                                      distinct=len(levels))
    if role == "array":
        if info.dtype == "array":
            return None, new
        present = [(row, str(v).strip()) for row, v in enumerate(series.tolist())
                   if not is_missing(v)]
        row, value = present[0] if present else (0, None)
        raise TableError(
            f"{table_name}, row {row + 1}, column {column!r}: expected an array like [1, 2], "
            f"got {shown_value(value)} (the column holds {info.dtype} values). Array cells are "
            "written like [1, 2] or [[1, 0], [0, 1]]; keep the column as "
            f"{info.role}."
        )
    raise TableError(f"{table_name}: unknown role {role!r}.")


def _first_present(series: pd.Series) -> int:
    return next((row for row, v in enumerate(series.tolist()) if not is_missing(v)), 0)


def _flag_token(value):
    if isinstance(value, (bool, np.bool_)):
        return bool(value)
    text = str(value).strip()
    # true/false words in any spelling are the two values themselves: Y beside True is one
    if text.lower() in TRUE_WORDS:
        return True
    if text.lower() in FALSE_WORDS:
        return False
    return text


def _true_level(levels: list):
    for level in levels:
        if level is True or str(level).lower() in TRUE_WORDS or str(level) == "1":
            return level
    return levels[-1] if levels else True


def _check_unique_ids(name: str, series: pd.Series) -> None:
    """The cell-level id checks, naming the rows; empty cells first, as ``role_change``."""
    if series.isna().any():
        row = int(np.flatnonzero(series.isna().to_numpy())[0]) + 1
        raise _empty_id(f"{name}, row {row}", series.name, "there")
    duplicated = series[series.duplicated(keep=False)]
    if len(duplicated):
        first = duplicated.iloc[0]
        rows = [int(i) + 1 for i in np.flatnonzero((series == first).to_numpy())[:3]]
        raise _repeated_id(name, series.name, f"the value {shown_value(first)} appears in "
                                              f"rows {', '.join(map(str, rows))}")


# ----------------------------------------------------------------------------------------
# Small helpers


def _kind_of(value) -> str:
    if isinstance(value, (bool, np.bool_)):
        return "bool"
    if isinstance(value, Decimal):
        return "decimal"
    if isinstance(value, (int, np.integer)):
        return "int"
    if isinstance(value, (float, np.floating)):
        return "float"
    if isinstance(value, (list, tuple, np.ndarray)):
        return "list"
    if isinstance(value, dict):
        return "dict"
    return "text"




def _int_text(text: str, name: str, row: int, column: str) -> int:
    """An integer from its digits, with a clear message past Python's digit limit."""
    limit = sys.get_int_max_str_digits()
    if limit and len(text.strip().lstrip("+-")) > limit:
        raise TableError(_too_many_digits(name, f", row {row + 1}", text, column))
    return int(text)


def _to_float(value) -> float:
    if is_missing(value):
        return np.nan
    try:
        return float(value)
    except OverflowError:
        return float("inf") if value > 0 else float("-inf")


def one_line(error) -> str:
    """A library's error text on one line: the command line prints one line per error."""
    return " ".join(str(error).split())
