"""Figures for the relations step: a bound or relation in two invariants drawn over the table.

A point is one pair of values that occurs in the table, sized by how many objects share it
(tables of invariants repeat pairs a great deal). A bound is drawn as it reads, one invariant
up and the other across, with its line of equality; the objects attaining it are ringed. A
relation that a few objects break is drawn as its gap (left side minus right side) against
the first invariant, so the breakers stand off the line at 0. Ids are given on hover. A
statement in three or more invariants has no honest picture in a plane and stays text.
"""

from __future__ import annotations

import numpy as np
import plotly.graph_objects as go

from analysis.figures.style import MISSING_COLOUR, PALETTE, apply_style, escaped
from analysis.plain import row_id

# Pictures drawn: the first two-invariant statements, bounds before relations a few rows break.
MAX_FIGURES = 4
# Distinct pairs drawn; past this a seeded sample of them (the marked pairs are always drawn).
MAX_POINTS = 20_000
# Ids listed on hover for one pair.
IDS_ON_HOVER = 5
ON_COLOUR = PALETTE[1]
BROKEN_COLOUR = PALETTE[3]


def figures(result, table=None, **_) -> list:
    """Titled figures for a relations result: two-invariant bounds, then two-invariant
    relations that some rows break (none without the table, whose values are drawn)."""
    if table is None:
        return []
    chosen = [(b.terms, b.relation, b.constant, b.violations, b.text, "Bound")
              for b in result.bounds if len(b.terms) == 2]
    chosen += [(r.terms, "=", r.constant, r.violations, r.text, "Relation")
               for r in result.relations if len(r.terms) == 2 and r.violations
               and not r.trivial]
    out = []
    for terms, relation, constant, violations, text, word in chosen:
        figure = statement_figure(table, terms, relation, constant, violations, text=text)
        if figure is not None:
            out.append((f"{word} {_shown(text)}", figure))
        if len(out) == MAX_FIGURES:
            break
    return out


def statement_figure(table, terms, relation: str, constant, violations=(), *, text: str,
                     seed: int = 0) -> go.Figure | None:
    """``a*x + b*y (relation) constant`` over the pairs (x, y) of the table's rows.

    None when a column cannot be drawn in floating point (integers past 2**53, say).
    """
    (x_name, a), (y_name, b) = terms
    x = np.asarray(table.numeric(x_name), dtype=np.float64)
    y = np.asarray(table.numeric(y_name), dtype=np.float64)
    present = np.isfinite(x) & np.isfinite(y)
    if not present.any() or np.abs(x[present]).max() >= 2**53 \
            or np.abs(y[present]).max() >= 2**53:
        return None
    rows = np.flatnonzero(present)
    pairs, inverse, counts = _distinct_pairs(x[rows], y[rows])
    a, b, c = float(a), float(b), float(constant)
    # rows on the line, within rounding of the terms' own size (the statement itself was
    # checked exactly by the step; this only decides which points to ring)
    gap = a * pairs[:, 0] + b * pairs[:, 1] - c
    scale = np.abs(a * pairs[:, 0]) + np.abs(b * pairs[:, 1]) + abs(c) + 1.0
    on_line = np.abs(gap) <= 1e-9 * scale
    broken_ids = {str(v) for v in violations}
    ids = table.row_ids[rows]
    broken = np.zeros(len(pairs), dtype=bool)
    if broken_ids:
        hits = np.fromiter((str(v) in broken_ids for v in ids), dtype=bool, count=len(ids))
        broken[np.unique(inverse[hits])] = True
    plain_pairs = np.flatnonzero(~on_line & ~broken)
    sampled = len(plain_pairs) > MAX_POINTS
    if sampled:
        rng = np.random.default_rng(seed)
        plain_pairs = np.sort(rng.choice(plain_pairs, size=MAX_POINTS, replace=False))
    figure = go.Figure()
    sizes = 6 + 10 * np.sqrt(counts / counts.max())
    # A bound is drawn as it reads, y against x with its line. A relation is drawn as its
    # gap (left side minus right side) against x: the objects obeying it sit on 0, and the
    # few breaking it stand off it, where on the line itself they would hide among the rest.
    gap_view = relation == "="
    up = gap if gap_view else pairs[:, 1]
    up_title = "left side minus right side" if gap_view else y_name
    hover = (f"{escaped(x_name)} = %{{x}}<br>{escaped(y_name)} = %{{text}}<br>"
             + ("gap %{y}<br>" if gap_view else ""))
    figure.add_trace(go.Scatter(
        x=pairs[plain_pairs, 0], y=up[plain_pairs], text=pairs[plain_pairs, 1],
        mode="markers", name="objects off the line",
        marker=dict(color=PALETTE[0], size=sizes[plain_pairs], opacity=0.55,
                    line=dict(width=0)),
        # text first, the count second: a point here stands for a pair of values, not for
        # one object, so nothing in customdata may read as a row id (selection lists ids)
        customdata=np.array([[_objects_text(counts[k]), int(counts[k])]
                             for k in plain_pairs], dtype=object),
        hovertemplate=hover + "%{customdata[0]}<extra></extra>"))
    if gap_view:
        x_low, x_high = _padded(pairs[:, 0])
        figure.add_trace(go.Scatter(x=[x_low, x_high], y=[0, 0], mode="lines",
                                    name="the relation (gap 0)", hoverinfo="skip",
                                    line=dict(color=MISSING_COLOUR, width=2, dash="dash")))
    else:
        _line(figure, pairs, a, b, c, "line of equality")
    for mask, name, colour, symbol in ((on_line, _on_words(relation), ON_COLOUR, "circle-open"),
                                       (broken, "objects breaking it", BROKEN_COLOUR, "x")):
        marked = np.flatnonzero(mask)
        if not len(marked):
            continue
        listed = _ids_per_pair(marked, inverse, ids)
        figure.add_trace(go.Scatter(
            x=pairs[marked, 0], y=up[marked], text=pairs[marked, 1], mode="markers",
            name=name,
            marker=dict(color=colour, size=sizes[marked] + 4, symbol=symbol,
                        line=dict(width=2, color=colour)),
            customdata=np.array([[f"{_objects_text(counts[k])}: {listed[k]}", int(counts[k])]
                                 for k in marked], dtype=object),
            hovertemplate=hover + "%{customdata[0]}<extra></extra>"))
    attained = int(counts[on_line].sum())
    note = f"{attained} objects on the line" if relation != "=" else \
        f"{int(counts[broken].sum())} objects break it"
    if sampled:
        others = int((~on_line & ~broken).sum())
        note += f"; {MAX_POINTS:,} of the other {others:,} value pairs drawn"
    apply_style(figure, title=f"{escaped(_shown(text))}  ({note})",
                x_title=x_name, y_title=up_title)
    return figure


