"""The relations step on Dask: candidates from a few rows, everything checked on every row.

1. The in-memory search runs on a uniform sample; its relations span a lattice.
2. One pass tests that lattice on every row (keeping a few breaking rows that span every way
   it is broken) and gathers the candidates for corners of each pair's and triple's hull.
3. The search runs again on the sample with those rows: the relations and sharp bounds of
   the whole table.
4. A last pass counts on every row the rows breaking, attaining or near each statement.
5. Congruences are proposed on the sample one modulus at a time and counted on every row.
"""

from __future__ import annotations

import dataclasses
import math
from fractions import Fraction
from itertools import combinations

import numpy as np

from analysis.distributed.common import Context, Settings, partition_tasks, tree
from analysis.errors import StepError
from analysis.notes import Note

SAMPLE_ROWS = 20_000
# Distinct points of a triple counted exactly (past this, the triple counts as crowded).
DISTINCT_POINTS_CAP = 250_000
# Pairs and triples whose values span at most this many cells are handled on a grid.
GRID_CELLS = 4_000_000
_INT64_SAFE = 2**62


def run_relations(step, ctx: Context, *, leave_out: bool = False):
    """A RelationsResult for ``step`` on the partitioned table in ``ctx``; ``leave_out``:
    columns of big integers or rationals named in ``step`` are left out (said so), not
    refused."""

    from analysis import relations as rel
    from analysis.distributed.source import sample_table

    table = ctx.table
    rel.check_settings(max_breakers=step.max_breakers, max_coefficient=step.max_coefficient,
                        tolerance=step.tolerance, seed=step.seed)
    names = step.chosen_columns(table)
    if not names:
        raise StepError(f"relations: table '{table.name}' has no numeric invariant columns to "
                        "search; mark some columns as invariants")
    unsearched = [n for n in names if table.column(n).dtype in ("big integer", "rational")]
    if unsearched and step.columns is not None and not leave_out:
        name = unsearched[0]
        raise StepError(f"relations: column '{name}' holds {table.column(name).dtype}s, which "
                        "the dask engine does not search; leave it out with --columns, or use "
                        "--engine local.")
    if unsearched:
        names = [n for n in names if n not in unsearched]
        if not names:
            raise StepError(f"relations: the numeric columns of table '{table.name}' hold big "
                            "integers or rationals, which the dask engine does not search; use "
                            "--engine local.")
        ctx.notes.append(Note(
            "dask_unsearched",
            "left out on the dask engine, which does not search big integers or "
            f"rationals: {', '.join(unsearched)}; the in-memory engine searches "
            "them."))
        step = dataclasses.replace(step, columns=names)
    exact = [n for n in names if table.column(n).dtype in ("integer", "boolean")]
    real = [n for n in names if table.column(n).dtype == "real"]
    sample, positions = sample_table(table, ctx.client, SAMPLE_ROWS, seed=step.seed,
                                     columns=names)
    first = step.run(sample)
    generators = [_vector(r, exact) for r in first.relations if r.exact and not r.violations]
    generators = [g for g in generators if g is not None]
    pair_columns, triple_columns = _bound_candidates(table, exact)
    spec = Settings(exact=exact, generators=generators, pairs=pair_columns,
                    triples=triple_columns, ranges=_ranges(table, exact))
    found = ctx.compute(tree(partition_tasks(ctx, _pass_a, names, spec), _merge_a))
    wanted = _wanted_points(found, spec)
    extra_positions = np.array(sorted(found["breakers"]), dtype=np.int64)
    located = ctx.compute(partition_tasks(ctx, _locate, names, spec, wanted, extra_positions))
    frame, all_positions = _candidate_rows(sample, positions, located, names, table)
    from analysis.distributed.source import as_table

    candidates = as_table(table, frame, all_positions)
    # the rows searched rank bounds by their own counts: keep them all, rank them again
    # by the counts on every row, then cut as the in-memory step does
    second = step.run(candidates, max_bounds=None)
    ctx.notes.append(Note("dask_relations_sample",
        f"relations and bounds searched on {len(all_positions)} rows: a uniform random sample "
        f"of {len(positions)} rows, {len(extra_positions)} rows breaking relations of the "
        f"sample, and the rows at the corners of every hull; then checked on all "
        f"{table.n_rows} rows across {table.npartitions} partitions."))
    settled = _settle(ctx, step, first, second, exact, real, found, spec)
    return dataclasses.replace(settled, congruences=_congruences(ctx, step, sample, settled))


