"""A table read in partitions: Parquet files (one file or a folder) or CSV read in blocks.

The table is never loaded whole. One pass over the partitions gathers, per column and per
partition, the facts that typing needs (missing cells, whether every number is a whole number,
the distinct values up to a cap, ranges and sums); the facts are merged on the client and each
column gets the dtype and role that :func:`analysis.table.load_table` would give the same
data in memory. Each later pass turns a raw partition into typed values with the same dtypes
as ``Table.frame`` has in memory, so every step sees the same numbers either way.

Numbers with intervals and marker words among them (marked numbers), JSON-array text and
labels with stray spaces are read by :mod:`analysis.table`'s own public rules, asked with the
counts merged over the partitions.

Rows are numbered across partitions in file order: a row's id is its id-column value, else its
0-based position in the whole table, exactly as in memory.
"""

from __future__ import annotations

import csv
import functools
import hashlib
from dataclasses import dataclass, field, replace
from decimal import Decimal
from fractions import Fraction
from pathlib import Path

import numpy as np
import pandas as pd

from analysis.column_facts import (
    INTEGER_TEXT,
    MARKER_RULE,
    RATIONAL_TEXT,
    column_warnings,
    detect_role,
    from_decimal,
    incomplete_integer_dtype,
    is_missing,
    is_true_word,
    label_merge_warning,
    marked_dtype,
    marked_note,
    marker_counts,
    read_marked_cell,
    reads_as_array_texts,
    reads_as_boolean,
    reads_as_marked_numbers,
)
from analysis.distributed.reduction import tree
from analysis.errors import StepError, TableError
from analysis.table import (
    ColumnInfo,
    Limits,
    Table,
    array_cells,
    array_token,
    array_value,
)

# Distinct values kept per column while merging facts; past this a column's distinct count is
# computed by a separate exact pass that splits values by hash.
DISTINCT_CAP = 100_000
# Files up to this many bytes in all are hashed whole for the digest; past it a fingerprint.
FULL_DIGEST_BYTES = 2 * 1024**3
CSV_BLOCKSIZE = "64MB"
_NA_TEXT = ["", "NA", "NaN", "nan", "null", "None", "N/A"]
_INT64_MAX = 2**63 - 1
_KIND_WORDS = {"int": "number", "uint": "number", "float": "number", "bool": "true/false",
               "bigint": "number", "text": "text", "list": "array"}
_PARQUET_SUFFIXES = (".parquet", ".pq", ".parq")
_CSV_SUFFIXES = {".csv": ",", ".txt": None, ".tsv": "\t", ".tab": "\t"}


@dataclass(frozen=True)
class PartitionedTable:
    """A table on a Dask cluster: typed column descriptions, and partitions read on demand.

    The column descriptions (``columns``), ``id_column``, ``n_rows`` and ``warnings`` mean what
    they mean on :class:`analysis.table.Table`, so helpers such as
    :func:`analysis.features.default_feature_columns` accept either. ``partition_rows`` counts
    the rows of each partition in order; ``offsets`` are their first global positions.
    """

    name: str
    path: str
    digest: str
    format: str
    columns: tuple[ColumnInfo, ...]
    id_column: str | None
    partition_rows: tuple[int, ...]
    warnings: tuple[str, ...] = ()
    frame: object = field(default=None, repr=False)   # the raw dask DataFrame
    conversions: tuple[tuple[str, str], ...] = ()      # (column, how) for typed_partition
    facts: dict = field(default_factory=dict, repr=False, compare=False)

    @property
    def n_rows(self) -> int:
        return int(sum(self.partition_rows))

    @property
    def npartitions(self) -> int:
        return len(self.partition_rows)

    @property
    def offsets(self) -> np.ndarray:
        return np.concatenate([[0], np.cumsum(self.partition_rows)[:-1]]).astype(np.int64)

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

    def typed_partitions(self, columns: list[str] | None = None) -> list:
        """One dask ``Delayed`` per partition: a pandas frame typed as ``Table.frame`` is.

        ``columns`` limits the columns read (the id column is always kept).
        """
        from dask import delayed

        names = [c.name for c in self.columns]
        if columns is not None:
            wanted = set(columns) | ({self.id_column} if self.id_column else set())
            names = [n for n in names if n in wanted]
        frame = self.frame[names] if names else self.frame
        how = tuple((c, h) for c, h in self.conversions if c in set(names))
        return [delayed(typed_partition, pure=True)(part, how) if how else part
                for part in frame.to_delayed()]


