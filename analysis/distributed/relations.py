"""The relations step on Dask: candidates from a few rows, everything checked on every row.

1. The in-memory search runs on a uniform sample; its relations span a lattice.
2. One pass tests that lattice on every row (keeping a few breaking rows that span every way
   it is broken) and gathers the candidates for corners of each pair's and triple's hull.
3. The search runs again on the sample with those rows: the relations and sharp bounds of
   the whole table.
4. A last pass counts on every row the rows breaking, attaining or near each statement.
5. Congruences are proposed on the sample one modulus at a time and counted on every row.

Every partition is read, searched and counted by the in-memory step's own functions
(:mod:`analysis.relations`), so that integers of any size and rationals are exact here as
they are there; this module holds the bookkeeping across partitions.
"""

from __future__ import annotations

import dataclasses
import math
from fractions import Fraction
from itertools import combinations

import numpy as np

from analysis.distributed.common import Context, Settings, partition_tasks, tree
from analysis.notes import Note

SAMPLE_ROWS = 20_000


def run_relations(step, ctx: Context):
    """A RelationsResult for ``step`` on the partitioned table in ``ctx``."""

    from analysis import relations as rel
    from analysis.distributed.source import as_table, sample_table

    table = ctx.table
    names = step.searched_columns(table)
    exact = [n for n in names if table.column(n).dtype != "real"]
    real = [n for n in names if table.column(n).dtype == "real"]
    sample, positions = sample_table(table, ctx.client, SAMPLE_ROWS, seed=step.seed,
                                     columns=names)
    first = step.run(sample)
    pairs, triples = _bound_candidates(table, exact)
    spec = Settings(table=dataclasses.replace(table, frame=None), exact=exact, pairs=pairs,
                    triples=triples, generators=[rel.relation_vector(r, exact) for r in
                                                 first.relations if r.exact and not r.violations])
    spec.scales = _scales(ctx, [n for n in exact if table.column(n).dtype == "rational"], spec)
    found = ctx.compute(tree(partition_tasks(ctx, _pass_a, exact, spec), _merge_a))
    found["scales"] = spec.scales
    extra_positions = np.array(sorted(found["breakers"]), dtype=np.int64)
    # numpy arrays, so that dask does not walk through them as collections
    located = ctx.compute(partition_tasks(ctx, _locate, names, spec, found["corners"],
                                          extra_positions))
    frame, all_positions = _candidate_rows(sample, positions, located, names, table)
    # the rows searched rank bounds by their own counts: keep them all, rank them again
    # by the counts on every row, then cut as the in-memory step does
    second = step.run(as_table(table, frame, all_positions), max_bounds=None)
    ctx.notes.append(Note("dask_relations_sample",
        f"relations and bounds searched on {len(all_positions)} rows: a uniform random sample "
        f"of {len(positions)} rows, {len(extra_positions)} rows breaking relations of the "
        f"sample, and the rows at the corners of every hull; then checked on all "
        f"{table.n_rows} rows across {table.npartitions} partition"
        f"{'s' if table.npartitions != 1 else ''}."))
    marked = [n for n in names if table.column(n).intervals]
    if marked:
        ctx.notes.append(Note(
            "dask_intervals_missing",
            "the Dask engine reads interval cells as missing values: rows known only by an "
            f"interval in {', '.join(marked)} are not held against the relations and bounds "
            "(the in-memory engine lists them as breaking or consistent with each).",
            columns=tuple(marked)))
    return _settle(ctx, step, sample, first, second, exact, real, found)


# ----------------------------------------------------------------------------------------
# Reading a partition


def _read(frame, offset: int, spec: Settings, names: list[str]):
    """(exact columns as (values, missing), real columns as floats, row ids) of one typed
    partition, read as the in-memory step reads a table."""
    from analysis import relations as rel
    from analysis.distributed.source import as_table

    part = as_table(spec.table, frame, np.arange(offset, offset + len(frame), dtype=np.int64))
    exact, real = rel.read_columns(part, names)
    return {n: rel.exact_column(n, v) for n, v in exact.items()}, real, part.row_ids


def _bound_columns(columns: dict, spec: Settings) -> dict:
    """The partition's exact columns as the bound search reads them, in the units of the
    whole table: a rational column times the least common multiple of its denominators over
    every row (:func:`_scales`), so that every partition's points are integers alike."""
    from analysis import relations as rel

    out = {}
    for name, (values, missing) in columns.items():
        if name in spec.scales:
            values = rel.combine([spec.scales[name]], [values])
        out[name] = rel.BoundColumn(name, values, missing)
    return out