# ----------------------------------------------------------------------------------------
# Pass A: test the sample's lattice, gather extremes and hull corners


def _vector(relation, names: list[str]):
    """The relation as integers over ``names`` and a last entry for the constant, or None."""
    index = {n: j for j, n in enumerate(names)}
    if any(name not in index for name, _ in relation.terms):
        return None
    scale = math.lcm(*(Fraction(c).denominator for _, c in relation.terms),
                     Fraction(relation.constant).denominator)
    vector = [0] * (len(names) + 1)
    for name, coef in relation.terms:
        vector[index[name]] = int(Fraction(coef) * scale)
    vector[-1] = -int(Fraction(relation.constant) * scale)
    return vector


def _ranges(table, names):
    out = {}
    for name in names:
        facts = table.facts.get(name, {})
        lo, hi = facts.get("minimum"), facts.get("maximum")
        if table.column(name).dtype == "boolean":
            lo, hi = 0, 1
        out[name] = (None if lo is None else int(lo), None if hi is None else int(hi))
    return out


def _bound_candidates(table, exact):
    from analysis import relations as rel

    wide = [n for n in exact if table.column(n).distinct >= 3]
    pairs = wide[: rel.MAX_BOUND_COLUMNS + 10]
    triples = [n for n in pairs if not table.column(n).missing][: rel.MAX_TRIPLE_COLUMNS + 4]
    return pairs, triples


def _exact_matrix(frame, names):
    """(int64 values, missing mask) of the exact columns of one typed partition."""
    n = len(frame)
    values = np.zeros((n, len(names)), dtype=np.int64)
    missing = np.zeros((n, len(names)), dtype=bool)
    for j, name in enumerate(names):
        series = frame[name]
        if series.dtype == object:
            present = series.notna().to_numpy()
            values[present, j] = [int(bool(v)) if isinstance(v, (bool, np.bool_)) else int(v)
                                  for v in series[present]]
            missing[:, j] = ~present
        else:
            column = series.to_numpy(dtype=np.float64, na_value=np.nan) \
                if series.dtype.kind == "f" else series.to_numpy()
            if series.dtype.kind == "f":
                bad = np.isnan(column)
                missing[:, j] = bad
                values[~bad, j] = column[~bad].astype(np.int64)
            else:
                values[:, j] = column.astype(np.int64)
    return values, missing


def _projection(values: np.ndarray, generators: list) -> np.ndarray:
    """Rows times generators (with the constant column), exactly."""
    if not generators:
        return np.zeros((len(values), 0), dtype=np.int64)
    matrix = np.array(generators, dtype=object)
    bound = (np.abs(values).max(initial=0) + 1) * max(sum(abs(int(x)) for x in g)
                                                      for g in generators)
    augmented = np.hstack([values, np.ones((len(values), 1), dtype=np.int64)])
    if bound < _INT64_SAFE:
        return augmented @ np.array(generators, dtype=np.int64).T
    return augmented.astype(object).dot(matrix.T)


def _present_rows(missing: np.ndarray, vector: list[int]) -> np.ndarray:
    """Rows where every column of a relation (its nonzero coefficients) has a value: a
    relation counts only those, as in memory."""
    support = [j for j, c in enumerate(vector[:-1]) if c]
    return ~missing[:, support].any(axis=1) if support else np.ones(len(missing), dtype=bool)


def _masked_projection(values: np.ndarray, missing: np.ndarray, vectors: list) -> np.ndarray:
    """Rows times relations, zero where one of a relation's columns is missing."""
    projected = _projection(values, vectors)
    for j, vector in enumerate(vectors):
        projected[~_present_rows(missing, vector), j] = 0
    return projected