# ----------------------------------------------------------------------------------------
# Reading


def read_partitioned(path: str | Path, client, *, id_column: str | None = None,
                     roles: dict[str, str] | None = None,
                     blocksize: str | int = CSV_BLOCKSIZE) -> PartitionedTable:
    """Open a Parquet file, a folder of Parquet files, or a CSV/TSV file, in partitions.

    Runs one pass over the data on ``client`` to type the columns and count the rows of
    each partition. Bad input gives a TableError naming the file and the column.

    id_column: the column that names each object (checked unique and never empty).
    roles: role overrides {column: role}; on this engine a column can become id, text or
        category, a number can stay an invariant and a flag can become an invariant.
    blocksize: size of the blocks a CSV file is read in (Parquet keeps its own partitions).
    """
    try:
        import dask.dataframe as dd
    except ImportError:
        from analysis.distributed.cluster import dask_missing

        raise dask_missing() from None
    path = Path(path)
    name = path.name
    if not path.exists():
        raise TableError(f"{path}: no such file or folder. Check the path.")
    fmt, files = _files_of(path)
    warnings: list[str] = []
    digest = _digest(files, path, warnings)
    if fmt == "parquet":
        try:
            frame = dd.read_parquet([str(f) for f in files])
        except Exception as exc:  # noqa: BLE001 - pyarrow and fsspec raise many kinds
            raise TableError(f"{name}: not readable as Parquet ({_first_line(exc)}). Check "
                             "the files or export them again.") from None
    else:
        delimiter = _csv_delimiter(files[0], warnings, name)
        try:
            frame = dd.read_csv([str(f) for f in files], sep=delimiter, dtype=object,
                                blocksize=blocksize, keep_default_na=False,
                                na_values=_NA_TEXT)
        except Exception as exc:  # noqa: BLE001 - pandas and fsspec raise many kinds
            raise TableError(f"{name}: not readable as a delimited table "
                             f"({_first_line(exc)}).") from None
    header = [str(c) for c in frame.columns]
    _check_names(name, header)
    frame.columns = header
    if not header:
        raise TableError(f"{name}: no columns found. A table needs a header row.")
    conversions = tuple((c, "csv") for c in header) if fmt == "csv" else ()
    parts = [_facts_task(part, conversions) for part in frame.to_delayed()]
    try:
        merged_parts = client.gather(client.compute(parts))
    except TableError:
        raise
    except Exception as exc:  # noqa: BLE001 - a partition that cannot be read
        raise TableError(f"{name}: a partition could not be read ({_first_line(exc)}). "
                         "Check that every file has the same columns and types.") from None
    partition_rows = tuple(int(p["__rows__"]) for p in merged_parts)
    n = sum(partition_rows)
    if n == 0:
        raise TableError(f"{name}: a header but no rows. Add at least two rows of data.")
    if n == 1:
        warnings.append(f"{name}: only one row; most steps need many more.")
    facts = {}
    mixed = []
    for column in header:
        try:
            facts[column] = functools.reduce(_merge_facts, [p[column] for p in merged_parts])
        except TableError:
            mixed.append(column)
    # numbers in some partitions and text in others: the column is text, as in memory
    _facts_again(client, frame, facts, mixed, "text", name)
    # columns the user asks to be text or a category are read as text, cells as given, as
    # load_table reads them (array cells stay arrays: with_roles refuses to make them text)
    asked = [c for c, role in (roles or {}).items() if role in ("text", "category")
             and facts.get(c, {}).get("kind") != "list"]
    _facts_again(client, frame, facts, asked, "as_text", name)
    _exact_distinct(client, frame, facts, conversions)
    infos, how = _type_columns(name, header, facts, n, warnings, fmt, set(asked))
    _array_text_shapes(client, frame, facts, how, name, partition_rows)
    texts = {c for c, h in how if h == "array_text"}
    infos = [replace(i, distinct=_distinct_of(facts[i.name], i.dtype)) if i.name in texts
             else i for i in infos]
    table = PartitionedTable(
        name=name, path=str(path), digest=digest, format=fmt, columns=tuple(infos),
        id_column=next((c.name for c in infos if c.role == "id"), None),
        partition_rows=partition_rows, warnings=tuple(warnings), frame=frame,
        conversions=tuple(how), facts=facts,
    )
    if roles or id_column is not None:
        table = with_roles(table, roles or {}, id_column)
    return table


