"""pandas frames in and out: a Table from a frame, and results as frames.

A frame handed over is written as CSV text (in memory) and read by the same code that reads a
CSV file, so it gets exactly the typing, roles, marked numbers, limits and messages a file
with the same cells gets; one rule lives in one place. The frame itself is never changed.
How each cell is written:

* missing values (None, NaN, ``pd.NA``, ``NaT``) as empty cells;
* lists, tuples and numpy arrays as JSON-array text (``[[1,0],[0,1]]``), the way a CSV file
  holds matrices; integers of any size stay exact there;
* fractions as ``p/q``, Python integers of any size as their digits, floats with every digit
  needed to read them back exactly;
* everything else (text, flags, categories, dates) as its text.

A named index (``frame.set_index("curve")``) becomes the first column; an unnamed index is
left out, as row numbers are the ids of a table without an id column.

The other way, ``result.to_frame()`` gives one row per object where that is natural
(coordinates, cluster assignments, decision scores, objects to look at) or one row per
statement (relations and bounds) or per column (overview).
"""

from __future__ import annotations

import csv
import io
import json
import math
from decimal import Decimal
from fractions import Fraction
from pathlib import Path

import numpy as np
import pandas as pd

from analysis.errors import TableError
from analysis.plain import fraction_text, row_id
from analysis.table import Limits, Table, read_table


def table_from_frame(frame: pd.DataFrame, *, name: str = "frame",
                     id_column: str | None = None, roles: dict[str, str] | None = None,
                     limits: Limits | None = None) -> Table:
    """A Table from a pandas frame, typed exactly as the same cells in a CSV file would be.

    ``name`` labels messages and results (``"frame"`` unless given); ``id_column``,
    ``roles`` and ``limits`` mean what they mean for :func:`analysis.table.load_table`. The
    digest is the sha256 of the CSV text, so the same data gives the same cached results,
    and :func:`write_frame` writes that very text to a file the command line can read.

    >>> import pandas as pd
    >>> table = table_from_frame(pd.DataFrame({"v": [3, 4, 5], "e": [3, 4, 5]}))
    >>> table.role("v"), table.column("v").dtype
    ('invariant', 'integer')
    """
    return read_table(frame_bytes(frame, name=name), name, id_column=id_column, roles=roles,
                      limits=limits, format="csv")


def frame_bytes(frame: pd.DataFrame, *, name: str = "frame") -> bytes:
    """The frame as UTF-8 CSV bytes, written as described in the module's docstring."""
    if not isinstance(frame, pd.DataFrame):
        raise TableError(f"{name}: expected a pandas DataFrame, got {type(frame).__name__}.")
    if _has_named_index(frame):
        frame = frame.reset_index()
    columns = [str(column) for column in frame.columns]
    out = io.StringIO(newline="")
    # Every header name quoted: the delimiter then reads as a comma whatever the cells hold.
    csv.writer(out, quoting=csv.QUOTE_ALL, lineterminator="\n").writerow(columns)
    cells = {}
    for position, (column, series) in enumerate(frame.items()):
        key = f"c{position}"
        if series.dtype == object:
            cells[key] = [_cell_text(value, name, row, str(column))
                          for row, value in enumerate(series.tolist(), start=1)]
        else:
            cells[key] = series.to_numpy()
    body = pd.DataFrame(cells, index=pd.RangeIndex(len(frame)))
    body.to_csv(out, header=False, index=False, na_rep="", lineterminator="\n")
    return out.getvalue().encode("utf-8")


def write_frame(frame: pd.DataFrame, path: str | Path, *, name: str | None = None) -> Path:
    """Write the frame as the CSV file whose bytes :func:`table_from_frame` reads, so that a
    study saved beside it re-runs from the command line with the same digest and numbers.

    Refuses to write over an existing file (TableError naming it).
    """
    path = Path(path)
    data = frame_bytes(frame, name=name or path.name)
    try:
        with open(path, "xb") as out:
            out.write(data)
    except FileExistsError:
        raise TableError(f"{path}: a file of this name exists; it is never written over. "
                         "Choose another name.") from None
    except OSError as exc:
        raise TableError(f"{path}: cannot be written ({exc.strerror}).") from None
    return path


def _has_named_index(frame: pd.DataFrame) -> bool:
    return any(level is not None for level in frame.index.names)


def _cell_text(value, name: str, row: int, column: str):
    """One cell of an object column as CSV text (None for a missing cell)."""
    if value is None or value is pd.NA or value is pd.NaT:
        return None
    if isinstance(value, (bool, np.bool_)):
        return bool(value)
    if isinstance(value, float | np.floating):
        return None if math.isnan(value) else float(value)
    if isinstance(value, int | np.integer):
        return str(int(value))
    if isinstance(value, Fraction):
        return fraction_text(value)
    if isinstance(value, Decimal):
        return str(value)
    if isinstance(value, np.ndarray | list | tuple):
        return _array_text(value, name, row, column)
    return str(value)