def _pass_a(frame, offset: int, spec: Settings) -> dict:
    values, missing = _exact_matrix(frame, spec.exact)
    used = ~missing.any(axis=1)
    positions = np.arange(offset, offset + len(frame), dtype=np.int64)
    out: dict = {"used": int(used.sum()), "breakers": {}}
    projected = _masked_projection(values, missing, spec.generators)
    if projected.shape[1]:
        broken = (projected != 0).any(axis=1)
        rows = np.flatnonzero(broken)
        if len(rows):
            distinct, first = np.unique(projected[rows].astype(object) if projected.dtype ==
                                        object else projected[rows], axis=0, return_index=True)
            chosen = _independent([list(map(int, v)) for v in distinct], len(spec.generators))
            for i in chosen:
                out["breakers"][int(positions[rows[first[i]]])] = [int(x) for x in distinct[i]]
    index = {n: j for j, n in enumerate(spec.exact)}
    columns = {n: np.ascontiguousarray(values[:, index[n]]) for n in set(spec.pairs)}
    absent = {n: missing[:, index[n]] for n in set(spec.pairs)}
    pairs = {}
    for a, b in combinations(spec.pairs, 2):
        x, y = columns[a], columns[b]
        gone = absent[a] | absent[b]
        if gone.any():
            x, y = x[~gone], y[~gone]
        pairs[(a, b)] = _column_extremes(x, y, spec.ranges[a], spec.ranges[b])
    out["pairs"] = pairs
    triples = {}
    for combo in combinations(spec.triples, 3):
        columns = [index[c] for c in combo]
        lows = np.array([spec.ranges[c][0] for c in combo], dtype=np.int64)
        widths = np.array([spec.ranges[c][1] - spec.ranges[c][0] + 1 for c in combo],
                          dtype=np.int64)
        triples[combo] = _triple_corners(values[:, columns], lows, widths)
    out["triples"] = triples
    return out


def _column_extremes(x: np.ndarray, y: np.ndarray, x_range, y_range):
    """For each distinct x: least and greatest y (as three aligned arrays)."""
    if len(x) == 0:
        return np.zeros(0, np.int64), np.zeros(0, np.int64), np.zeros(0, np.int64)
    wx, wy = x_range[1] - x_range[0] + 1, y_range[1] - y_range[0] + 1
    if wx * wy <= GRID_CELLS:
        # a grid of the pairs present: linear in the rows, no sorting
        grid = np.zeros(wx * wy, dtype=bool)
        grid[(x - x_range[0]) * wy + (y - y_range[0])] = True
        grid = grid.reshape(wx, wy)
        has = grid.any(axis=1)
        low = grid.argmax(axis=1)
        high = wy - 1 - grid[:, ::-1].argmax(axis=1)
        xs = np.flatnonzero(has)
        return xs + x_range[0], low[has] + y_range[0], high[has] + y_range[0]
    order = np.lexsort((y, x))
    xs, ys = x[order], y[order]
    starts = np.flatnonzero(np.r_[True, xs[1:] != xs[:-1]])
    ends = np.r_[starts[1:], len(xs)] - 1
    return xs[starts], ys[starts], ys[ends]


def _merge_extremes(a, b):
    x = np.concatenate([a[0], b[0]])
    low = np.concatenate([a[1], b[1]])
    high = np.concatenate([a[2], b[2]])
    if len(x) == 0:
        return a
    keys, inverse = np.unique(x, return_inverse=True)
    lows = np.full(len(keys), np.iinfo(np.int64).max)
    highs = np.full(len(keys), np.iinfo(np.int64).min)
    np.minimum.at(lows, inverse, low)
    np.maximum.at(highs, inverse, high)
    return keys, lows, highs