def _facts_again(client, frame, facts: dict, columns: list[str], how: str,
                 name: str) -> None:
    """The facts of ``columns`` gathered again with every cell read as text (``how``:
    "text" for a column mixing kinds, "as_text" for one asked to be text)."""
    if not columns:
        return
    forced = tuple((c, how) for c in columns)
    again = client.gather(client.compute([_facts_task(part, forced)
                                          for part in frame[columns].to_delayed()]))
    for column in columns:
        try:
            facts[column] = functools.reduce(_merge_facts, [p[column] for p in again])
        except TableError as exc:
            raise TableError(f"{name}: column {column!r} {exc}.") from None


def _files_of(path: Path) -> tuple[str, list[Path]]:
    if path.is_dir():
        files = sorted(p for p in path.rglob("*")
                       if p.is_file() and p.suffix.lower() in _PARQUET_SUFFIXES)
        if not files:
            raise TableError(f"{path}: a folder with no Parquet files (*.parquet) in it. "
                             "Point at a Parquet file, a folder of them, or a CSV file.")
        return "parquet", files
    suffix = path.suffix.lower()
    if suffix in _PARQUET_SUFFIXES:
        return "parquet", [path]
    if suffix in _CSV_SUFFIXES:
        return "csv", [path]
    with path.open("rb") as handle:
        if handle.read(4) == b"PAR1":
            return "parquet", [path]
    if suffix in (".json", ".jsonl", ".ndjson"):
        raise TableError(f"{path.name}: JSON tables are read whole; the dask engine reads "
                         "Parquet (a file or a folder of files) or CSV in partitions. "
                         "Convert the table to Parquet, or use --engine local.")
    return "csv", [path]


def _digest(files: list[Path], root: Path, warnings: list[str]) -> str:
    """sha256 of the files' bytes; past FULL_DIGEST_BYTES a fingerprint of names, sizes, ends."""
    sizes = [f.stat().st_size for f in files]
    total = sum(sizes)
    digest = hashlib.sha256()
    whole = total <= FULL_DIGEST_BYTES
    for f, size in zip(files, sizes):
        if len(files) > 1:
            relative = f.relative_to(root) if root.is_dir() else f.name
            digest.update(f"{relative}\0{size}\0".encode())
        with f.open("rb") as handle:
            if whole:
                for chunk in iter(lambda h=handle: h.read(1 << 20), b""):
                    digest.update(chunk)
            else:
                digest.update(handle.read(1 << 20))
                handle.seek(max(0, size - (1 << 20)))
                digest.update(handle.read())
    if not whole:
        warnings.append(f"{root.name}: {total / 1024**3:.1f} GB; its digest is a fingerprint "
                        "of the file names, sizes and first and last megabyte of each file, "
                        "not of every byte.")
    return digest.hexdigest()


def _csv_delimiter(path: Path, warnings: list[str], name: str) -> str:
    fixed = _CSV_SUFFIXES.get(path.suffix.lower())
    with path.open("rb") as handle:
        head = handle.read(65536)
    try:
        text = head.decode("utf-8-sig")
    except UnicodeDecodeError:
        try:
            text = head[:-4].decode("utf-8-sig")   # a character cut at the block's end
        except UnicodeDecodeError as exc:
            raise TableError(f"{name}: bytes at offset {exc.start} are not UTF-8. Re-save "
                             "the file as UTF-8.") from None
    if fixed:
        return fixed
    sample = "\n".join(text.splitlines()[:50])
    try:
        delimiter = csv.Sniffer().sniff(sample, delimiters=",;\t|").delimiter
    except csv.Error:
        first = sample.split("\n", 1)[0]
        counts = {d: first.count(d) for d in ",;\t|"}
        best = max(counts, key=counts.get)
        delimiter = best if counts[best] else ","
    if delimiter != ",":
        shown = {"\t": "tab", ";": "semicolon", "|": "vertical bar"}.get(delimiter, delimiter)
        warnings.append(f"{name}: columns separated by {shown}.")
    return delimiter


def _check_names(name: str, header: list[str]) -> None:
    seen: dict[str, int] = {}
    for position, column in enumerate(header, start=1):
        if column in seen:
            raise TableError(f"{name}: column name {column!r} appears twice (columns "
                             f"{seen[column]} and {position}). Rename one of them.")
        seen[column] = position


