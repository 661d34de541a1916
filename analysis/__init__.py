"""Invariant Scout's analysis backend: tables, features, steps, studies and reports.

Pure Python; never imports streamlit. Heavy libraries (scikit-learn, UMAP, dask) are imported
by the modules that need them, when they are first used.
"""

from analysis.errors import ScoutError, StepError, StudyError, TableError
from analysis.features import (
    Feature,
    FeatureMatrix,
    build_features,
    canonical_key,
    group_keys,
    target_values,
)
from analysis.steps import make_step, step_class, step_params
from analysis.table import ColumnInfo, Limits, Table, load_table, read_table

__all__ = [
    "ColumnInfo",
    "Feature",
    "FeatureMatrix",
    "Limits",
    "ScoutError",
    "StepError",
    "StudyError",
    "Table",
    "TableError",
    "build_features",
    "canonical_key",
    "group_keys",
    "load_table",
    "make_step",
    "read_table",
    "step_class",
    "step_params",
    "target_values",
]