def _triple_corners(points: np.ndarray, lows: np.ndarray, widths: np.ndarray):
    """Corner candidates of a triple's hull, and its distinct points as sorted int64 keys (or
    None when the columns are too wide for one key)."""
    if len(points) == 0:
        return np.zeros((0, 3), np.int64), np.zeros(0, dtype=np.int64)
    cells = int(np.prod(widths.astype(object)))
    if cells <= GRID_CELLS:
        grid = np.zeros(cells, dtype=bool)
        grid[_keys(points, lows, widths)] = True
        keys = np.flatnonzero(grid)
        cube = grid.reshape(tuple(int(w) for w in widths))
        # over each (x, y) only the least and greatest z can be a corner
        has = cube.any(axis=2)
        xs, ys = np.nonzero(has)
        low = cube.argmax(axis=2)[has]
        high = int(widths[2]) - 1 - cube[:, :, ::-1].argmax(axis=2)[has]
        other = high != low
        candidates = np.concatenate([np.column_stack([xs, ys, low]),
                                     np.column_stack([xs[other], ys[other], high[other]])])
        return _hull_corners(candidates + lows), \
            keys if len(keys) <= DISTINCT_POINTS_CAP else None
    unique = np.unique(points, axis=0)
    keys = _keys(unique, lows, widths)
    if keys is not None and len(keys) > DISTINCT_POINTS_CAP:
        keys = None
    return _hull_corners(unique), keys


def _hull_corners(unique: np.ndarray) -> np.ndarray:
    """The vertices of the hull of distinct points (all of them when the hull is flat)."""
    if len(unique) < 5:
        return unique
    from scipy.spatial import ConvexHull, QhullError

    try:
        hull = ConvexHull(unique.astype(np.float64))
    except QhullError:
        # a flat triple has no bounds in three columns (its plane is a relation)
        return unique[:0]
    return unique[np.sort(hull.vertices)]


def _merge_a(a: dict, b: dict) -> dict:
    from analysis.relations import RankTracker

    breakers = dict(a["breakers"])
    tracker = RankTracker()
    for vector in breakers.values():
        tracker.add(vector)
    for position, vector in sorted(b["breakers"].items()):
        if tracker.add(vector):
            breakers[position] = vector
    pairs = {k: _merge_extremes(a["pairs"][k], b["pairs"][k]) for k in a["pairs"]}
    triples = {}
    for k in a["triples"]:
        corners = np.unique(np.vstack([a["triples"][k][0], b["triples"][k][0]]), axis=0)
        keys_a, keys_b = a["triples"][k][1], b["triples"][k][1]
        keys = None
        if keys_a is not None and keys_b is not None:
            joined = np.concatenate([keys_a, keys_b])
            top = int(joined.max(initial=-1)) + 1
            if top <= GRID_CELLS:
                grid = np.zeros(top, dtype=bool)
                grid[joined] = True
                keys = np.flatnonzero(grid)
            else:
                keys = np.union1d(keys_a, keys_b)
            if len(keys) > DISTINCT_POINTS_CAP:
                keys = None
        triples[k] = (_hull_corners(corners), keys)
    return {"used": a["used"] + b["used"], "breakers": breakers, "pairs": pairs,
            "triples": triples}


def _independent(vectors: list[list[int]], rank: int) -> list[int]:
    """Indices of a greedy maximal linearly independent subset of vectors of rank at most
    ``rank`` (exact)."""
    from analysis.relations import RankTracker

    tracker = RankTracker()
    chosen = []
    for index, vector in enumerate(vectors):
        if len(chosen) == rank:
            break  # the span is full: no later vector adds to it
        if tracker.add(vector):
            chosen.append(index)
    return chosen


def _wanted_points(found: dict, spec: Settings) -> dict:
    """{columns tuple: set of value tuples} whose rows the second search needs."""
    from analysis.relations import hull_2d

    wanted: dict = {}
    for (a, b), (x, low, high) in found["pairs"].items():
        points = [(int(p), int(q)) for p, q in zip(x, low)] + \
                 [(int(p), int(q)) for p, q in zip(x, high)]
        wanted[(a, b)] = np.array(hull_2d(points), dtype=np.int64).reshape(-1, 2)
    for combo, (corners, _) in found["triples"].items():
        wanted[combo] = np.asarray(corners, dtype=np.int64).reshape(-1, 3)
    for name in spec.exact:
        lo, hi = spec.ranges[name]
        if lo is not None:
            wanted[(name,)] = np.array([[lo], [hi]], dtype=np.int64)
    # numpy arrays, so that dask does not walk through them as collections
    return wanted