def _scales(ctx: Context, rationals: list[str], spec: Settings) -> dict:
    """{rational column: the least common multiple of its denominators over every row}."""
    if not rationals:
        return {}
    return ctx.compute(tree(partition_tasks(ctx, _denominators, rationals, spec, rationals),
                            lambda a, b: {n: math.lcm(a[n], b[n]) for n in a}))


def _denominators(frame, offset: int, spec: Settings, names: list[str]) -> dict:
    columns = _read(frame, offset, spec, names)[0]
    return {n: math.lcm(*(Fraction(v).denominator for v in values[~missing].tolist()))
            for n, (values, missing) in columns.items()}


def _bound_candidates(table, exact):
    from analysis import relations as rel

    wide = [n for n in exact if table.column(n).distinct >= 3]
    pairs = wide[: rel.MAX_BOUND_COLUMNS + 10]
    # integers past 64 bits take no part in triples in memory either
    triples = [n for n in pairs if not table.column(n).missing
               and table.column(n).dtype != "big integer"][: rel.MAX_TRIPLE_COLUMNS + 4]
    return pairs, triples


# ----------------------------------------------------------------------------------------
# Pass A: test the sample's lattice, gather extremes and hull corners


def _pass_a(frame, offset: int, spec: Settings) -> dict:
    """On one partition: rows that break the sample's relations (the first at each way of
    breaking them, as many as span those ways), the corners of the hull of every column,
    pair and triple of the bound search, and the distinct points of each triple."""
    from analysis import relations as rel

    columns, _, _ = _read(frame, offset, spec, spec.exact)
    projected = rel.relation_products(columns, spec.exact, spec.generators)[0]
    rows = np.flatnonzero((projected != 0).any(axis=1))
    out: dict = {"breakers": _spanning(_first_distinct(projected[rows], offset + rows),
                                       len(spec.generators)),
                 "corners": {}, "points": {}, "rank": len(spec.generators)}
    bound = _bound_columns(columns, spec)
    for name, column in bound.items():
        out["corners"][(name,)] = rel.hull_corners(column.values[~column.missing].reshape(-1, 1))
    for pair in combinations(spec.pairs, 2):
        points = rel.distinct_points([bound[n] for n in pair])
        out["corners"][pair] = rel.hull_corners(rel.extremes(*points.coords) if len(points)
                                                else np.zeros((0, 2), dtype=np.int64))
    for triple in combinations(spec.triples, 3):
        data = np.column_stack(rel.distinct_points([bound[n] for n in triple]).coords)
        # integers past 64 bits take no part in bounds in three columns
        out["points"][triple] = None if data.dtype == object else _capped(data)
        out["corners"][triple] = rel.hull_corners(
            rel.triple_candidates(data) if data.dtype != object and len(data)
            else np.zeros((0, 3), dtype=np.int64))
    return out


def _merge_a(a: dict, b: dict) -> dict:
    from analysis.relations import hull_corners

    corners = {k: hull_corners(np.concatenate([a["corners"][k], b["corners"][k]]))
               for k in a["corners"]}
    points = {k: None if x is None or b["points"][k] is None else
              _capped(np.unique(np.vstack([x, b["points"][k]]), axis=0))
              for k, x in a["points"].items()}
    return {"breakers": _spanning({**a["breakers"], **b["breakers"]}, a["rank"]),
            "corners": corners, "points": points, "rank": a["rank"]}


def _first_distinct(projected: np.ndarray, positions: np.ndarray) -> dict:
    """{position: vector} of the first row at each distinct row of ``projected``."""
    import pandas as pd

    first = ~pd.DataFrame(projected).duplicated().to_numpy()
    return {int(p): list(map(int, v)) for p, v in zip(positions[first], projected[first])}


def _spanning(vectors: dict, rank: int) -> dict:
    """Of {position: vector}, the first by position that add to the span of those before
    (exactly), up to ``rank`` of them: rows that break relations in every way rows do."""
    from analysis.relations import RankTracker

    tracker = RankTracker()
    kept = {}
    for position, vector in sorted(vectors.items()):
        if len(kept) == rank:
            break  # the span is full: no later vector adds to it
        if tracker.add(vector):
            kept[position] = vector
    return kept


def _capped(points: np.ndarray):
    """Distinct points of a triple, or None past the count the in-memory search takes."""
    from analysis.relations import crowded_triple

    return None if crowded_triple(points=len(points)) else points