def _array_text(value, name: str, row: int, column: str) -> str:
    items = value.tolist() if isinstance(value, np.ndarray) else _listed(value)
    try:
        return json.dumps(items, allow_nan=False, separators=(",", ":"))
    except (TypeError, ValueError) as exc:
        raise TableError(
            f"{name}, row {row}, column {column!r}: an array cell must hold numbers (or "
            f"arrays of numbers) only ({exc}). Convert its entries to integers or floats."
        ) from None


def _listed(value):
    if isinstance(value, np.ndarray):
        return value.tolist()
    if isinstance(value, list | tuple):
        return [_listed(v) for v in value]
    if isinstance(value, np.generic):
        return value.item()
    return value


# ----------------------------------------------------------------------------------------
# Results as frames


def _ids(values) -> list:
    return [row_id(v) for v in np.asarray(values, dtype=object).tolist()]


def projection_frame(result) -> pd.DataFrame:
    """row, x, y: every projected row's coordinates."""
    return pd.DataFrame({"row": _ids(result.row_ids),
                         "x": np.asarray(result.x, dtype=np.float64),
                         "y": np.asarray(result.y, dtype=np.float64)})


def clustering_frame(result) -> pd.DataFrame:
    """row, cluster: every clustered row's cluster (-1 for HDBSCAN's noise)."""
    return pd.DataFrame({"row": _ids(result.row_ids),
                         "cluster": np.asarray(result.labels, dtype=np.int64)})


def separator_frame(result) -> pd.DataFrame:
    """row, actual, predicted, and the decision score (0 on the boundary) of every row the
    separator fitted on all rows saw; one score column per class when there are several.
    Empty (with these columns) when the step kept no per-row scores."""
    decision = result.decision
    if decision is None:
        return pd.DataFrame({"row": [], "actual": [], "predicted": [], "score": []})
    frame = pd.DataFrame({"row": _ids(decision.row_ids),
                          "actual": _labels(result, decision.labels),
                          "predicted": _labels(result, decision.predicted)})
    scores = np.asarray(decision.scores, dtype=np.float64)
    if scores.ndim == 1:
        frame["score"] = scores
    else:
        for position, label in enumerate(result.classes[:scores.shape[1]]):
            frame[f"score {label}"] = scores[:, position]
    return frame


def open_predictions_frame(result) -> pd.DataFrame:
    """A separator's predictions for the objects whose target is open, one row each: object,
    prediction, confidence, typical error, known interval (low, high) and whether the
    prediction lies inside it. Predictions to check by hand, not values."""
    rows = [{"object": p["row"], "prediction": p["prediction"],
             "confidence": p["confidence"], "typical_error": p["typical_error"],
             "interval_low": None if p["interval"] is None else p["interval"][0],
             "interval_high": None if p["interval"] is None else p["interval"][1],
             "inside": p["inside"]} for p in result.open_predictions]
    return pd.DataFrame(rows, columns=["object", "prediction", "confidence", "typical_error",
                                       "interval_low", "interval_high", "inside"])


def _labels(result, codes) -> list:
    codes = np.asarray(codes)
    if result.task != "classification":
        return codes.astype(np.float64).tolist()
    classes = list(result.classes)
    return [classes[int(c)] if 0 <= int(c) < len(classes) else None for c in codes.tolist()]


def relations_frame(result) -> pd.DataFrame:
    """One row per statement: what it is, its text, the rows it holds on, how many rows
    attain it (bounds) and how many break it."""
    rows = []
    for kind, items in (("relation", result.relations),
                        ("approximate relation", result.approximate)):
        for relation in items:
            rows.append({"statement": "trivial relation" if relation.trivial else kind,
                         "text": relation.text, "holds_on": relation.holds_on,
                         "attained_by": None, "violations": len(relation.violations)})
    for bound in result.bounds:
        rows.append({"statement": "bound", "text": bound.text, "holds_on": bound.holds_on,
                     "attained_by": bound.attained_count,
                     "violations": len(bound.violations)})
    columns = ["statement", "text", "holds_on", "attained_by", "violations"]
    frame = pd.DataFrame(rows, columns=columns)
    frame["attained_by"] = frame["attained_by"].astype("Int64")
    return frame


def overview_frame(result) -> pd.DataFrame:
    """One row per column: role, type, missing and distinct values, range and mean."""
    return pd.DataFrame([{"column": c.name, "role": c.role, "dtype": c.dtype,
                          "missing": c.missing, "distinct": c.distinct,
                          "min": c.minimum, "max": c.maximum, "mean": c.mean}
                         for c in result.columns],
                        columns=["column", "role", "dtype", "missing", "distinct", "min",
                                 "max", "mean"])