def _locate(frame, offset: int, spec: Settings, wanted: dict, positions: np.ndarray):
    """Rows of one partition at the wanted points (first per point) and at ``positions``."""
    values, missing = _exact_matrix(frame, spec.exact)
    index = {n: j for j, n in enumerate(spec.exact)}
    picked: set[int] = set()
    for columns, points in wanted.items():
        if not len(points):
            continue
        cols = [index[c] for c in columns]
        gone = missing[:, cols].any(axis=1)
        rows = np.flatnonzero(~gone) if gone.any() else None
        block = values[:, cols] if rows is None else values[rows][:, cols]
        lows = np.array([spec.ranges[c][0] for c in columns], dtype=np.int64)
        widths = np.array([spec.ranges[c][1] - spec.ranges[c][0] + 1 for c in columns],
                          dtype=np.int64)
        row_keys = _keys(block, lows, widths)
        point_keys = _keys(points, lows, widths)
        if row_keys is None or point_keys is None:
            continue   # too wide for one key; these columns have no bounds worth a row
        cells = int(np.prod(widths.astype(object)))
        if cells <= GRID_CELLS:
            wanted_cells = np.zeros(cells, dtype=bool)
            wanted_cells[point_keys] = True
            hit = np.flatnonzero(wanted_cells[row_keys])
        else:
            hit = np.flatnonzero(np.isin(row_keys, point_keys))
        _, first = np.unique(row_keys[hit], return_index=True)
        found = hit[first] if rows is None else rows[hit[first]]
        picked.update(found.tolist())
    inside = positions[(positions >= offset) & (positions < offset + len(frame))] - offset
    picked.update(inside.tolist())
    chosen = np.array(sorted(picked), dtype=np.int64)
    return frame.iloc[chosen].reset_index(drop=True), chosen + offset


def _keys(points: np.ndarray, lows: np.ndarray, widths: np.ndarray):
    """One int64 per point (mixed radix over the columns' ranges), or None if too wide."""
    if float(np.prod(widths.astype(np.float64))) >= 2**62:
        return None
    key = np.zeros(len(points), dtype=np.int64)
    for j in range(points.shape[1]):
        key = key * widths[j] + (points[:, j] - lows[j])
    return key


def _candidate_rows(sample, positions, located, names, table):
    import pandas as pd

    keep = [n for n in sample.frame.columns if n in names or n == table.id_column]
    frames = [sample.frame[keep]] + [f[keep] for f, _ in located if len(f)]
    all_positions = np.concatenate([positions] + [p for _, p in located if len(p)])
    frame = pd.concat(frames, ignore_index=True)
    order = np.argsort(all_positions, kind="stable")
    all_positions = all_positions[order]
    frame = frame.iloc[order].reset_index(drop=True)
    first = np.r_[True, all_positions[1:] != all_positions[:-1]]
    return frame[first].reset_index(drop=True), all_positions[first]


# ----------------------------------------------------------------------------------------
# Pass B: counts on every row


# Pass B's settings: exact and real column names; relations (integer vectors over the exact
# columns and the constant); bounds (integer coefs, columns, limit K of sum <= K, near limit);
# approximate relations (names, float coefs, constant); tolerance; cap (breaking row ids kept
# per list); listed (attaining row ids kept per bound).