def _locate(frame, offset: int, spec: Settings, wanted: dict, positions: np.ndarray):
    """Rows of one partition at the wanted points (first per point) and at ``positions``."""
    import pandas as pd

    columns = _bound_columns(_read(frame, offset, spec, spec.exact)[0], spec)
    picked: set[int] = set()
    for names, points in wanted.items():
        if not len(points):
            continue
        chosen = [columns[n] for n in names]
        present = ~np.any([c.missing for c in chosen], axis=0)
        keys = pd.MultiIndex.from_arrays([c.values for c in chosen])
        hit = np.flatnonzero(present & keys.isin([tuple(p) for p in points.tolist()]))
        picked.update(hit[~keys[hit].duplicated()].tolist())
    inside = positions[(positions >= offset) & (positions < offset + len(frame))] - offset
    picked.update(inside.tolist())
    chosen = np.array(sorted(picked), dtype=np.int64)
    return frame.iloc[chosen].reset_index(drop=True), chosen + offset


def _candidate_rows(sample, positions, located, names, table):
    import pandas as pd

    keep = [n for n in sample.frame.columns if n in names or n == table.id_column]
    frame = pd.concat([sample.frame[keep]] + [f[keep] for f, _ in located if len(f)],
                      ignore_index=True)
    all_positions = np.concatenate([positions] + [p for _, p in located])
    # each position once, in order: the first of its rows (the sample's where it has one)
    first = np.unique(all_positions, return_index=True)[1]
    return frame.iloc[first].reset_index(drop=True), all_positions[first]


# ----------------------------------------------------------------------------------------
# Pass B: counts on every row


# Pass B's settings: exact and real column names; relations (integer vectors over the exact
# columns and the constant); bounds (see relations.scaled_bound) and the rational scales;
# approximate relations (names, float coefs, constant); congruences (terms, modulus,
# residue); tolerance; limit (row ids kept per list).


def _pass_b(frame, offset: int, spec: Settings) -> dict:
    """Per statement, on one partition: (rows it counts, rows breaking it, their first ids);
    for a bound, the same of the rows attaining it and how many come close between."""
    from analysis import relations as rel

    columns, reals, ids = _read(frame, offset, spec, spec.exact + spec.real)
    out = {"relations": [], "bounds": [], "approximate": [], "congruences": []}
    projected, present = rel.relation_products(columns, spec.exact, spec.relations)
    for j in range(len(spec.relations)):
        out["relations"].append(_tally(present[:, j], projected[:, j] != 0, ids, spec.limit))
    scaled = _bound_columns(columns, spec) if spec.bounds else {}
    for coefs, names, constant, margin in spec.bounds:
        rows = ~np.any([scaled[n].missing for n in names], axis=0)
        lhs = rel.combine(coefs, [scaled[n].values[rows] for n in names])
        attained, broken, near = rel.bound_counts(lhs, constant, margin)
        out["bounds"].append((*_tally(rows, attained, ids[rows], spec.limit), near,
                              *_tally(rows, broken, ids[rows], spec.limit)[1:]))
    for names, coefs, constant in spec.approximate:
        data = np.column_stack([rel.float_column(*columns[n]) if n in columns else reals[n]
                                for n in names] + [np.ones(len(frame))])
        finite = np.isfinite(data).all(axis=1)
        full = np.append(np.asarray(coefs, dtype=float), -constant)
        off = rel.approximately_off(data[finite], full, spec.tolerance)
        out["approximate"].append(_tally(finite, off, ids[finite], spec.limit))
    for terms, modulus, residue in spec.congruences:
        rows = ~np.any([columns[n][1] for n, _ in terms], axis=0)
        # reduced first: no product can overflow, and integers of any size reduce exactly
        total = sum((c % modulus) * np.asarray(columns[n][0] % modulus).astype(np.int64)
                    for n, c in terms)
        out["congruences"].append(_tally(rows, rows & (total % modulus != residue), ids,
                                         spec.limit))
    return out


def _tally(counted: np.ndarray, breaking: np.ndarray, ids: np.ndarray, limit: int) -> tuple:
    """(rows counted, rows breaking, the first ``limit`` ids of those) from boolean masks."""
    return int(np.count_nonzero(counted)), int(np.count_nonzero(breaking)), ids[breaking][:limit]


def _added(a, b, limit: int):
    """Two partitions' counts as one: numbers added, row ids joined (the first ``limit``)."""
    if isinstance(a, np.ndarray):
        return np.concatenate([a, b])[:limit]
    if isinstance(a, dict):
        return {key: _added(a[key], b[key], limit) for key in a}
    if isinstance(a, (list, tuple)):
        return type(a)(_added(x, y, limit) for x, y in zip(a, b))
    return a + b


