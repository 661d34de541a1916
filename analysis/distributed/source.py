"""A table read in partitions: Parquet files (one file or a folder) or CSV read in blocks.

The table is never loaded whole. One pass over the partitions gathers, per column and per
partition, the facts that typing needs (missing cells, whether every number is a whole number,
the distinct values up to a cap, ranges and sums); the facts are merged on the client and each
column gets the dtype and role that :func:`analysis.table.load_table` would give the same
data in memory. Each later pass turns a raw partition into typed values with the same dtypes
as ``Table.frame`` has in memory, so every step sees the same numbers either way.

The facts, their merge and the typing decided from them are :mod:`analysis.column_facts`,
the one rule the in-memory reader follows too (it reads one block); the file-level rules
(delimiter, header names, unnamed columns) are :mod:`analysis.table`'s public ones.

Rows are numbered across partitions in file order: a row's id is its id-column value, else its
0-based position in the whole table, exactly as in memory.
"""

from __future__ import annotations

import functools
import hashlib
from dataclasses import dataclass, field, replace
from pathlib import Path

import numpy as np
import pandas as pd

from analysis.column_facts import (
    MISSING_WORDS,
    array_text_facts,
    bucketed_uniques,
    distinct_of,
    frame_facts,
    marked_note,
    marked_type,
    marker_counts,
    merge_facts,
    reads_marked,
    type_columns,
    typed_block,
)
from analysis.distributed.reduction import tree
from analysis.errors import TableError
from analysis.notes import Note
from analysis.table import (
    ColumnInfo,
    ColumnLookup,
    Table,
    check_column_names,
    delimited_layout,
    delimiter_warning,
    format_of,
    one_line,
    requested_roles,
    role_change,
    single_id,
    text_roles,
    unnamed_column_error,
    unnamed_column_warning,
)

# Files up to this many bytes in all are hashed whole for the digest; past it a fingerprint.
FULL_DIGEST_BYTES = 2 * 1024**3
CSV_BLOCKSIZE = "64MB"
_PARQUET_SUFFIXES = (".parquet", ".pq", ".parq")


@dataclass(frozen=True)
class PartitionedTable(ColumnLookup):
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
    conversions: tuple[tuple[str, str], ...] = ()      # (column, how) for typed_block
    facts: dict = field(default_factory=dict, repr=False, compare=False)
    # flags derived from statements (analysis.derived), computed partition by partition
    derived: tuple = ()

    @property
    def n_rows(self) -> int:
        return int(sum(self.partition_rows))

    @property
    def npartitions(self) -> int:
        return len(self.partition_rows)

    @property
    def offsets(self) -> np.ndarray:
        return np.concatenate([[0], np.cumsum(self.partition_rows)[:-1]]).astype(np.int64)

    def typed_partitions(self, columns: list[str] | None = None) -> list:
        """One dask ``Delayed`` per partition: a pandas frame typed as ``Table.frame`` is.

        ``columns`` limits the columns read (the id column is always kept); a derived flag
        among them is computed from its statement's columns, which are read too.
        """
        from dask import delayed

        flags = tuple(s for s in self.derived if columns is None or s.flag_name in columns)
        needed = {name for s in flags for name, _ in s.terms}
        names = [c.name for c in self.columns if c.name not in {s.flag_name for s in self.derived}]
        if columns is not None:
            wanted = set(columns) | needed | ({self.id_column} if self.id_column else set())
            names = [n for n in names if n in wanted]
        frame = self.frame[names] if names else self.frame
        how = tuple((c, h) for c, h in self.conversions if c in set(names))
        parts = [delayed(typed_block, pure=True)(part, how) if how else part
                 for part in frame.to_delayed()]
        if not flags:
            return parts
        terms = tuple(c for c in self.columns if c.name in needed)
        return [delayed(_with_flags, pure=True)(part, self.name, terms, flags) for part in parts]


def _with_flags(frame: pd.DataFrame, name: str, terms: tuple, statements: tuple):
    """A typed partition with the flag of each statement added, as the in-memory table has."""
    from analysis.derived import breaking_rows

    part = Table(name=name, digest="", frame=frame, columns=terms)
    frame = frame.copy(deep=False)
    for statement in statements:
        frame[statement.flag_name] = pd.array(breaking_rows(part, statement), dtype="boolean")
    return frame


def with_breaks_flag(table: PartitionedTable, client, statement) -> PartitionedTable:
    """``table`` with the flag "breaks: <statement>" (:func:`analysis.derived.with_breaks_flag`
    on every partition), its rows that break and cannot be checked counted over all of them."""
    from dask import delayed

    from analysis.derived import breaks_flag_info

    if statement.flag_name in {c.name for c in table.columns}:
        return table
    flagged = replace(table, derived=table.derived + (statement,))
    counts = client.gather(client.compute(tree(
        [delayed(_flag_counts)(part, statement.flag_name)
         for part in flagged.typed_partitions([statement.flag_name])], _add_pair)))
    info = breaks_flag_info(table.name, statement, *counts, table.n_rows)
    return replace(flagged, columns=table.columns + (info,))


