"""The overview step: the table's shape, its columns and roles, and a summary of each column."""

from __future__ import annotations

from dataclasses import dataclass
from typing import ClassVar

import numpy as np
import pandas as pd

from analysis.notes import Note
from analysis.plain import plain
from analysis.progress import quiet, stoppable_call
from analysis.projection import sample_positions
from analysis.settings import SEED, Setting, check_values
from analysis.table import Table

SETTINGS = (
    Setting("top_correlations", minimum=0, page_maximum=100, spoken="top_correlations",
            label="Correlated pairs to list", help="Pairs of invariants with Pearson |r| ≥ 0.9."),
    SEED,
)

# Rows past which correlations between invariants are computed on a random sample.
CORRELATION_ROWS = 200_000
# Repeated rows named in the overview's warning (all of them are counted).
REPEATS_SHOWN = 3


@dataclass(frozen=True)
class ColumnSummary:
    """Summary of one column: range and centre for numbers, most common values otherwise."""

    name: str
    role: str
    dtype: str
    missing: int
    distinct: int
    minimum: object = None
    maximum: object = None
    mean: float | None = None
    common: tuple = ()
    intervals: int = 0                     # interval cells of marked numbers (missing values)
    markers: tuple[tuple[str, int], ...] = ()   # marker words and their counts

    def to_json(self) -> dict:
        return plain({
            "name": self.name, "role": self.role, "dtype": self.dtype,
            "missing": self.missing, "distinct": self.distinct,
            "min": self.minimum, "max": self.maximum, "mean": self.mean,
            "common": [list(pair) for pair in self.common],
            "intervals": self.intervals, "markers": dict(self.markers),
        })


@dataclass(frozen=True)
class OverviewResult:
    table: str
    digest: str
    rows: int
    columns: tuple[ColumnSummary, ...]
    warnings: tuple[str, ...]
    id_column: str | None
    correlations: tuple[tuple[str, str, float], ...] = ()
    # rows the correlations were computed on when that is a sample; None for every row
    correlation_rows: int | None = None
    notes: tuple[str, ...] = ()   # how it was computed (the engine, its partitions)
    # rows equal to an earlier row in every column (see repeated_rows)
    repeated_rows: int = 0
    kind: ClassVar[str] = "overview"

    def _repr_html_(self) -> str:
        from analysis.notebook import result_html

        return result_html(self)

    def to_frame(self):
        """The result as a pandas frame (see analysis.frames.overview_frame)."""
        from analysis.frames import overview_frame

        return overview_frame(self)

    def to_json(self) -> dict:
        return plain({
            "table": self.table,
            "digest": self.digest,
            "rows": self.rows,
            "id_column": self.id_column,
            "columns": [c.to_json() for c in self.columns],
            "warnings": list(self.warnings),
            "correlations": [{"a": a, "b": b, "pearson": r} for a, b, r in self.correlations],
            "correlation_rows": self.correlation_rows,
            "repeated_rows": self.repeated_rows,
            "notes": list(self.notes),
        })

    def summary(self) -> str:
        ids = f"id column {self.id_column!r}" if self.id_column else "ids are row numbers"
        lines = [f"{self.table}: {self.rows} rows, {len(self.columns)} columns, {ids}"]
        width = max((len(c.name) for c in self.columns), default=4)
        for c in self.columns:
            extra = ""
            if c.minimum is not None:
                extra = f"  range {c.minimum} .. {c.maximum}"
            elif c.common:
                extra = "  e.g. " + ", ".join(str(v) for v, _ in c.common[:3])
            lines.append(f"  {c.name:<{width}}  {c.role:<9} {c.dtype:<11} "
                         f"missing {c.missing:<6} distinct {c.distinct}{extra}")
        for a, b, r in self.correlations[:5]:
            lines.append(f"  strongly correlated: {a} ~ {b} (Pearson r = {r:+.3f})")
        if self.correlations and self.correlation_rows is not None:
            lines.append(f"  (correlations on a random sample of {self.correlation_rows} of "
                         f"the {self.rows} rows)")
        lines.extend(f"  warning: {w}" for w in self.warnings)
        lines.extend(f"  note: {n}" for n in self.notes)
        return "\n".join(lines)