def _settle(ctx: Context, step, sample, first, second, exact, real, found: dict):
    """The result: every statement of the second search (and the relations of the first
    that a few rows break) counted on every row, kept as the in-memory step keeps them."""
    from analysis import congruences as cg
    from analysis import relations as rel

    table = ctx.table
    # as in memory, a share of breakers is a share of every row of the table, not only of
    # the rows where all the searched columns are present
    allowed = rel.breakers_allowed(step.max_breakers, table.n_rows) if step.robust else 0
    every = [r for r in second.relations if r.exact and not r.violations]
    # relations broken by a few rows: those of both searches, and relations of the sample
    # that other rows break
    known = {tuple(rel.relation_vector(r, exact)) for r in every}
    candidates = []
    for relation in [*second.relations, *first.relations]:
        vector = rel.relation_vector(relation, exact)
        if relation.exact and tuple(vector) not in known:
            known.add(tuple(vector))
            candidates.append((relation, vector))
    integers = rel.congruence_columns(table, step.chosen_columns(table))
    congruences = cg.proposed_congruences({n: sample.exact(n) for n in integers},
                                          sample.row_ids) if step.congruences and integers else {}
    spec = Settings(
        table=dataclasses.replace(table, frame=None), exact=exact, real=real,
        relations=[rel.relation_vector(r, exact) for r in every] + [v for _, v in candidates],
        scales=found["scales"],
        bounds=[rel.scaled_bound(b, found["scales"]) for b in second.bounds],
        approximate=[([n for n, _ in r.terms], [float(c) for _, c in r.terms],
                      float(r.constant)) for r in second.approximate],
        congruences=list(congruences), tolerance=float(step.tolerance),
        limit=max(allowed + 1, rel.MAX_LISTED_ROWS, cg.MAX_LISTED_ROWS))
    counts = ctx.compute(tree(partition_tasks(ctx, _pass_b, exact + real, spec),
                              lambda a, b: _added(a, b, spec.limit)))
    notes = list(second.notes)
    broken = [r.text for r, (_, count, _) in zip(every, counts["relations"]) if count]
    if broken:
        # cannot happen when the breaking rows were gathered; say so rather than hide it
        notes.append(Note("dask_relations_broken", "relations of the rows searched that "
                          "other rows break, left out: " + "; ".join(broken)))
    relations = rel.settle_relations(every, candidates, counts["relations"], allowed, exact)
    bounds = rel.settle_bounds(second.bounds, counts["bounds"], allowed, notes,
                               _crowded_triples(found, table.n_rows))
    if step.robust:
        ctx.notes.append(Note(
            "dask_robust_proposed",
            "relations and bounds broken by a few rows are proposed from the rows "
            "searched (not from every row) and kept when every row's count allows."))
    settled = dataclasses.replace(
        second, relations=tuple(relations), bounds=tuple(bounds), notes=tuple(notes),
        approximate=tuple(rel.settle_approximate(second.approximate, counts["approximate"],
                                                 allowed)), n_rows=table.n_rows)
    return dataclasses.replace(settled, congruences=_settled_congruences(
        ctx, sample, integers, congruences, counts["congruences"], settled))


def _crowded_triples(found, rows: int) -> set:
    """The triples of columns that the in-memory search leaves out as too costly
    (:func:`analysis.relations.crowded_triple`), from every row's ranges and points, so
    that both engines report the same bounds."""
    from analysis import relations as rel

    ranges = {key[0]: tuple(map(int, c[:, 0])) for key, c in found["corners"].items()
              if len(key) == 1}
    return {frozenset(triple) for triple, points in found["points"].items()
            if points is None or rel.crowded_triple(rel.grid_cells([ranges[n] for n in triple]),
                                                    rows, len(points))}


# ----------------------------------------------------------------------------------------
# Congruences: proposed on the sample one modulus at a time, counted on every row (in pass
# B), settled by analysis.congruences.settle_congruences as the in-memory search keeps them


def _settled_congruences(ctx: Context, sample, integers, candidates: dict, counts,
                         settled) -> tuple:
    from analysis import congruences as cg

    if not candidates:
        return ()
    table = ctx.table
    counted = [dataclasses.replace(congruence, holds_on=present, violation_count=broken,
                                   violations=tuple(ids[: cg.MAX_LISTED_ROWS].tolist()))
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
