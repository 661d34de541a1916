"""Feature blocks built partition by partition, with the names and values of the in-memory ones.

:func:`feature_plan` decides once, from the whole table's column facts, which features there
are (one-hot levels over the whole table); :func:`partition_features` builds one block.
Arrays, big integers and rationals are not encoded on this engine (said, by column).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from analysis.errors import StepError
from analysis.features import (
    Feature,
    category_levels,
    chosen_feature_columns,
    fill_cells,
    invariant_feature,
    left_out_warning,
    level_features,
    one_hot,
    signed_log,
    without_mostly_empty,
)
from analysis.notes import Note
from analysis.table import Table

# Keep feature blocks in cluster memory when they take at most this share of it.
PERSIST_SHARE = 0.4


@dataclass(frozen=True)
class FeaturePlan:
    """Which features a partition gets, and how: one entry per feature."""

    features: tuple[Feature, ...]
    columns: tuple[str, ...]
    target: str | None
    numeric_target: bool
    missing: str
    log_columns: tuple[str, ...]
    levels: dict
    fill: dict
    notes: tuple[str, ...]
    id_column: str | None
    warnings: tuple[str, ...] = ()         # the mostly-empty columns left out, said so
    infos: tuple = ()                      # the feature and target columns' descriptions

    @property
    def names(self) -> list[str]:
        return [f.name for f in self.features]


@dataclass
class Block:
    """One partition's features: kept rows only."""

    values: np.ndarray          # float64 (m, p)
    positions: np.ndarray       # int64 global positions of the kept rows
    row_ids: np.ndarray         # ids of the kept rows
    target: np.ndarray | None   # target values of the kept rows
    dropped_features: int = 0   # rows dropped for a missing feature
    dropped_target: int = 0     # rows dropped for a missing target
    infinite: int = 0           # rows with an infinite feature value
    filled: int = 0             # cells filled (missing="impute")
    rows: int = 0               # rows in the partition before dropping


def feature_plan(table, *, columns: list[str] | None = None, target: str | None = None,
                 array_encoding: str = "invariant", log_scale: str = "auto",
                 missing: str = "drop", exclude: tuple[str, ...] = ()) -> FeaturePlan:
    """The features of a partitioned table, checked as build_features checks them (the fills
    of ``missing="impute"`` are added by :func:`analysis.distributed.common.plan_for`)."""
    chosen_by_default = columns is None
    columns = chosen_feature_columns(table, columns=columns, target=target, exclude=exclude,
                                     array_encoding=array_encoding, log_scale=log_scale,
                                     missing=missing)
    notes, warnings = [], []
    if chosen_by_default:
        # the in-memory rule: a mostly-empty column is left out before rows are dropped
        columns, left_out = without_mostly_empty(table, columns)
        if left_out:
            warnings.append(left_out_warning(left_out))
        # columns this engine cannot encode are left out of the default features, said so;
        # named ones are refused by name
        unencoded = [n for n in columns if table.column(n).role == "array"
                     or table.column(n).dtype in ("array", "big integer", "rational")]
        if unencoded and len(unencoded) < len(columns):
            columns = [n for n in columns if n not in unencoded]
            notes.append(Note("dask_unencoded", "left out of the features on the dask engine, "
                              "which does not encode arrays, big integers or rationals yet: "
                              f"{', '.join(unencoded)}; the in-memory engine uses them.",
                              columns=tuple(unencoded)))
    features, levels = [], {}
    for name in columns:
        features.extend(_column_features(table, name, log_scale, levels))
    numeric_target = False
    if target is not None:
        info = table.column(target)
        if info.role == "array":
            raise StepError(f"{table.name}: the array column {target!r} cannot be a target.")
        numeric_target = info.role == "invariant" and info.dtype in ("integer", "real")
    return FeaturePlan(features=tuple(features), columns=tuple(columns), target=target,
                       numeric_target=numeric_target, missing=missing,
                       log_columns=tuple(f.column for f in features if f.kind == "log"),
                       levels=levels, fill={}, notes=tuple(notes), id_column=table.id_column,
                       warnings=tuple(warnings), infos=tuple(
                           table.column(n) for n in [*columns, *([target] if target else [])]))


def _column_features(table, name: str, log_scale: str, levels: dict) -> list[Feature]:
    """The features of one column, as build_features names them (one-hot ``levels`` kept)."""
    info = table.column(name)
    if info.role == "array" or info.dtype in ("array", "big integer", "rational"):
        what = "arrays" if info.role == "array" or info.dtype == "array" else f"{info.dtype}s"
        raise StepError(f"{table.name}: column {name!r} holds {what}, which the dask engine "
                        "does not encode as features yet. Leave it out with --features, or "
                        "use --engine local.")
    if info.role == "invariant":
        return [invariant_feature(name, log=log_scale == "always")]
    if info.role == "flag":
        if info.dtype != "boolean":
            raise StepError(f"{table.name}: flag column {name!r} holds {info.dtype} values; "
                            "on the dask engine a flag is a true/false column.")
        return [Feature(name, name, "flag")]
    if info.role != "category":
        raise StepError(f"{table.name}: column {name!r} with role {info.role} is not a "
                        "feature.")
    levels[name] = _levels(table, name)
    return level_features(table.name, name, levels[name])