@dataclass(frozen=True, kw_only=True)
class OverviewStep:
    """Describe the table: roles, types, missing values, ranges, strongly correlated pairs."""

    top_correlations: int = 10
    seed: int = 0
    kind: ClassVar[str] = "overview"

    def check(self) -> None:
        """Check the settings alone (no table needed); StepError names a bad one."""
        check_values(self)

    def run(self, table: Table, *, progress=None) -> OverviewResult:
        """Describe the table. ``progress``: a callable (or
        :class:`analysis.progress.Reporter`) that receives the phases and may stop the step
        with :class:`analysis.progress.StepStopped`."""
        reporter = quiet(progress)
        reporter.phase("describing the columns", total=len(table.columns))
        summaries = []
        for column in table.columns:
            summaries.append(_summarize(table, column))
            reporter.advance()
        reporter.phase("repeated rows")
        repeats = stoppable_call(reporter, repeated_rows, table)
        reporter.phase("correlated pairs")
        pairs, sampled = stoppable_call(reporter, _correlations, table, self.top_correlations,
                                        self.seed)
        return OverviewResult(
            table=table.name, digest=table.digest, rows=table.n_rows,
            columns=tuple(summaries), warnings=with_repeats(table.warnings, repeats),
            id_column=table.id_column, correlations=pairs, correlation_rows=sampled,
            repeated_rows=repeats.count,
        )


def _summary_fields(info) -> dict:
    """The fields of a column's summary that its description gives (both engines)."""
    return dict(name=info.name, role=info.role, dtype=info.dtype, missing=info.missing,
                distinct=info.distinct, intervals=info.intervals,
                markers=tuple(info.markers.items()))


def _summarize(table: Table, info) -> ColumnSummary:
    series = table.frame[info.name]
    base = _summary_fields(info)
    if info.dtype in ("integer", "real"):
        raw = series.to_numpy()
        if raw.dtype.kind in "iu" and len(raw):
            low, high = int(raw.min()), int(raw.max())
            if max(abs(low), abs(high)) * len(raw) < 2**53:
                # every value and every partial sum is exact in float64 here, so these are
                # the minimum, maximum and mean computed below, without a float copy
                return ColumnSummary(**base, minimum=low, maximum=high, mean=float(raw.mean()))
        values = table.numeric(info.name)
        finite = values[np.isfinite(values)]
        if len(finite):
            lo, hi = finite.min(), finite.max()
            if info.dtype == "integer":
                lo, hi = int(lo), int(hi)
            return ColumnSummary(**base, minimum=lo, maximum=hi, mean=float(finite.mean()))
    if info.dtype in ("big integer", "rational"):
        present = [v for v in series.tolist() if v is not None]
        if present:
            return ColumnSummary(**base, minimum=str(min(present)), maximum=str(max(present)),
                                 mean=float(np.mean([float(v) for v in present])))
    if info.dtype == "array":
        shapes: dict[str, int] = {}
        for v in series.tolist():
            if v is not None:
                key = "x".join(map(str, v.shape))
                shapes[key] = shapes.get(key, 0) + 1
        common = tuple(sorted(shapes.items(), key=lambda kv: -kv[1])[:5])
        return ColumnSummary(**base, common=tuple((f"shape {k}", n) for k, n in common))
    if series.dtype.kind == "b":
        # a flag with no missing cell: count its two values rather than a string per row
        counts = series.value_counts().head(5)
        return ColumnSummary(**base, common=tuple((str(k), int(v)) for k, v in counts.items()))
    try:
        counts = series.astype(str).where(series.notna()).value_counts().head(5)
        common = tuple((str(k), int(v)) for k, v in counts.items())
    except TypeError:
        common = ()
    return ColumnSummary(**base, common=common)