def _flag_counts(frame: pd.DataFrame, name: str) -> tuple[int, int]:
    flags = frame[name]
    return int(flags.sum()), int(flags.isna().sum())


def _add_pair(a: tuple, b: tuple) -> tuple:
    return a[0] + b[0], a[1] + b[1]


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
        from dask import delayed
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
            raise TableError(f"{name}: not readable as Parquet ({one_line(exc)}). Check "
                             "the files or export them again.") from None
    else:
        delimiter, written = _csv_layout(files[0], fmt, warnings, name)
        fmt = "csv"   # tab-separated too: the conversions of delimited text
        try:
            frame = dd.read_csv([str(f) for f in files], sep=delimiter, dtype=object,
                                blocksize=blocksize, keep_default_na=False,
                                na_values=list(MISSING_WORDS))
        except Exception as exc:  # noqa: BLE001 - pandas and fsspec raise many kinds
            raise TableError(f"{name}: not readable as a delimited table "
                             f"({one_line(exc)}).") from None
    header = [str(c) for c in frame.columns]
    unnamed = set()
    if fmt == "csv" and len(written) == len(header):
        # names as in memory: stripped; a column with none keeps pandas' name until dropped
        unnamed = {c for c, w in zip(header, written) if not w}
        header = [w or c for c, w in zip(header, written)]
    check_column_names(name, [c for c in header if c not in unnamed])
    frame.columns = header
    if not header:
        raise TableError(f"{name}: no columns found. A table needs a header row.")
    conversions = tuple((c, "csv") for c in header) if fmt == "csv" else ()
    parts = [delayed(frame_facts)(part, conversions) for part in frame.to_delayed()]
    try:
        merged_parts = client.gather(client.compute(parts))
    except TableError:
        raise
    except Exception as exc:  # noqa: BLE001 - a partition that cannot be read
        raise TableError(f"{name}: a partition could not be read ({one_line(exc)}). "
                         "Check that every file has the same columns and types.") from None
    partition_rows = tuple(int(p["__rows__"]) for p in merged_parts)
    n = sum(partition_rows)
    if n == 0:
        raise TableError(f"{name}: a header but no rows. Add at least two rows of data.")
    facts = {}
    mixed = []
    for column in header:
        try:
            facts[column] = functools.reduce(merge_facts, [p[column] for p in merged_parts])
        except TableError:
            mixed.append(column)
    frame, header = _drop_unnamed(client, frame, facts, unnamed, name, warnings)
    mixed = [c for c in mixed if c in header]
    if n == 1:
        warnings.append(Note("one_row", f"{name}: only one row; most steps need many more."))
    # numbers in some partitions and text in others: the column is text, as in memory
    _facts_again(client, frame, facts, mixed, "text", name)
    # columns asked to be text or a category are read as text, cells as given, as in memory
    # (array cells stay arrays: role_change refuses to make them text)
    asked = [c for c in text_roles(roles) if facts.get(c, {}).get("kind") != "list"]
    _facts_again(client, frame, facts, asked, "as_text", name)
    _exact_distinct(client, frame, facts, conversions)
    infos, how = type_columns(name, header, facts, n, warnings, fmt, set(asked))
    _array_text_shapes(client, frame, facts, how, name, partition_rows)
    texts = {c for c, h in how if h == "array_text"}
    infos = [_array_text_info(i, facts[i.name]) if i.name in texts else i for i in infos]
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
    from dask import delayed

    if not columns:
        return
    forced = tuple((c, how) for c in columns)
    again = client.gather(client.compute([delayed(frame_facts)(part, forced)
                                          for part in frame[columns].to_delayed()]))
    for column in columns:
        try:
            facts[column] = functools.reduce(merge_facts, [p[column] for p in again])
        except TableError as exc:
            raise TableError(f"{name}: column {column!r} {exc}.") from None


