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

import numpy as np
import pandas as pd

from analysis.errors import TableError

ROLES = ("id", "invariant", "category", "flag", "array", "text")
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
_INT64_MAX = 2**63 - 1
# Past this, float64 no longer holds every integer exactly.
_FLOAT_EXACT = 2**53
# A whole number written as text (the partitioned reader matches cells against it too).
INTEGER_TEXT = r"\s*[+-]?\d+\s*"
_INTEGER_TEXT = re.compile(rf"^{INTEGER_TEXT}$")
_RATIONAL_TEXT = re.compile(r"^\s*[+-]?\d+\s*(/\s*\d+\s*)?$")
_TRUE_WORDS = {"true", "yes", "t", "y"}
_FALSE_WORDS = {"false", "no", "f", "n"}
_ID_NAMES = {"id", "name", "label", "key", "index"}
# Cell texts read as missing in CSV and TSV files.
_MISSING_WORDS = ["", "NA", "NaN", "nan", "null", "None", "N/A"]
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

    def to_json(self) -> dict:
        return {
            "name": self.name,
            "role": self.role,
            "dtype": self.dtype,
            "missing": int(self.missing),
            "distinct": int(self.distinct),
            "detected_role": self.detected_role,
            "note": self.note,
        }


@dataclass(frozen=True)
class Table:
    """A parsed, typed table. Treat ``frame`` as read-only: steps never change it."""

    name: str
    digest: str
    frame: pd.DataFrame = field(repr=False)
    columns: tuple[ColumnInfo, ...]
    warnings: tuple[str, ...] = ()
    id_column: str | None = None
    format: str = "csv"
    limits: Limits = field(default_factory=Limits, repr=False, compare=False)

    @property
    def n_rows(self) -> int:
        return len(self.frame)

    @property
    def row_ids(self) -> np.ndarray:
        if self.id_column is None:
            return np.arange(self.n_rows)
        return self.frame[self.id_column].to_numpy()

    def column(self, name: str) -> ColumnInfo:
        for info in self.columns:
            if info.name == name:
                return info
        known = ", ".join(repr(c.name) for c in self.columns[:30])
        raise TableError(f"{self.name}: no column named {name!r}. Columns are: {known}.")

    def role(self, name: str) -> str:
        return self.column(name).role

    def names_with_role(self, *roles: str) -> list[str]:
        return [c.name for c in self.columns if c.role in roles]

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
            return [None if _is_missing(v) else int(v) for v in series.tolist()]
        if info.dtype == "boolean":
            return [None if _is_missing(v) else int(bool(v)) for v in series.tolist()]
        if info.dtype in ("big integer", "rational"):
            return [None if _is_missing(v) else v for v in series.tolist()]
        if info.dtype == "real":
            return [None if _is_missing(v) or math.isinf(v) else Fraction(v)
                    for v in series.tolist()]
        raise TableError(
            f"{self.name}: column {name!r} holds {info.dtype} values, which have no exact "
            "numeric form. Choose an integer, rational or flag column."
        )

    def with_roles(self, roles: dict[str, str] | None = None, *,
                   id_column: str | None | type[...] = ...) -> Table:
        """A new Table with some roles overridden (validated cell by cell)."""
        roles = dict(roles or {})
        named_ids = [name for name, role in roles.items() if role == "id"]
        if id_column is ... and len(named_ids) == 1:
            # giving one column the role id moves the id there, as id_column= does
            id_column = named_ids[0]
        if id_column is not ... and id_column is not None:
            roles[id_column] = "id"
        for name, role in roles.items():
            self.column(name)
            if role not in ROLES:
                raise TableError(
                    f"{self.name}: column {name!r}: unknown role {role!r}. "
                    f"Roles are {', '.join(ROLES)}."
                )
        frame = self.frame
        infos = []
        for info in self.columns:
            role = roles.get(info.name)
            if id_column is not ... and info.role == "id" and info.name != id_column \
                    and role is None:
                role = info.detected_role if info.detected_role != "id" else "text"
            if role is None or role == info.role:
                infos.append(info)
                continue
            new_values, new_info = _retype(self.name, frame[info.name], info, role,
                                           self.limits)
            if new_values is not None:
                if frame is self.frame:
                    frame = frame.copy(deep=False)
                frame[info.name] = new_values
            infos.append(new_info)
        ids = [c.name for c in infos if c.role == "id"]
        if len(ids) > 1:
            raise TableError(
                f"{self.name}: only one column can be the id; got {', '.join(map(repr, ids))}. "
                "Give the others another role."
            )
        new_id = ids[0] if ids else None
        if new_id is not None:
            _check_unique_ids(self.name, frame[new_id])
        return replace(self, frame=frame, columns=tuple(infos), id_column=new_id)

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
    fmt = format or _format_of(name, data)
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
    _check_column_names(name, list(frame.columns))
    if len(frame) == 1:
        warnings.append(f"{name}: only one row; most steps need many more.")
    # Columns the caller wants as text are not parsed, so a cell that would not parse (an
    # over-long integer, a ragged matrix) can be kept by giving its column the role text.
    as_text = {column for column, role in (roles or {}).items() if role in ("text", "category")}
    table = _type_columns(frame, name, digest, fmt, warnings, limits, as_text)
    if roles or id_column is not None:
        table = table.with_roles(roles, id_column=id_column if id_column is not None else ...)
    return table