def _first_line(exc: Exception) -> str:
    text = str(exc).strip().splitlines()
    return text[0][:300] if text else type(exc).__name__


# ----------------------------------------------------------------------------------------
# Facts per partition, merged on the client


def _facts_task(part, conversions):
    from dask import delayed

    return delayed(partition_facts)(part, conversions)


def partition_facts(frame: pd.DataFrame, conversions=()) -> dict:
    """Per-column facts of one raw partition (a pandas frame); see :func:`_merge_facts`."""
    csv_columns = {c for c, how in conversions if how == "csv"}
    text_columns = {c for c, how in conversions if how in ("text", "as_text")}
    asked = {c for c, how in conversions if how == "as_text"}
    out: dict = {"__rows__": len(frame)}
    for column in frame.columns:
        series = frame[column]
        out[column] = _column_facts(series, column in csv_columns, column in text_columns,
                                    exact_decimals=column not in asked)
    return out


def _column_facts(series: pd.Series, from_text: bool, as_text: bool = False,
                  exact_decimals: bool = True) -> dict:
    n = len(series)
    missing_mask = series.isna().to_numpy()
    facts: dict = {"n": n, "missing": int(missing_mask.sum()), "kind": None}
    if facts["missing"] == n:
        return facts   # says nothing about the column's kind
    if exact_decimals and _holds_decimals(series, missing_mask):
        series = _decimal_texts(series)
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
        facts.update(_array_facts(present.tolist(), str(series.name)))
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
    lowered = set(text.str.strip().str.lower().unique().tolist())
    facts["words"] = lowered if len(lowered) <= 2 else None
    return _text_facts(facts, text, present, missing_mask)


def _text_facts(facts: dict, text: pd.Series, present: pd.Series, missing_mask) -> dict:
    """The facts of a run of text cells: counts, marked numbers, brackets, rationals."""
    facts["kind"] = "text"
    facts.update(_text_counts(text, ~missing_mask))
    facts["marked"] = marked_facts(present.tolist(), np.flatnonzero(~missing_mask))
    facts["brackets"] = int(text.str.strip().str.startswith("[").sum())
    # every cell an integer or p/q: the column is read as exact rationals, as in memory
    facts["rational"] = bool(text.str.fullmatch(RATIONAL_TEXT).all())
    return facts


def _array_facts(values: list, column: str) -> dict:
    """Shapes and distinct cells of list or matrix cells, each read by analysis.table's rule
    (a cell it refuses counts as "not an array")."""
    shapes: dict[str, int] = {}
    tokens: set | None = set()
    for value in values:
        try:
            array = array_value(value, "", 0, column, Limits())
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
                     big=any(abs(v) > _INT64_MAX for v in ints),
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
    facts["big"] = bool(kind_name == "uint" and len(finite) and finite.max() > _INT64_MAX)
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


def _decimal_texts(series: pd.Series) -> pd.Series:
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


def _merge_facts(a: dict, b: dict) -> dict:
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
        out["rational"] = a.get("rational", False) and b.get("rational", False)
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
                   marked=marked_facts([], []), rational=True)
    else:
        values = other["values"]
        out.update(count=0, inf=False, integral=True, big=False, total=0.0, minimum=None,
                   maximum=None, values=None if values is None else values[:0])
    return out


def _exact_distinct(client, frame, facts: dict, conversions) -> None:
    """Count distinct values exactly for columns past DISTINCT_CAP, by hash buckets."""
    from dask import delayed

    over = [c for c, f in facts.items()
            if (f.get("kind") == "text" and f.get("counts") is None)
            or (f.get("kind") not in ("text", "list", None) and f.get("values") is None)]
    if not over:
        return
    csv_columns = {c for c, how in conversions if how == "csv"}
    # marked numbers count their plain numbers, typed as they will be
    marked = {c: _marked_type(facts[c]["marked"]) for c in over if _reads_marked(facts[c])}
    buckets = max(1, min(32, frame.npartitions))
    pieces = [delayed(_bucketed_uniques)(part, over, csv_columns, buckets, marked)
              for part in frame[over].to_delayed()]
    totals = []
    for column in over:
        for b in range(buckets):
            parts = [delayed(_pick)(piece, column, b) for piece in pieces]
            totals.append(tree(parts, _union_pair, final=len))
    counts = client.gather(client.compute(totals))
    k = 0
    for column in over:
        facts[column]["distinct"] = int(sum(counts[k:k + buckets]))
        k += buckets