def _pass_b(frame, offset: int, spec: Settings, id_column):
    from analysis.relations import approximately_off

    values, missing = _exact_matrix(frame, spec.exact)
    ids = frame[id_column].to_numpy() if id_column else \
        np.arange(offset, offset + len(frame), dtype=np.int64)
    out = {"relations": [], "bounds": [], "approximate": []}
    projected = _masked_projection(values, missing, spec.relations)
    for j, vector in enumerate(spec.relations):
        bad = np.flatnonzero(np.asarray(projected[:, j] != 0, dtype=bool))
        present = int(_present_rows(missing, vector).sum())
        out["relations"].append((len(bad), ids[bad[: spec.cap]], present))
    index = {n: i for i, n in enumerate(spec.exact)}
    for coefs, columns, limit, near_limit in spec.bounds:
        cols = [index[c] for c in columns]
        gone = missing[:, cols].any(axis=1)
        lhs = _combine(values[:, cols], coefs)
        these = ids
        present = ~gone
        if gone.any():
            lhs, these = lhs[present], ids[present]
        attained = np.flatnonzero(lhs == limit)
        broken = np.flatnonzero(lhs > limit)
        slack = limit - lhs
        near = int(np.count_nonzero((slack > 0) & (slack <= near_limit)))
        out["bounds"].append({"present": int(present.sum()), "attained": len(attained),
                              "attained_ids": these[attained[: spec.listed]],
                              "near": near, "broken": len(broken),
                              "broken_ids": these[broken[: spec.cap]]})
    if spec.approximate:
        reals = np.column_stack([frame[n].to_numpy(dtype=np.float64, na_value=np.nan)
                                 for n in spec.real]) if spec.real else np.zeros((len(frame), 0))
    for names, coefs, constant in spec.approximate:
        columns = []
        for name in names:
            if name in index:
                column = values[:, index[name]].astype(np.float64)
                column[missing[:, index[name]]] = np.nan
            else:
                column = reals[:, spec.real.index(name)]
            columns.append(column)
        data = np.column_stack(columns + [np.ones(len(frame))])
        finite = np.isfinite(data).all(axis=1)
        full = np.append(np.asarray(coefs, dtype=float), -constant)
        off = np.flatnonzero(approximately_off(data[finite], full, spec.tolerance))
        out["approximate"].append((int(finite.sum()), len(off), ids[finite][off[: spec.cap]]))
    return out


def _combine(values: np.ndarray, coefs: list[int]) -> np.ndarray:
    bound = sum(abs(c) for c in coefs) * (int(np.abs(values).max(initial=0)) + 1)
    if bound < _INT64_SAFE:
        return values @ np.array(coefs, dtype=np.int64)
    return values.astype(object).dot(np.array(coefs, dtype=object))


def _merge_b(a: dict, b: dict, cap: int, listed: int) -> dict:
    out = {"relations": [], "bounds": [], "approximate": []}
    for (ca, ia, pa), (cb, ib, pb) in zip(a["relations"], b["relations"]):
        out["relations"].append((ca + cb, np.concatenate([ia, ib])[:cap], pa + pb))
    for x, y in zip(a["bounds"], b["bounds"]):
        out["bounds"].append({
            "present": x["present"] + y["present"], "attained": x["attained"] + y["attained"],
            "attained_ids": np.concatenate([x["attained_ids"], y["attained_ids"]])[:listed],
            "near": x["near"] + y["near"], "broken": x["broken"] + y["broken"],
            "broken_ids": np.concatenate([x["broken_ids"], y["broken_ids"]])[:cap]})
    for (pa, ca, ia), (pb, cb, ib) in zip(a["approximate"], b["approximate"]):
        out["approximate"].append((pa + pb, ca + cb, np.concatenate([ia, ib])[:cap]))
    return out


def _bound_spec(bound) -> tuple:
    """(integer coefs, columns, limit, near limit) of ``sum <= limit`` form of a bound."""
    sign = 1 if bound.relation == "<=" else -1
    coefs = [Fraction(c) * sign for _, c in bound.terms]
    constant = Fraction(bound.constant) * sign
    margin = Fraction(bound.near_margin)
    scale = math.lcm(*(c.denominator for c in coefs), constant.denominator)
    ints = [int(c * scale) for c in coefs]
    limit = int(constant * scale)
    return ints, [name for name, _ in bound.terms], limit, math.floor(margin * scale)