# ----------------------------------------------------------------------------------------
# Parsing per format


def _format_of(name: str, data: bytes) -> str:
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
        warnings.append(f"{name}: read as UTF-16 (byte-order mark found).")
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
    if fmt == "tsv":
        delimiter = "\t"
    else:
        delimiter = _sniff_delimiter(text)
    header = [h.strip() for h in _header_record(text, delimiter)]
    if not any(header):
        raise TableError(f"{name}: the first line is empty; it must name the columns.")
    _check_column_names(name, header)
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
                         f"({_one_line(exc)}).") from None
    frame.columns = header if len(header) == len(frame.columns) else frame.columns
    if len(frame) and frame.iloc[:, -1].isna().any():
        _check_short_rows(text, delimiter, len(header), name)
    frame = _exact_integers(frame, text, delimiter, limits)
    if delimiter != ",":
        shown = {"\t": "tab", ";": "semicolon", "|": "vertical bar"}.get(delimiter, delimiter)
        warnings.append(f"{name}: columns separated by {shown}.")
    return frame


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
            if len(finite) and np.isnan(raw).any() and np.abs(finite).max() >= _FLOAT_EXACT \
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


def _header_record(text: str, delimiter: str) -> list[str]:
    """The first record, read the way pandas reads it: a quoted name may hold a line break,
    and old files end lines with a lone carriage return.

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


def _sniff_delimiter(text: str) -> str:
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
                f"{len(header) or expected} columns. Fix that row, or quote cells that "
                "contain the delimiter.")
    if "EOF inside string" in message or "EOF" in message:
        return ("a quoted cell is never closed (a lone \" character). "
                "Close the quote or remove it.")
    return f"could not be parsed as a delimited table ({_one_line(message)})."


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
        raise TableError(f"{name}{where}: invalid JSON: {_one_line(exc)}.") from None
    return value


def _constants_warning(name: str, constants: set[str]) -> str:
    return (f"{name}: found {', '.join(sorted(constants))}, which standard JSON does not "
            "allow; NaN is read as a missing value, Infinity as an infinite number.")


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
                warnings.append(f"{name}: read the records under the key {key!r}.")
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
                f"got {_short(record)}. Every element of the array must be a record."
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
        _check_column_names(name, [str(n) for n in names])
        # a column at a time, each integer column narrowed before the next is read: peak
        # memory near one wide column plus the narrowed table, not the whole table twice
        # (see bench/RESULTS.md)
        columns = [_narrowed(source.read(columns=[n]).column(0))
                   for n in names]
        arrow = pa.table(columns, names=names).replace_schema_metadata(schema.metadata)
        del columns
    except (pa.ArrowException, OSError, ValueError) as exc:
        raise TableError(f"{name}: not a readable Parquet file ({_one_line(exc)}). "
                         "Check the file or export it again.") from None
    try:
        # integer columns with nulls come back as Python ints and None rather than float64,
        # which would round integers past 2**53. One block per column, each column's Arrow
        # memory released as it is converted
        return arrow.to_pandas(types_mapper=None, integer_object_nulls=True,
                               split_blocks=True, self_destruct=True)
    except (pa.ArrowException, ValueError, TypeError) as exc:
        raise TableError(f"{name}: Parquet columns could not be converted "
                         f"({_one_line(exc)}).") from None


def _narrowed(column):
    """An Arrow integer column with no gap, in the smallest signed type holding it exactly;
    any other column as it is."""
    import pyarrow as pa
    import pyarrow.compute as pc

    if not pa.types.is_integer(column.type) or column.null_count or len(column) == 0:
        return column
    extremes = pc.min_max(column)
    low, high = extremes["min"].as_py(), extremes["max"].as_py()
    if high > _INT64_MAX:
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
            row = int(np.flatnonzero(filled.to_numpy())[0]) + 1
            raise TableError(
                f"{name}: column {position + 1} has no name in the header but holds values "
                f"(row {row}: {_short(values.iloc[row - 1])}). Name it in the header."
            )
        warnings.append(f"{name}: column {position + 1} has no name and no values; ignored.")
    if len(keep) == frame.shape[1]:
        return frame
    return frame.iloc[:, keep]


def _check_column_names(name: str, header: list[str]) -> None:
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
# Typing columns and detecting roles


def _type_columns(frame: pd.DataFrame, name: str, digest: str, fmt: str,
                  warnings: list[str], limits: Limits, as_text: set[str] = frozenset()) -> Table:
    infos = []
    # one pass over the columns, and one new frame at the end: per-column lookups and
    # assignments on a frame with thousands of columns would dominate the loading time
    typed: dict[str, pd.Series] = {}
    changed: list[int] = []
    for position, (column, series) in enumerate(frame.items()):
        if column in as_text:
            values, dtype, note = _as_text(series, name, column, limits)
        else:
            values, dtype, note = _type_one(series, name, column, limits)
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
        warnings.extend(column_warnings(name, column, dtype, note, distinct, n, role))
        columns.append(ColumnInfo(column, role, dtype, missing, distinct, role, note))
    id_column = next((c.name for c in columns if c.role == "id"), None)
    return Table(name=name, digest=digest, frame=frame, columns=tuple(columns),
                 warnings=tuple(warnings), id_column=id_column, format=fmt, limits=limits)


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
        return len({_array_token(v) for v in series if v is not None})
    try:
        return int(series.nunique(dropna=True))
    except TypeError:
        return len({repr(v) for v in series if not _is_missing(v)})


def _array_token(value: np.ndarray) -> tuple:
    return (value.shape, value.tobytes() if value.dtype != object else repr(value.tolist()))


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
        if not id_taken and unique and dtype == "integer" and column.strip().lower() in _ID_NAMES:
            return "id"
        return "invariant"
    # text-valued columns
    if not id_taken and unique:
        return "id"
    if distinct <= max(20, int(0.05 * n)) and distinct < n:
        return "category"
    return "text"


def reads_as_boolean(words) -> bool:
    """Whether a column whose present cells are these words is read as true/false.

    At most two distinct words, all of them true/false words, and not single letters only
    (a column of t/f or y/n letters stays text)."""
    lowered = {str(w).strip().lower() for w in words}
    return (bool(lowered) and lowered <= _TRUE_WORDS | _FALSE_WORDS and len(lowered) <= 2
            and not lowered <= {"t", "f", "y", "n"})


def is_true_word(word) -> bool:
    """Whether a true/false word (any case, spaces around it ignored) means true."""
    return str(word).strip().lower() in _TRUE_WORDS


def is_missing(value) -> bool:
    """Whether a cell value is a missing cell (None, pandas' NA or a float NaN)."""
    return _is_missing(value)


def column_warnings(name: str, column: str, dtype: str, note: str, distinct: int, n: int,
                    role: str) -> list[str]:
    """The loading warnings a typed column gives (big integers, empty, constant)."""
    out = []
    if dtype == "big integer":
        beyond = "64 bits" if not note else "2**53 and missing cells"
        out.append(
            f"{name}: column {column!r} has integers beyond {beyond}; they are kept exact, "
            "and features derived from them use the signed log scale sign(x)*log10(1+|x|)."
        )
    if dtype == "empty":
        out.append(f"{name}: column {column!r} is empty in every row.")
    elif distinct == 1 and n > 1 and role != "id":
        out.append(f"{name}: column {column!r} is constant; it carries no information.")
    return out


def _type_one(series: pd.Series, name: str, column: str, limits: Limits):
    """Return (new values or None, dtype label, note)."""
    kind = series.dtype.kind
    if kind == "b":
        return None, "boolean", ""
    if kind in "iu":
        if not isinstance(series.dtype, np.dtype) or not len(series):
            return None, "integer", ""
        raw = series.to_numpy()
        low, high = int(raw.min()), int(raw.max())
        if high > _INT64_MAX:
            return pd.Series([int(v) for v in series.tolist()], dtype=object,
                             index=series.index), "big integer", ""
        if low == 0 and high == 1:
            return series.astype(bool), "boolean", "0/1 read as false/true"
        smallest = _smallest_integer_type(low, high)
        if smallest != raw.dtype:
            # the smallest signed type that holds every value exactly: a quarter of the
            # memory for most invariants, and no unsigned arithmetic surprises later
            return series.astype(smallest), "integer", ""
        return None, "integer", ""
    if kind == "f":
        raw = series.to_numpy()
        if np.isinf(raw).any():
            return None, "real", "has infinite values"
        finite = series[np.isfinite(raw)]
        if len(finite) == 0:
            if series.isna().all():
                return None, "empty", ""
            return None, "real", ""
        if bool((finite == np.round(finite)).all()) and finite.abs().max() < 2**53:
            if _is_zero_one(series):
                flags = [(i, v) for i, v in enumerate(raw.tolist()) if not np.isnan(v)]
                return _booleans(series, flags), "boolean", "0/1 read as false/true"
            if series.isna().any():
                return None, "integer", "has missing cells"
            return series.astype(_smallest_integer_type(int(finite.min()), int(finite.max()))), \
                "integer", ""
        return None, "real", ""
    return _type_object(series, name, column, limits)


def _as_text(series: pd.Series, name: str, column: str, limits: Limits):
    """A column kept as text at the caller's request: cells as given, not parsed."""
    values = []
    for row, value in enumerate(series.tolist()):
        if _is_missing(value):
            values.append(None)
            continue
        if isinstance(value, (list, tuple, dict, np.ndarray)):
            value = json.dumps(value.tolist() if isinstance(value, np.ndarray) else value)
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


def _type_object(series: pd.Series, name: str, column: str, limits: Limits):
    present = [(i, v) for i, v in enumerate(series.tolist()) if not _is_missing(v)]
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
        note = "has infinite values" if np.isinf(floats).any() else ""
        return pd.Series(floats, index=series.index), "real", note
    if "decimal" in kinds:
        # Parquet decimals: exact rationals, read through their text so that integers and
        # fractions get the same types as in a CSV file.
        return _type_object(series.map(_from_decimal), name, column, limits)
    if kinds <= {"list"}:
        return _arrays(series, present, name, column, limits), "array", ""
    if "list" in kinds:
        row, bad = next((i, v) for i, v in present if _kind_of(v) != "list")
        good_row = next(i for i, v in present if _kind_of(v) == "list")
        raise TableError(
            f"{name}, row {row + 1}, column {column!r}: expected an array like [1, 2] (row "
            f"{good_row + 1} holds one), got {_short(bad)}. Make every cell of the column an "
            "array, or empty."
        )
    if kinds & {"dict"}:
        row, bad = next((i, v) for i, v in present if _kind_of(v) == "dict")
        raise TableError(
            f"{name}, row {row + 1}, column {column!r}: a cell holds a JSON object "
            f"{_short(bad)}; cells may hold numbers, text, or arrays. Flatten the record."
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
    stripped = [t.strip() for t in texts]
    if all(_INTEGER_TEXT.match(t) for t in stripped):
        parsed = [(i, _int_text(t, name, i, column)) for (i, _), t in zip(present, stripped)]
        return _integers(series, parsed, name, column)
    if all(_RATIONAL_TEXT.match(t) for t in stripped):
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
    lowered = {t.lower() for t in stripped}
    if reads_as_boolean(lowered):
        parsed = [(i, is_true_word(t)) for (i, _), t in zip(present, stripped)]
        return _booleans(series, parsed), "boolean", ""
    arrays = sum(t.startswith("[") for t in stripped)
    if arrays and arrays >= 0.5 * len(stripped):
        parsed = [(i, t) for (i, _), t in zip(present, stripped)]
        return _array_texts(series, parsed, name, column, limits), "array", ""
    return None, "text", ""


def _array_texts(series: pd.Series, present: list, name: str, column: str,
                 limits: Limits) -> pd.Series:
    """Arrays from cells holding JSON-array text (parsed as data, never evaluated)."""
    decoded = []
    for i, t in present:
        if not t.startswith("["):
            raise TableError(
                f"{name}, row {i + 1}, column {column!r}: expected an array like [1, 2], "
                f"got {_short(t)}. Make every cell of the column an array, or empty."
            )
        if _depth_ok(t, limits.max_depth) > 2:
            raise TableError(
                f"{name}, row {i + 1}, column {column!r}: arrays nested more than 2 deep; "
                "cells may hold lists or matrices only."
            )
        try:
            decoded.append((i, json.loads(t)))
        except ValueError as exc:
            if "integer string conversion" in str(exc):
                raise TableError(
                    _too_many_digits(name, f", row {i + 1}", t, column)) from None
            raise TableError(
                f"{name}, row {i + 1}, column {column!r}: not a valid JSON array "
                f"({_one_line(exc)}). Write arrays like [[1, 0], [0, 1]]."
            ) from None
    for i, value in decoded:
        if not isinstance(value, list):
            raise TableError(
                f"{name}, row {i + 1}, column {column!r}: expected an array like [1, 2], "
                f"got {_short(value)}. Make every cell of the column an array, or empty."
            )
    rebuilt = pd.Series([None] * len(series), dtype=object, index=series.index)
    for i, v in decoded:
        rebuilt.iat[i] = v
    return _arrays(rebuilt, decoded, name, column, limits)


def _integers(series: pd.Series, present: list, name: str, column: str):
    present = [(i, int(v)) for i, v in present]
    complete = len(present) == len(series)
    if {v for _, v in present} == {0, 1}:
        return _booleans(series, present), "boolean", "0/1 read as false/true"
    largest = max(abs(v) for _, v in present)
    beyond_64_bits = largest > _INT64_MAX and any(
        v > _INT64_MAX or v < -_INT64_MAX - 1 for _, v in present)
    # float64 holds integers exactly only up to 2**53, so a column with missing cells (which
    # would otherwise become float64) keeps Python integers once its values pass that.
    if beyond_64_bits or (not complete and largest > _FLOAT_EXACT):
        note = "" if beyond_64_bits else "kept exact: beyond 2**53 with missing cells"
        return _rebuild(series, present, lambda v: v, object), "big integer", note
    if complete:
        values = np.array([v for _, v in present], dtype=np.int64)
        return pd.Series(values, index=series.index), "integer", ""
    floats = np.full(len(series), np.nan)
    for i, v in present:
        floats[i] = float(v)
    return pd.Series(floats, index=series.index), "integer", "has missing cells"


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
            limits: Limits) -> pd.Series:
    out = np.empty(len(series), dtype=object)
    out[:] = None
    for i, value in present:
        out[i] = _to_array(value, name, i, column, limits)
    return pd.Series(out, dtype=object, index=series.index)


def _to_array(value, name: str, row: int, column: str, limits: Limits) -> np.ndarray:
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
            raise TableError(f"{where}: array entries must be numbers, got {_short(x)}.")
    if all(isinstance(x, (int, np.integer)) for x in flat):
        if flat and max(abs(int(x)) for x in flat) > _INT64_MAX:
            return np.array([int(x) for x in flat], dtype=object).reshape(shape)
        return np.array(flat, dtype=np.int64).reshape(shape)
    return np.array(flat, dtype=np.float64).reshape(shape)


def _retype(table_name: str, series: pd.Series, info: ColumnInfo, role: str,
            limits: Limits | None = None):
    """Values and ColumnInfo for a column given a new role; checks every cell."""
    column = info.name
    limits = limits or Limits()
    new = replace(info, role=role)
    if role in ("text", "category"):
        if info.dtype in ("text", "category"):
            return None, new
        if info.dtype == "array":
            values = [None if v is None else json.dumps(v.tolist()) for v in series]
        else:
            values = [None if _is_missing(v) else str(v) for v in series.tolist()]
        return pd.Series(values, dtype=object, index=series.index), replace(
            new, dtype="text", note=f"shown as text (was {info.dtype})")
    if role == "id":
        if info.dtype == "array":
            raise TableError(
                f"{table_name}, row {_first_present(series) + 1}, column {column!r}: an id "
                "names each row with text or a number, not an array. Choose another id column."
            )
        return None, new
    if role == "invariant":
        if info.dtype in ("integer", "big integer", "rational", "real"):
            return None, new
        if info.dtype == "boolean":
            return series.map(lambda v: None if _is_missing(v) else int(bool(v))).astype(
                "float64" if series.isna().any() else "int64"), replace(new, dtype="integer")
        for row, value in enumerate(series.tolist()):
            if _is_missing(value):
                continue
            text = str(value).strip()
            try:
                float(text) if not _RATIONAL_TEXT.match(text) else Fraction(text)
            except (ValueError, ZeroDivisionError):
                raise TableError(
                    f"{table_name}, row {row + 1}, column {column!r}: expected a number, got "
                    f"{_short(value)}. Fix the cell or keep the column as {info.role}."
                ) from None
        typed, dtype, note = _type_object(series.astype(object), table_name, column, limits)
        if dtype not in ("integer", "big integer", "rational", "real", "boolean"):
            floats = pd.to_numeric(series, errors="coerce")
            return floats, replace(new, dtype="real")
        if dtype == "boolean":
            typed = typed.map(lambda v: None if v is None else int(v))
            dtype = "integer"
        return typed, replace(new, dtype=dtype, note=note)
    if role == "flag":
        if info.dtype == "array":
            raise TableError(
                f"{table_name}, row {_first_present(series) + 1}, column {column!r}: a flag "
                "holds two values, not arrays. Keep the column as an array."
            )
        present = [v for v in series.tolist() if not _is_missing(v)]
        levels = sorted({_flag_token(v) for v in present}, key=str)
        if len(levels) > 2:
            seen: list = []
            for row, value in enumerate(series.tolist()):
                if _is_missing(value) or _flag_token(value) in seen:
                    continue
                if len(seen) == 2:
                    raise TableError(
                        f"{table_name}, row {row + 1}, column {column!r}: a third value "
                        f"{_short(_flag_token(value))} (besides {_short(seen[0])} and "
                        f"{_short(seen[1])}); "
                        f"a flag has two values and this column has {len(levels)}. Use the "
                        "category role, or fix the cell."
                    )
                seen.append(_flag_token(value))
        truthy = _true_level(levels)
        values = [None if _is_missing(v) else _flag_token(v) == truthy for v in series.tolist()]
        note = "" if info.dtype == "boolean" else f"true means {truthy!r}"
        return pd.Series(values, dtype=object if None in values else bool,
                         index=series.index), replace(new, dtype="boolean", note=note)
    if role == "array":
        if info.dtype == "array":
            return None, new
        present = [(row, str(v).strip()) for row, v in enumerate(series.tolist())
                   if not _is_missing(v)]
        if info.dtype in ("text", "category") and present:
            return _array_texts(series, present, table_name, column, limits), replace(
                new, dtype="array", note=f"read as arrays (was {info.dtype})")
        row, value = present[0] if present else (0, None)
        raise TableError(
            f"{table_name}, row {row + 1}, column {column!r}: expected an array like [1, 2], "
            f"got {_short(value)} (the column holds {info.dtype} values). Array cells are "
            "written like [1, 2] or [[1, 0], [0, 1]]; keep the column as "
            f"{info.role}."
        )
    raise TableError(f"{table_name}: unknown role {role!r}.")


def _first_present(series: pd.Series) -> int:
    return next((row for row, v in enumerate(series.tolist()) if not _is_missing(v)), 0)


def _flag_token(value):
    if isinstance(value, (bool, np.bool_)):
        return bool(value)
    text = str(value).strip()
    return text


def _true_level(levels: list):
    for level in levels:
        if level is True or str(level).lower() in _TRUE_WORDS or str(level) == "1":
            return level
    return levels[-1] if levels else True


def _check_unique_ids(name: str, series: pd.Series) -> None:
    duplicated = series[series.duplicated(keep=False)]
    if len(duplicated):
        first = duplicated.iloc[0]
        rows = [int(i) + 1 for i in np.flatnonzero((series == first).to_numpy())[:3]]
        raise TableError(
            f"{name}: column {series.name!r} cannot be the id: the value {_short(first)} "
            f"appears in rows {', '.join(map(str, rows))}. Choose a column with unique values."
        )
    if series.isna().any():
        row = int(np.flatnonzero(series.isna().to_numpy())[0]) + 1
        raise TableError(f"{name}, row {row}: the id column {series.name!r} is empty there. "
                         "Every row needs an id.")


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


def _is_missing(value) -> bool:
    if value is None or value is pd.NA:
        return True
    if isinstance(value, float) and np.isnan(value):
        return True
    return False


def _from_decimal(value):
    """A Parquet decimal as an exact int or Fraction (NaN as missing, infinities as floats)."""
    if not isinstance(value, Decimal):
        return value
    if value.is_nan():
        return None
    if value.is_infinite():
        return float(value)
    exact = Fraction(value)
    return exact.numerator if exact.denominator == 1 else exact


def _int_text(text: str, name: str, row: int, column: str) -> int:
    """An integer from its digits, with a clear message past Python's digit limit."""
    limit = sys.get_int_max_str_digits()
    if limit and len(text.strip().lstrip("+-")) > limit:
        raise TableError(_too_many_digits(name, f", row {row + 1}", text, column))
    return int(text)


def _to_float(value) -> float:
    if _is_missing(value):
        return np.nan
    try:
        return float(value)
    except OverflowError:
        return float("inf") if value > 0 else float("-inf")


def _one_line(error) -> str:
    """A library's error text on one line: the command line prints one line per error."""
    return " ".join(str(error).split())


def _short(value, width: int = 40) -> str:
    if isinstance(value, np.generic):
        value = value.item()  # show 1, not np.int64(1)
    text = repr(value) if not isinstance(value, str) else repr(value)
    return text if len(text) <= width else text[: width - 3] + "..."