def _files_of(path: Path) -> tuple[str, list[Path]]:
    """("parquet" or "csv", the files): a folder's Parquet files, or one file by the
    in-memory reader's rule (:func:`analysis.table.format_of`; "tsv" for tab-separated)."""
    if path.is_dir():
        files = sorted(p for p in path.rglob("*")
                       if p.is_file() and p.suffix.lower() in _PARQUET_SUFFIXES)
        if not files:
            raise TableError(f"{path}: a folder with no Parquet files (*.parquet) in it. "
                             "Point at a Parquet file, a folder of them, or a CSV file.")
        return "parquet", files
    with path.open("rb") as handle:
        fmt = format_of(path.name, handle.read(4096))
    if fmt in ("json", "jsonl"):
        raise TableError(f"{path.name}: JSON tables are read whole; the dask engine reads "
                         "Parquet (a file or a folder of files) or CSV in partitions. "
                         "Convert the table to Parquet, or use --engine local.")
    return fmt, [path]


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
        warnings.append(Note("digest_fingerprint", f"{root.name}: {total / 1024**3:.1f} GB; its "
                             "digest is a fingerprint of the file names, sizes and first and "
                             "last megabyte of each file, not of every byte.", bytes=total))
    return digest.hexdigest()


def _csv_layout(path: Path, fmt: str, warnings: list[str], name: str) -> tuple[str, list]:
    """The delimiter and the header's names of a delimited file, read as in memory."""
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
    delimiter, header = delimited_layout(text, name, fmt)
    said = delimiter_warning(name, delimiter)
    if said:
        warnings.append(said)
    return delimiter, header


def _drop_unnamed(client, frame, facts: dict, unnamed: set, name: str, warnings: list[str]):
    """Columns with no name: dropped when empty (with a warning), refused when not."""
    header = list(frame.columns)
    for position, column in enumerate(header):
        if column not in unnamed:
            continue
        if facts[column]["kind"] is not None:
            from dask import delayed

            firsts = client.gather(client.compute(
                [delayed(_first_filled)(part) for part in frame[column].to_delayed()]))
            offset = 0
            for rows, found in firsts:
                if found is not None:
                    unnamed_column_error(name, position, offset + found[0], found[1])
                offset += rows
        warnings.append(unnamed_column_warning(name, position))
        facts.pop(column)
    kept = [c for c in header if c not in unnamed]
    return (frame, header) if len(kept) == len(header) else (frame[kept], kept)


def _first_filled(series: pd.Series):
    filled = np.flatnonzero(series.notna().to_numpy())
    return len(series), (None if not len(filled) else (int(filled[0]),
                                                       series.iloc[int(filled[0])]))


# ----------------------------------------------------------------------------------------
# Facts per partition, merged on the client


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
    marked = {c: marked_type(facts[c]["marked"]) for c in over if reads_marked(facts[c])}
    buckets = max(1, min(32, frame.npartitions))
    pieces = [delayed(bucketed_uniques)(part, over, csv_columns, buckets, marked)
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


def _pick(piece: dict, column: str, bucket: int):
    return piece[column][bucket]


def _union_pair(a, b):
    return pd.unique(np.concatenate([a, b]))


def _array_text_info(info, f: dict):
    """A JSON-array text column's description from its merged list facts, as in memory:
    cut-off lists and marker words are missing values, counted by name."""
    counts = marker_counts(f.get("marks", {}))
    return replace(info, distinct=distinct_of(f, info.dtype), missing=f["missing"],
                   markers=counts, note=marked_note(info.note, 0, counts))


def _array_text_shapes(client, frame, facts: dict, how, name: str, partition_rows) -> None:
    """Check every cell of the JSON-array text columns, as in memory, and count their shapes
    (a bad cell is a TableError naming its row in the whole table)."""
    from dask import delayed

    columns = [c for c, h in how if h == "array_text"]
    if not columns:
        return
    offsets = np.concatenate([[0], np.cumsum(partition_rows)[:-1]]).astype(int)
    pieces = [delayed(array_text_facts)(part, columns, name, int(offsets[k]))
              for k, part in enumerate(frame[columns].to_delayed())]
    found = client.gather(client.compute(pieces))
    for column in columns:
        f = facts[column]
        facts[column] = functools.reduce(merge_facts, [piece[column] for piece in found])
        facts[column].update(n=f["n"])   # missing: the empty cells and the marks


# ----------------------------------------------------------------------------------------
# Roles


def with_roles(table: PartitionedTable, roles: dict[str, str],
               id_column: str | None = None) -> PartitionedTable:
    """A new PartitionedTable with some roles overridden and, optionally, a chosen id column,
    by the in-memory rules (:func:`analysis.table.requested_roles` and ``role_change``)."""
    changes = requested_roles(table.name, table.columns, roles,
                              ... if id_column is None else id_column)
    infos, how, facts = [], dict(table.conversions), dict(table.facts)
    for info in table.columns:
        if info.name in changes:
            name = info.name
            info, conversion, facts[name] = role_change(table.name, info, changes[name],
                                                        table.n_rows, facts.get(name))
            how.update({name: conversion} if conversion else {})
        infos.append(info)
    return replace(table, columns=tuple(infos), id_column=single_id(table.name, infos),
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
           "sample_table", "typed_block", "with_breaks_flag", "with_roles"]