def _settle(ctx: Context, step, first, second, exact, real, found: dict, spec: Settings):

    from analysis import relations as rel

    table = ctx.table
    # as in memory, a share of breakers is a share of every row of the table, not only of
    # the rows where all the searched columns are present
    allowed = rel.breakers_allowed(step.max_breakers, table.n_rows) if step.robust else 0
    every = [r for r in second.relations if r.exact and not r.violations]
    every_vectors = [_vector(r, exact) for r in every]
    # relations broken by a few rows: those of both searches, and relations of the sample
    # that other rows break
    known = {tuple(v) for v in every_vectors if v is not None}
    candidates = []
    for relation in [*second.relations, *first.relations]:
        vector = _vector(relation, exact)
        if not relation.exact or vector is None or tuple(vector) in known:
            continue
        known.add(tuple(vector))
        candidates.append((relation, vector))
    approximate = list(second.approximate)
    b_spec = Settings(
        exact=exact, real=real,
        relations=[v for v in every_vectors if v is not None] + [v for _, v in candidates],
        bounds=[_bound_spec(b) for b in second.bounds],
        approximate=[([n for n, _ in r.terms], [float(c) for _, c in r.terms],
                      float(r.constant)) for r in approximate],
        tolerance=float(step.tolerance), cap=max(allowed, 0) + 1, listed=rel.MAX_LISTED_ROWS,
    )
    cap, listed = b_spec.cap, b_spec.listed
    counts = ctx.compute(tree(partition_tasks(ctx, _pass_b, exact + real, b_spec,
                                              table.id_column),
                              lambda a, b: _merge_b(a, b, cap, listed)))
    notes = list(second.notes)
    checked = len([v for v in every_vectors if v is not None])
    every_counts = counts["relations"][:checked]
    broken = [r.text for r, (count, _, _) in zip(every, every_counts) if count]
    if broken:
        # cannot happen when the breaking rows were gathered; say so rather than hide it
        notes.append(Note(
            "dask_relations_broken",
            "relations of the rows searched that other rows break, left out: "
            + "; ".join(broken)))
    settled_every = [dataclasses.replace(r, holds_on=present)
                     for r, (count, _, present) in zip(every, every_counts) if not count]
    tracker = rel.RankTracker()
    for v in every_vectors:
        if v is not None:
            tracker.add(v)
    ranked = sorted(zip(candidates, counts["relations"][checked:]),
                    key=lambda item: rel.robust_rank(item[1][0], item[0][1]))
    robust = []
    for (relation, vector), (count, ids, present) in ranked:
        if not 0 < count <= allowed or not tracker.add(vector):
            continue
        robust.append(dataclasses.replace(
            relation, holds_on=present - count, violations=tuple(ids.tolist()),
            note=rel.robust_note([n for n, _ in relation.terms], count, relation.trivial)))
    ordered = rel.ordered_relations(settled_every, robust)
    bounds = []
    for bound, c in zip(second.bounds, counts["bounds"]):
        if c["broken"] > (allowed if bound.violations else 0):
            continue
        note = rel.recounted_note(bound, c["attained"])
        bounds.append(dataclasses.replace(
            bound, attained_by=tuple(c["attained_ids"].tolist()), attained_count=c["attained"],
            near=c["near"], holds_on=c["present"] - c["broken"],
            violations=tuple(c["broken_ids"].tolist()), note=note))
    bounds = _drop_crowded_triples(bounds, found)
    bounds.sort(key=rel.bound_rank)
    bounds = rel.reported_bounds(bounds, rel.MAX_BOUNDS, notes)
    settled_approximate = []
    for relation, (present, off, ids) in zip(approximate, counts["approximate"]):
        if off > allowed:
            continue
        settled_approximate.append(dataclasses.replace(
            relation, holds_on=present - off, violations=tuple(ids.tolist()),
            note=rel.approximate_note(off)))
    if step.robust:
        ctx.notes.append(Note(
            "dask_robust_proposed",
            "relations and bounds broken by a few rows are proposed from the rows "
            "searched (not from every row) and kept when every row's count allows."))
    return dataclasses.replace(second, relations=tuple(ordered), bounds=tuple(bounds),
                               approximate=tuple(settled_approximate), notes=tuple(notes),
                               n_rows=table.n_rows)


