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
from analysis.frames import table_from_frame, write_frame
from analysis.notebook import run, show
from analysis.settings import Setting
from analysis.steps import make_step, step_class, step_params
from analysis.study import (
    Study,
    add_step,
    default_study,
    load_study,
    new_step,
    run_study,
    save_study,
)
from analysis.table import ColumnInfo, Limits, Table, load_table, read_table

__all__ = [
    "ColumnInfo",
    "Feature",
    "FeatureMatrix",
    "Limits",
    "ScoutError",
    "Setting",
    "StepError",
    "Study",
    "StudyError",
    "Table",
    "TableError",
    "add_step",
    "build_features",
    "canonical_key",
    "default_study",
    "group_keys",
    "load_study",
    "load_table",
    "make_step",
    "new_step",
    "read_table",
    "run",
    "run_study",
    "save_study",
    "show",
    "step_class",
    "step_params",
    "table_from_frame",
    "target_values",
    "write_frame",
]