def _bucketed_uniques(frame: pd.DataFrame, columns, csv_columns, buckets: int,
                      marked: dict) -> dict:
    out = {}
    for column in columns:
        series = frame[column].dropna()
        if column in marked:
            series = _marked_values(series, marked[column]).dropna()
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


def _pick(piece: dict, column: str, bucket: int):
    return piece[column][bucket]


def _union_pair(a, b):
    return pd.unique(np.concatenate([a, b]))


# ----------------------------------------------------------------------------------------
# Marked numbers: numbers with intervals and marker words, read by analysis.table's rule


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


def _reads_marked(f: dict, requested: bool = False) -> bool:
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


def _reads_rational(f: dict) -> bool:
    """Whether a text column's cells are all integers or p/q (analysis.table's rational
    rule), with at least one p/q among them: read as exact rationals, as in memory."""
    m = f.get("marked")
    return bool(f.get("kind") == "text" and f.get("rational") and m and m["fraction"])


def _marked_type(m: dict) -> str:
    dtype = marked_dtype(has_float=m["float"], has_fraction=m["fraction"])
    if dtype == "integer" and m["numbers"]:
        dtype = incomplete_integer_dtype(int(m["minimum"]), int(m["maximum"]))[0]
    return dtype


def _as_marked(name: str, column: str, f: dict) -> tuple[dict, ColumnInfo]:
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
    dtype = _marked_type(m)
    note = ""
    if dtype == "real":
        note = "has infinite values" if m["inf"] else ""
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


def _marked_values(series: pd.Series, dtype: str) -> pd.Series:
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


def _array_text_shapes(client, frame, facts: dict, how, name: str, partition_rows) -> None:
    """Check every cell of the JSON-array text columns, as in memory, and count their shapes
    (a bad cell is a TableError naming its row in the whole table)."""
    from dask import delayed

    columns = [c for c, h in how if h == "array_text"]
    if not columns:
        return
    offsets = np.concatenate([[0], np.cumsum(partition_rows)[:-1]]).astype(int)
    pieces = [delayed(_shapes_of_texts)(part, columns, name, int(offsets[k]))
              for k, part in enumerate(frame[columns].to_delayed())]
    found = client.gather(client.compute(pieces))
    for column in columns:
        f = facts[column]
        facts[column] = functools.reduce(_merge_facts, [piece[column] for piece in found])
        facts[column].update(n=f["n"], missing=f["missing"])


def _shapes_of_texts(frame: pd.DataFrame, columns, name: str, first_row: int) -> dict:
    out = {}
    for column in columns:
        cells = [v for v in array_cells(frame[column], name, column,
                                        first_row=first_row).tolist() if v is not None]
        out[column] = {"n": len(frame), "missing": len(frame) - len(cells), "kind": "list",
                       **_array_facts(cells, column)}
    return out


# ----------------------------------------------------------------------------------------
# Typing: the same dtypes and roles as analysis.table gives the same data in memory


def _type_columns(name: str, header: list[str], facts: dict, n: int, warnings: list[str],
                  fmt: str, as_text: set[str] = frozenset(),
                  ) -> tuple[list[ColumnInfo], list[tuple[str, str]]]:
    """Each column's description and conversion; ``as_text`` columns are text as asked."""
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
            missing, distinct = f["missing"], _distinct_of(f, dtype)
        elif _reads_marked(f) or _reads_rational(f):
            facts[column], marked = _as_marked(name, column, f)
            dtype, note, convert = marked.dtype, marked.note, "marked:" + marked.dtype
            missing, distinct = marked.missing, marked.distinct
        else:
            dtype, note, convert = _dtype_of(f, fmt)
            missing, distinct = f["missing"], _distinct_of(f, dtype)
            if dtype == "text" and reads_as_array_texts(f.get("brackets", 0),
                                                        f["n"] - f["missing"]):
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
        warnings.extend(column_warnings(name, column, dtype, note, distinct, n, role, labels))
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