def summary_from_facts(info, facts: dict, n_rows: int) -> ColumnSummary:
    """A column's summary from its typing facts merged over blocks of rows
    (:mod:`analysis.column_facts`), as the in-memory summary writes it from the whole column:
    how an engine that never holds the column summarizes it."""
    base = _summary_fields(info)
    kind = facts.get("kind")
    if info.dtype in ("integer", "real") and kind not in ("text", "list", None) \
            and facts.get("count"):
        lo, hi = facts["minimum"], facts["maximum"]
        if info.dtype == "integer":
            lo, hi = int(lo), int(hi)
        return ColumnSummary(**base, minimum=lo, maximum=hi,
                             mean=float(facts["total"] / facts["count"]))
    if info.dtype == "big integer" and facts.get("count"):
        return ColumnSummary(**base, minimum=str(facts["minimum"]), maximum=str(facts["maximum"]),
                             mean=float(facts["total"] / facts["count"]))
    marked = facts.get("marked") or {}
    if info.dtype == "rational" and marked.get("numbers"):
        # the exact smallest and largest cell, as the in-memory summary writes them
        return ColumnSummary(**base, minimum=_exact_text(marked["minimum"]),
                             maximum=_exact_text(marked["maximum"]),
                             mean=float(marked["total"] / marked["numbers"]))
    if info.dtype == "array":
        shapes = sorted(facts.get("shapes", {}).items(), key=lambda kv: -kv[1])[:5]
        return ColumnSummary(**base, common=tuple((f"shape {k}", n) for k, n in shapes))
    if info.dtype == "boolean" and kind not in ("text", None):
        trues = int(round(facts["total"]))
        falses = facts["count"] - trues
        pairs = [(str(True), trues), (str(False), falses)]
        pairs = [p for p in sorted(pairs, key=lambda p: -p[1]) if p[1] > 0]
        return ColumnSummary(**base, common=tuple(pairs))
    if kind == "text":
        return ColumnSummary(**base, common=_common_from_facts(facts, info, n_rows))
    return ColumnSummary(**base)


def _exact_text(value) -> str:
    """A cell's value as an exact rational's text ("15/2"); decimals read from their digits."""
    from fractions import Fraction

    return str(value if isinstance(value, (int, Fraction)) else Fraction(str(value)))


def _common_from_facts(facts: dict, info, n_rows: int) -> tuple:
    """The five most common texts, ties in order of first appearance (as value_counts)."""
    counts = facts.get("counts")
    if info.dtype == "boolean" and counts is not None:
        from analysis.column_facts import is_true_word

        merged: dict[str, list] = {}
        for word, (count, first) in counts.items():
            key = str(is_true_word(word))
            entry = merged.setdefault(key, [0, first])
            entry[0] += count
            entry[1] = min(entry[1], first)
        ordered = sorted(merged.items(), key=lambda kv: (-kv[1][0], kv[1][1]))
        return tuple((k, v[0]) for k, v in ordered[:5])
    if counts is not None:
        ordered = sorted(counts.items(), key=lambda kv: (-kv[1][0], kv[1][1]))
        return tuple((str(k), int(v[0])) for k, v in ordered[:5])
    if info.distinct == n_rows - info.missing:
        # every value once: the first five, as value_counts lists ties in order of appearance
        return tuple((str(v), 1) for v in facts.get("first_values", [])[:5])
    return ()


def _correlations(table: Table, top: int, seed: int) -> tuple[tuple, int | None]:
    """The strongly correlated pairs, and the sample size if they come from a sample."""
    names = correlation_columns(table)
    if len(names) < 2 or top <= 0:
        return (), None
    n = table.n_rows
    # past CORRELATION_ROWS rows, a random sample of that many, in table order so that each
    # column is read front to back
    rows = sample_positions(n, CORRELATION_ROWS, seed) if n > CORRELATION_ROWS else None
    # one row per column, each filled in one contiguous write
    values = np.empty((len(names), n if rows is None else len(rows)))
    for j, name in enumerate(names):
        raw = table.frame[name].to_numpy()
        values[j] = raw if rows is None else raw[rows]
    if np.isfinite(values).all():
        # numpy's product of the centred matrix with itself: many times faster than pandas'
        # pairwise loop, and the same coefficients when no value is missing
        with np.errstate(divide="ignore", invalid="ignore"):
            matrix = np.corrcoef(values)
    else:
        # pairwise-complete rows where values are missing, as pandas counts them; each
        # column shifted by its mean first, so that the sums keep their digits
        present = np.isfinite(values)
        shift = np.where(present, values, 0.0).sum(axis=1) / np.maximum(present.sum(axis=1), 1)
        matrix = correlations_from_sums(*pair_sums(values.T - shift))
    return strong_pairs(matrix, names, top), None if rows is None else len(rows)