def _drop_crowded_triples(bounds, found):
    """Bounds in three columns whose triple has too many distinct points to be searched in
    memory are left out here too, so that both engines report the same bounds."""
    from analysis import relations as rel

    limit = rel.MAX_TRIPLE_POINTS
    crowded = {frozenset(k) for k, (_, keys) in found["triples"].items()
               if keys is None or len(keys) > limit}
    kept = [b for b in bounds
            if len(b.terms) != 3 or frozenset(n for n, _ in b.terms) not in crowded]
    return kept


# ----------------------------------------------------------------------------------------
# Congruences: proposed on the sample, counted on every row


def _congruences(ctx: Context, step, sample, settled) -> tuple:
    """The congruences of the integer columns, as the in-memory step finds them.

    Each modulus is searched on its own on the sample (so that no fact there hides a weaker
    modulus or a pair that only every row can settle); every candidate is then counted on
    every row, and :func:`analysis.congruences.settle_congruences` keeps those the in-memory
    search would keep.
    """

    from analysis import congruences as cg

    table = ctx.table
    integers = [n for n in step.chosen_columns(table) if table.column(n).dtype == "integer"]
    if not step.congruences or not integers:
        return ()
    columns = {name: sample.exact(name) for name in integers}
    candidates = {}
    for modulus in cg.MODULI:
        for congruence in cg.find_congruences(columns, sample.row_ids, moduli=[modulus]):
            candidates[(congruence.terms, modulus, congruence.residue)] = congruence
    if not candidates:
        return ()
    index = {n: j for j, n in enumerate(integers)}
    specs = [([index[n] for n, _ in terms], [c for _, c in terms], m, r)
             for terms, m, r in candidates]
    listed = cg.MAX_LISTED_ROWS
    counts = ctx.compute(tree(partition_tasks(ctx, _count_congruences, integers, integers,
                                              specs, table.id_column, listed),
                              lambda a, b: _merge_congruences(a, b, listed)))
    counted = [dataclasses.replace(congruence, holds_on=present, violation_count=broken,
                                   violations=tuple(ids.tolist()), implied_moduli=())
               for congruence, (present, broken, ids) in zip(candidates.values(), counts)]
    laws = [r for r in settled.relations if not r.violations]
    constants = [n for n in integers if table.column(n).distinct == 1]
    if len(sample.row_ids) < table.n_rows:
        ctx.notes.append(Note("dask_congruences_sample",
            f"congruences proposed on a uniform random sample of {len(sample.row_ids)} rows "
            f"and counted on all {table.n_rows} rows; one that the sample shows with too few "
            "different values, or breaks more often than the whole table does, is not "
            "proposed."))
    return tuple(cg.settle_congruences(counted, relations=laws, constants=constants))


def _count_congruences(frame, offset: int, names, specs, id_column, listed: int) -> list:
    """Per candidate: rows with every term present, rows breaking it, their first ids."""
    values, missing = _exact_matrix(frame, names)
    ids = frame[id_column].to_numpy() if id_column else \
        np.arange(offset, offset + len(frame), dtype=np.int64)
    out = []
    for columns, coefs, modulus, residue in specs:
        present = ~missing[:, columns].any(axis=1)
        total = np.zeros(len(frame), dtype=np.int64)
        for j, coef in zip(columns, coefs):
            # reduced first: no product can overflow
            total += (coef % modulus) * (values[:, j] % modulus)
        broken = np.flatnonzero(present & (total % modulus != residue))
        out.append((int(present.sum()), len(broken), ids[broken[:listed]]))
    return out


def _merge_congruences(a: list, b: list, listed: int) -> list:
    return [(pa + pb, ca + cb, np.concatenate([ia, ib])[:listed])
            for (pa, ca, ia), (pb, cb, ib) in zip(a, b)]