def _dtype_of(f: dict, fmt: str) -> tuple[str, str, str]:
    """(dtype, note, conversion for typed_partition) from a column's merged facts."""
    kind = f["kind"]
    csv = fmt == "csv" or f.get("parsed", False)
    if kind is None:
        return "empty", "", ""
    if kind == "list":
        return "array", "", "arrays"
    if kind == "text":
        words = f["words"]
        if words and reads_as_boolean(words):
            return "boolean", "", "words"
        return "text", "", ""
    if kind == "bool":
        return "boolean", "", ""
    if f["big"]:
        return "big integer", "", "bigint"
    if kind == "bigint":
        # integers of 16 or more digits that still fit in 64 bits
        return "integer", ("has missing cells" if f["missing"] else ""), \
            ("csv+float" if f["missing"] else "csv+int64")
    prefix = "csv+" if csv else ""
    if f["count"] == 0:
        return "empty", "", ""
    values = f["values"]
    zero_one = values is not None and len(values) == 2 and set(values.tolist()) == {0, 1}
    if kind in ("int", "uint"):
        if zero_one and not f["missing"]:
            return "boolean", "0/1 read as false/true", prefix + "bool"
        if f["missing"]:
            return "integer", "has missing cells", prefix + "float"
        return "integer", "", prefix + "int64" if csv or kind == "uint" else ""
    # floats
    if f["inf"]:
        return "real", "has infinite values", "number" if csv else ""
    if f["integral"]:
        if f["missing"]:
            return "integer", "has missing cells", "number" if csv else ""
        if zero_one:
            return "boolean", "0/1 read as false/true", prefix + "bool"
        return "integer", "", prefix + "int64"
    return "real", "", "number" if csv else ""


def _distinct_of(f: dict, dtype: str) -> int:
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


def typed_partition(frame: pd.DataFrame, conversions) -> pd.DataFrame:
    """A raw partition with its columns converted to the dtypes ``Table.frame`` would hold.

    ``conversions`` pairs a column with how to convert it: "number" (text to numbers),
    "float", "int64", "bool", "words" (true/false words), "bigint" (exact Python integers),
    "text" (values as strings) or "bool_to_int"; "csv+X" reads text as numbers first;
    "marked:<dtype>" keeps the plain numbers of marked numbers, intervals and words missing;
    "array_text" reads JSON-array text as arrays, "arrays" list cells as numpy arrays;
    "strip" reads labels without surrounding spaces; "decimal+X" reads Parquet decimals as
    the text of their exact values first.
    """
    frame = frame.copy(deep=False)
    for column, how in conversions:
        if column not in frame.columns:
            continue
        series = frame[column]
        if how.startswith("decimal+"):
            series, how = _decimal_texts(series), how[len("decimal+"):]
        if how.startswith("marked:"):
            frame[column] = _marked_values(series, how.split(":", 1)[1])
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
            if how in ("float", "int64", "bool"):
                series = pd.to_numeric(series, errors="coerce")
        if how == "number":
            series = pd.to_numeric(series, errors="coerce")
        elif how == "float":
            series = series.astype(np.float64)
        elif how == "int64":
            series = series.astype(np.int64)
        elif how == "bool":
            series = series.astype(bool)
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


# ----------------------------------------------------------------------------------------
# Roles


