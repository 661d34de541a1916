"""The tests' surroundings: compiled code and scratch files go to one temporary folder.

numba's compile cache (UMAP's code) would otherwise go to the user's cache folder, and Dask's
workers leave a scratch folder in the system's temporary folder. Both are pointed here before
anything imports numba or dask, and the folder is removed when the tests end. Processes the
tests start (the app, the command line, a notebook's kernel) inherit the same settings.
"""

from __future__ import annotations

import os
import shutil
import tempfile

_SCRATCH = tempfile.mkdtemp(prefix="invariant-scout-tests-")
os.environ["NUMBA_CACHE_DIR"] = os.path.join(_SCRATCH, "numba")
# read by dask's configuration as "temporary-directory", where workers put their scratch space
os.environ["DASK_TEMPORARY_DIRECTORY"] = os.path.join(_SCRATCH, "dask")


def pytest_unconfigure(config):
    shutil.rmtree(_SCRATCH, ignore_errors=True)


# ----------------------------------------------------------------------------------------
# Small tables that several test files build: one builder each, imported by the test files
# (``from conftest import iris_csv``)


def table_from_frame(frame, name: str):
    """A pandas frame written as CSV text and read by analysis.table, as a user's file is."""
    import io

    from analysis.table import read_table

    buffer = io.StringIO()
    frame.to_csv(buffer, index=False)
    return read_table(buffer.getvalue().encode(), name)


def records_table(records: list[dict], name: str = "t.json"):
    """A list of records written as a JSON file's bytes and read by analysis.table."""
    import json

    from analysis.table import read_table

    return read_table(json.dumps(records).encode(), name)


def iris_frame(*, short_names: bool = False):
    """scikit-learn's iris data (150 flowers, 4 measurements, 3 species; the
    sklearn.datasets.load_iris documentation): an id column ``flower`` (F000 to F149), the
    measurements, and ``species`` by name. ``short_names`` writes ``sepal_length`` and so on
    for scikit-learn's ``sepal length (cm)``."""
    from sklearn.datasets import load_iris

    data = load_iris(as_frame=True)
    frame = data.frame.drop(columns="target")
    if short_names:
        frame.columns = IRIS_MEASUREMENTS
    frame.insert(0, "flower", [f"F{i:03d}" for i in range(len(frame))])
    frame["species"] = [str(data.target_names[t]) for t in data.target]
    return frame


IRIS_MEASUREMENTS = ["sepal_length", "sepal_width", "petal_length", "petal_width"]


def iris_csv() -> bytes:
    """The iris frame of :func:`iris_frame` (scikit-learn's names) as the bytes of a CSV file."""
    return iris_frame().to_csv(index=False).encode()


def write_parts(frame, folder, parts: int = 4):
    """The frame as a folder of Parquet files (rows in order, split into ``parts``) and as one
    Parquet file beside it; returns (folder, file)."""
    import numpy as np

    folder.mkdir(parents=True, exist_ok=True)
    for k, rows in enumerate(np.array_split(np.arange(len(frame)), parts)):
        frame.iloc[rows].to_parquet(folder / f"part{k:02d}.parquet", index=False)
    whole = folder.with_suffix(".parquet")
    frame.to_parquet(whole, index=False)
    return folder, whole