def _levels(table, name: str) -> list[str]:
    facts = table.facts.get(name, {})
    counts, values = facts.get("counts"), facts.get("values")   # texts, or distinct numbers
    if counts is not None or values is not None:
        return category_levels(counts if counts is not None else values.tolist())
    info = table.column(name)
    return [str(k) for k in range(info.distinct)]   # only its length is used: too many


def partition_features(frame: pd.DataFrame, offset: int, plan: FeaturePlan) -> Block:
    """One partition's features (rows with a missing value dropped, or filled, per the plan)."""
    n = len(frame)
    part = Table(name="", digest="", frame=frame, columns=plan.infos)   # numbers as in memory
    blocks = []
    for name in plan.columns:
        series = frame[name]
        if name in plan.levels:   # the levels are those of the whole table
            blocks.append(one_hot(series.astype(object).where(series.notna(), None).tolist(),
                                  plan.levels[name]))
            continue
        blocks.append((signed_log(part.numeric(name).tolist()) if name in plan.log_columns
                       else part.numeric(name))[:, None])
    values = np.column_stack(blocks) if blocks else np.empty((n, 0))
    positions = np.arange(offset, offset + n, dtype=np.int64)
    ids = frame[plan.id_column].to_numpy() if plan.id_column else positions
    target = None
    target_missing = np.zeros(n, dtype=bool)
    if plan.target is not None:
        series = frame[plan.target]
        if plan.numeric_target:
            target = part.numeric(plan.target)
            target_missing = ~np.isfinite(target)
        else:
            target = series.to_numpy(dtype=object)
            target_missing = series.isna().to_numpy()
    bad = ~np.isfinite(values)
    infinite = int(np.isinf(values).any(axis=1).sum())
    feature_missing = bad.any(axis=1)
    out = Block(values=values, positions=positions, row_ids=ids, target=target, rows=n,
                infinite=infinite)
    if plan.missing == "keep" or not (feature_missing.any() or target_missing.any()):
        return out   # "keep": missing cells stay NaN (for medians)
    if plan.missing == "drop":
        keep = ~(feature_missing | target_missing)
        out.dropped_features = int(feature_missing.sum())
        out.dropped_target = int(target_missing.sum())
    else:
        out.filled = fill_cells(values, bad, plan.features, plan.fill)
        keep = ~target_missing
        out.dropped_target = int(target_missing.sum())
    out.values = values[keep]
    out.positions = positions[keep]
    out.row_ids = ids[keep]
    out.target = None if target is None else target[keep]
    return out


def feature_said(plan: FeaturePlan, counts: dict, n_rows: int) -> tuple[list, tuple]:
    """(notes, warnings) that build_features writes, from counts summed over partitions."""
    from analysis.features import missing_said

    if not (counts["dropped_features"] or counts["dropped_target"] or counts["filled"]):
        return list(plan.notes), plan.warnings
    said, warned = missing_said(plan.missing, n_rows, infinite=counts["infinite"],
                                dropped=counts["rows"] - counts["kept"],
                                in_features=counts["dropped_features"],
                                in_target=counts["dropped_target"], filled=counts["filled"])
    return list(plan.notes) + said, plan.warnings + tuple(warned)


def block_counts(block: Block) -> dict:
    """The row counts of one block, to be summed over partitions."""
    return {"rows": block.rows, "kept": len(block.positions),
            "dropped_features": block.dropped_features,
            "dropped_target": block.dropped_target, "infinite": block.infinite,
            "filled": block.filled}


def add_counts(a: dict, b: dict) -> dict:
    return {k: a[k] + b[k] for k in a}


def feature_blocks(table, plan: FeaturePlan, client, *, persist: bool | None = None) -> list:
    """One dask object per partition holding its :class:`Block`.

    With ``persist`` (default: when the blocks fit in PERSIST_SHARE of the cluster's memory)
    the blocks are computed once and kept on the workers as futures, so later passes do not
    read the files again; otherwise each pass recomputes them from the files.
    """
    from dask import delayed

    parts = table.typed_partitions(list(plan.columns) + ([plan.target] if plan.target else []))
    offsets = table.offsets
    blocks = [delayed(partition_features)(part, int(offsets[k]), plan)
              for k, part in enumerate(parts)]
    if persist is None:
        persist = _fits(table.n_rows * (len(plan.features) + 3) * 8, client)
    if persist:
        return client.persist(blocks)
    return blocks


def _fits(nbytes: int, client) -> bool:
    from analysis.distributed.cluster import workers_of

    memory = sum(w.get("memory_limit", 0) or 0 for w in workers_of(client).values())
    return memory > 0 and nbytes <= PERSIST_SHARE * memory


__all__ = ["Block", "FeaturePlan", "add_counts", "block_counts", "feature_blocks",
           "feature_plan", "feature_said", "partition_features"]