def pair_sums(values: np.ndarray) -> tuple[np.ndarray, ...]:
    """Pairwise-complete sums of the columns of ``values`` (NaN for a missing cell): for
    each pair [i, j], the rows where both are present, and over those rows the sum of x_i,
    of x_i squared and of x_i * x_j. The sums of blocks of rows add up to the whole's."""
    present = np.isfinite(values).astype(np.float64)
    zeroed = np.where(present > 0, values, 0.0)
    return (present.T @ present, zeroed.T @ present, (zeroed ** 2).T @ present,
            zeroed.T @ zeroed)


def correlations_from_sums(count, sx, sxx, sxy) -> np.ndarray:
    """Pearson's coefficient of every pair from its :func:`pair_sums`; NaN for a pair in
    which a column does not vary (or with no row in common)."""
    with np.errstate(invalid="ignore", divide="ignore"):
        top = count * sxy - sx * sx.T
        bottom = np.sqrt((count * sxx - sx ** 2) * (count * sxx.T - sx.T ** 2))
        return np.clip(top / bottom, -1.0, 1.0)


def correlation_columns(table) -> list[str]:
    """The columns correlations are looked for between: the integer and real invariants
    with more than one value."""
    return [c.name for c in table.columns
            if c.role == "invariant" and c.dtype in ("integer", "real") and c.distinct > 1]


def strong_pairs(matrix: np.ndarray, names: list[str], top: int) -> tuple:
    """The pairs of ``names`` whose correlation in ``matrix`` is at least 0.9 in size,
    strongest first (table order on a tie), at most ``top`` of them."""
    # the pairs above the diagonal, in row order, found at once rather than one by one:
    # thousands of columns make millions of pairs
    with np.errstate(invalid="ignore"):
        strong = np.triu(np.isfinite(matrix) & (np.abs(matrix) >= 0.9), k=1)
    pairs = [(names[i], names[j], float(matrix[i, j])) for i, j in zip(*np.nonzero(strong))]
    pairs.sort(key=lambda p: -abs(p[2]))
    return tuple(pairs[:top])


# ----------------------------------------------------------------------------------------
# Repeated rows: the same object listed twice in a downloaded table


@dataclass(frozen=True)
class Repeats:
    """Rows equal to an earlier row in every column: how many, and the first few pairs.

    pairs: (row, earlier row) as 0-based positions, the first REPEATS_SHOWN repeats in
    table order, each with the first row it repeats.
    """

    count: int = 0
    pairs: tuple[tuple[int, int], ...] = ()


def marked_texts(table: Table) -> dict[str, dict[int, str]]:
    """The marked cells' texts by column and position: typed, an interval or a word is a
    missing value, so two rows differing only there would otherwise look equal."""
    return {name: dict(marks.texts) for name, marks in table.marks.items() if marks.texts}


# Column dtypes whose cells are compared (and hashed) as float64: equal in every partition
# whether a block of the column has missing cells or not.
_FLOAT_KEYED = ("integer", "real", "boolean")


def _cell_key(value) -> str:
    if isinstance(value, np.ndarray):
        return f"{value.dtype}{value.shape}{value.tobytes().hex()}"
    if value is None or value is pd.NA or (isinstance(value, float) and np.isnan(value)):
        return "\x00"
    return f"{type(value).__name__}:{value}"


def _column_keys(series: pd.Series, dtype: str) -> np.ndarray:
    """A column's cells as comparable keys: float64 (NaN where missing) for numbers and
    flags, a text key per cell otherwise (arrays by their shape and bytes)."""
    if dtype in _FLOAT_KEYED and series.dtype != object:
        return series.to_numpy(dtype=np.float64, na_value=np.nan)
    if dtype in _FLOAT_KEYED:
        return np.array([np.nan if v is None or v is pd.NA else float(v) for v in series],
                        dtype=np.float64)
    return np.array([_cell_key(v) for v in series.tolist()], dtype=object)


def _text_keys(texts: dict[int, str], offset: int, n: int) -> np.ndarray:
    return np.array([texts.get(offset + i, "") for i in range(n)], dtype=object)


# The key of a second fingerprint, independent of the first (pandas' default key).
SECOND_HASH_KEY = "scout-rows-again"