def with_roles(table: PartitionedTable, roles: dict[str, str],
               id_column: str | None = None) -> PartitionedTable:
    """A new PartitionedTable with some roles overridden and, optionally, a chosen id column."""
    roles = dict(roles)
    if id_column is not None:
        roles[id_column] = "id"
    for column in roles:
        table.column(column)
    infos = []
    how = dict(table.conversions)
    facts = dict(table.facts)
    for info in table.columns:
        role = roles.get(info.name)
        if id_column is not None and info.role == "id" and info.name != id_column \
                and role is None:
            role = info.detected_role if info.detected_role != "id" else "text"
        if role is None or role == info.role:
            infos.append(info)
            continue
        new = replace(info, role=role)
        if role in ("text", "category"):
            if info.dtype == "array":
                raise StepError(f"{table.name}: column {info.name!r}: turning arrays into text "
                                "is not done on the dask engine; use --engine local.")
            if info.dtype not in ("text",):
                new = replace(new, dtype="text", note=f"shown as text (was {info.dtype})",
                              intervals=0, markers={})
                how[info.name] = "text"
        elif role == "invariant":
            if info.dtype == "boolean":
                new = replace(new, dtype="integer")
                how[info.name] = "bool_to_int"
            elif info.dtype == "text" and _reads_marked(facts[info.name], requested=True):
                # asked for outright: only the limit on different words applies, as in memory
                facts[info.name], marked = _as_marked(table.name, info.name, facts[info.name])
                new = replace(marked, detected_role=info.detected_role)
                how[info.name] = "marked:" + marked.dtype
            elif info.dtype not in ("integer", "real", "big integer"):
                raise StepError(f"{table.name}: column {info.name!r} holds {info.dtype} values; "
                                "on the dask engine only numbers and flags can be invariants.")
        elif role == "flag":
            if info.dtype != "boolean":
                raise StepError(f"{table.name}: column {info.name!r} holds {info.dtype} values; "
                                "on the dask engine only true/false or 0/1 columns can be "
                                "flags.")
        elif role == "id":
            if info.missing:
                raise TableError(f"{table.name}: the id column {info.name!r} is empty in "
                                 f"{info.missing} rows. Every row needs an id.")
            if info.distinct != table.n_rows:
                raise TableError(f"{table.name}: column {info.name!r} cannot be the id: it has "
                                 f"{info.distinct} distinct values in {table.n_rows} rows. "
                                 "Choose a column with unique values.")
        elif role == "array":
            if info.dtype != "array":
                raise TableError(f"{table.name}: column {info.name!r} holds {info.dtype} "
                                 "values, not arrays.")
        else:
            raise TableError(f"{table.name}: column {info.name!r}: unknown role {role!r}.")
        infos.append(new)
    ids = [c.name for c in infos if c.role == "id"]
    if len(ids) > 1:
        raise TableError(f"{table.name}: only one column can be the id; got "
                         f"{', '.join(map(repr, ids))}. Give the others another role.")
    return replace(table, columns=tuple(infos), id_column=ids[0] if ids else None,
                   conversions=tuple(how.items()), facts=facts)


# ----------------------------------------------------------------------------------------
# Samples as in-memory tables


def row_column_name(table: PartitionedTable) -> str:
    """A column name, not in the table, for global row positions in a sample."""
    names = {c.name for c in table.columns}
    candidate = "row"
    while candidate in names:
        candidate += "_"
    return candidate


def sample_table(table: PartitionedTable, client, size: int, *, seed: int = 0,
                 columns: list[str] | None = None) -> tuple[Table, np.ndarray]:
    """A uniform random sample of ``size`` rows as an in-memory :class:`Table`.

    Rows keep their ids: when the table has no id column, the sample gets one (named by
    :func:`row_column_name`) holding each row's position in the whole table. Returns the table
    and the sampled global positions (sorted). Column descriptions (missing, distinct) are
    those of the whole table.
    """
    from dask import delayed

    from analysis.projection import sample_positions

    n = table.n_rows
    positions = np.arange(n) if size >= n else sample_positions(n, size, seed)
    offsets = table.offsets
    parts = table.typed_partitions(columns)
    picks = []
    for k, part in enumerate(parts):
        lo, hi = offsets[k], offsets[k] + table.partition_rows[k]
        local = positions[(positions >= lo) & (positions < hi)] - lo
        if len(local):
            picks.append(delayed(_take_rows)(part, local))
    frames = client.gather(client.compute(picks))
    frame = pd.concat(frames, ignore_index=True) if frames else pd.DataFrame()
    return as_table(table, frame, positions), positions


def _take_rows(frame: pd.DataFrame, local: np.ndarray) -> pd.DataFrame:
    return frame.iloc[local].reset_index(drop=True)


def as_table(table: PartitionedTable, frame: pd.DataFrame, positions: np.ndarray) -> Table:
    """Rows of a partitioned table (``frame``, at global ``positions``) as a :class:`Table`."""
    infos = [c for c in table.columns if c.name in frame.columns]
    id_column = table.id_column
    if id_column is None:
        id_column = row_column_name(table)
        frame = frame.copy(deep=False)
        frame[id_column] = np.asarray(positions, dtype=np.int64)
        infos.append(ColumnInfo(id_column, "id", "integer", 0, table.n_rows, "id",
                                "position of the row in the whole table"))
    return Table(name=table.name, digest=table.digest, frame=frame, columns=tuple(infos),
                 warnings=table.warnings, id_column=id_column, format=table.format)


__all__ = ["PartitionedTable", "as_table", "read_partitioned", "row_column_name",
           "sample_table", "typed_partition", "with_roles"]