def _line(figure: go.Figure, pairs: np.ndarray, a: float, b: float, c: float,
          name: str) -> None:
    """The statement's line across the drawn range."""
    x_low, x_high = _padded(pairs[:, 0])
    y_low, y_high = _padded(pairs[:, 1])
    if b == 0:
        xs = np.array([c / a, c / a])
        ys = np.array([y_low, y_high])
    elif a == 0:
        xs = np.array([x_low, x_high])
        ys = np.array([c / b, c / b])
    else:
        # the part of the line inside the drawn box, so that the box is the data's
        ends = sorted(((c - b * y_low) / a, (c - b * y_high) / a))
        start, stop = max(x_low, ends[0]), min(x_high, ends[1])
        if start >= stop:
            start, stop = x_low, x_high
        xs = np.array([start, stop])
        ys = (c - a * xs) / b
    figure.add_trace(go.Scatter(x=xs, y=ys, mode="lines", name=name, hoverinfo="skip",
                                line=dict(color=MISSING_COLOUR, width=2, dash="dash")))


def _distinct_pairs(x: np.ndarray, y: np.ndarray):
    """The distinct (x, y) pairs in order, each row's pair, and how many rows share each.

    Whole numbers in a modest range are paired through one integer key, many times faster
    than sorting rows of two columns on a million rows; anything else is sorted as rows.
    """
    x_low, y_low = x.min(), y.min()
    width = y.max() - y_low + 1
    if np.all(x == np.round(x)) and np.all(y == np.round(y)) \
            and (x.max() - x_low + 1) * width < 2**52:
        keys = (x - x_low) * width + (y - y_low)
        unique, inverse, counts = np.unique(keys, return_inverse=True, return_counts=True)
        pairs = np.column_stack([unique // width + x_low, unique % width + y_low])
        return pairs, inverse.reshape(-1), counts
    pairs, inverse, counts = np.unique(np.column_stack([x, y]), axis=0, return_inverse=True,
                                       return_counts=True)
    return pairs, inverse.reshape(-1), counts


def _objects_text(count) -> str:
    return "1 object" if count == 1 else f"{int(count)} objects"


def _padded(values: np.ndarray) -> tuple[float, float]:
    low, high = float(values.min()), float(values.max())
    pad = 0.05 * (high - low) or 1.0
    return low - pad, high + pad


def _on_words(relation: str) -> str:
    return "objects attaining it" if relation != "=" else "objects obeying it"


def _ids_per_pair(marked: np.ndarray, inverse: np.ndarray, ids: np.ndarray) -> dict:
    """The first few ids of the rows at each marked pair, as hover text."""
    wanted = np.isin(inverse, marked)
    listed: dict[int, list] = {int(k): [] for k in marked}
    totals: dict[int, int] = {int(k): 0 for k in marked}
    for k, v in zip(inverse[wanted].tolist(), ids[wanted].tolist()):
        totals[k] += 1
        if len(listed[k]) < IDS_ON_HOVER:
            listed[k].append(escaped(str(row_id(v))))
    return {k: ", ".join(v) + (f" and {totals[k] - len(v)} more" if totals[k] > len(v) else "")
            for k, v in listed.items()}


def _shown(text: str) -> str:
    """A statement as read on a picture: the inequality signs as one character each."""
    return text.replace("<=", "≤").replace(">=", "≥")