def row_fingerprints(frame: pd.DataFrame, dtypes: dict[str, str],
                     texts: dict[str, dict[int, str]], offset: int = 0, *,
                     hash_key: str | None = None) -> np.ndarray:
    """One 64-bit hash per row of ``frame`` (the table's rows from ``offset`` on) over every
    column, whose table dtypes ``dtypes`` gives, and the marked texts; equal rows have equal
    hashes, the converse is checked by :func:`same_rows` (or, where rows cannot be brought
    together, by a second fingerprint with ``hash_key``, a 16-character key)."""
    total = np.zeros(len(frame), dtype=np.uint64)
    keys = [_column_keys(frame[name], dtypes[name]) for name in frame.columns]
    keys += [_text_keys(texts[name], offset, len(frame)) for name in sorted(texts)]
    extra = {} if hash_key is None else {"hash_key": hash_key}
    for column in keys:
        total = total * np.uint64(1_000_003) + pd.util.hash_array(column, **extra)
    return total


def same_rows(frame: pd.DataFrame, dtypes: dict[str, str], texts: dict[str, dict[int, str]],
              a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """For each pair of positions ``a[i]``, ``b[i]`` of ``frame`` (whose first row is row 0
    of the table), whether the two rows are equal in every column, a missing cell equal only
    to a missing one, marked texts included."""
    equal = np.ones(len(a), dtype=bool)
    for name in frame.columns:
        keys = _column_keys(frame[name], dtypes[name])
        left, right = keys[a], keys[b]
        same = np.asarray(left == right, dtype=bool)
        if keys.dtype.kind == "f":
            same |= np.isnan(left) & np.isnan(right)
        equal &= same
    for marks in texts.values():
        equal &= np.array([marks.get(int(x), "") == marks.get(int(y), "")
                           for x, y in zip(a, b)], dtype=bool)
    return equal


def repeats_among(hashes: np.ndarray, same) -> Repeats:
    """The rows repeating an earlier row, from every row's fingerprint.

    Each row is paired with the first row of equal fingerprint; ``same(rows, firsts)`` (a
    boolean per pair) confirms the pairs exactly, so two rows are never called copies on
    their hashes alone.
    """
    order = np.argsort(hashes, kind="stable")
    ordered = hashes[order]
    starts = np.r_[True, ordered[1:] != ordered[:-1]]
    first = np.empty_like(order)
    first[order] = order[np.flatnonzero(starts)][np.cumsum(starts) - 1]
    rows = np.flatnonzero(first != np.arange(len(hashes)))
    if len(rows):
        rows = rows[same(rows, first[rows])]
    return Repeats(count=len(rows),
                   pairs=tuple((int(r), int(first[r])) for r in rows[:REPEATS_SHOWN]))


def repeated_rows(table: Table) -> Repeats:
    """The rows of a table equal to an earlier row in every column.

    A table with an id column has none (its ids are unique), so nothing is hashed.
    """
    if table.id_column is not None or table.n_rows < 2:
        return Repeats()
    dtypes = {c.name: c.dtype for c in table.columns}
    texts = marked_texts(table)
    return repeats_among(row_fingerprints(table.frame, dtypes, texts),
                         lambda a, b: same_rows(table.frame, dtypes, texts, a, b))


def repeats_note(repeats: Repeats, row_ids=None) -> Note:
    """The overview's warning about repeated rows (rows counted from 1 after the header)."""
    shown = ", ".join(f"row {row + 1} equals row {first + 1}" for row, first in repeats.pairs)
    more = ", ..." if repeats.count > len(repeats.pairs) else ""
    rows = f"{repeats.count} row{'s' if repeats.count != 1 else ''}"
    return Note("repeated_rows",
                f"{rows} {'is' if repeats.count == 1 else 'are'} equal to an earlier row in "
                f"every column ({shown}{more}). If a row is one object listed twice, every "
                "step counts it twice, and a separator may train on one copy and be tested on "
                "the other: remove the copies or name a group column. Different objects with "
                "equal invariants need no change.",
                repeated=repeats.count, pairs=[list(p) for p in repeats.pairs])


def with_repeats(warnings: tuple, repeats: Repeats) -> tuple:
    """The table's warnings, then the repeated-rows warning when rows repeat."""
    return tuple(warnings) + ((repeats_note(repeats),) if repeats.count else ())
