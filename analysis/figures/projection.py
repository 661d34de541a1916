"""Figures for the projection step: the 2-d picture, and for PCA the explained variance and
the loadings.

The picture carries every projected row's id as the first entry of its customdata, so a
selection of points can be turned back into rows (:func:`selected_rows`). Points can be
coloured by the target, by clusters or outlier scores from other steps' results, or by any
column: labels get distinct colours, numbers a continuous scale.

The house style shared by every figure lives in :mod:`analysis.figures.style`.
"""

from __future__ import annotations

import math
from fractions import Fraction

import numpy as np
import pandas as pd
import plotly.graph_objects as go

from analysis.errors import StepError
from analysis.figures.style import (  # noqa: F401 - re-exported for older imports
    DIVERGING,
    FONT,
    MISSING_COLOUR,
    PALETTE,
    SEQUENTIAL,
    apply_style,
    escaped,
)
from analysis.plain import fraction_text, row_id

# More distinct labels than this are drawn as the most common ones plus "other".
MAX_LABELS = 20
# Past this many points the scatter uses WebGL.
WEBGL_POINTS = 5000
# Loadings drawn: the features with the largest weights.
MAX_LOADINGS = 25
MAX_COMPONENTS = 20


def figures(result, table=None, color_by: str | None = None, hover=(), clustering=None,
            outliers=None, **_) -> list:
    """Titled figures for a projection result.

    color_by: None, "target", "cluster" (needs ``clustering``, a clustering result),
        "outlier score" (needs ``outliers``, an outliers result) or a column of ``table``.
    hover: table columns shown when the pointer rests on a point (the row id always is).
    """
    out = [(_scatter_title(result), scatter_figure(result, table, color_by=color_by,
                                                   hover=hover, clustering=clustering,
                                                   outliers=outliers))]
    if result.explained_variance_ratio is not None:
        out.append(("Explained variance by principal component", scree_figure(result)))
    if result.loadings:
        out.append(("Loadings: what the axes are made of", loadings_figure(result)))
    return out


def scatter_figure(result, table=None, *, color_by: str | None = None, hover=(),
                   clustering=None, outliers=None) -> go.Figure:
    """The projected rows as points; customdata holds [row id, hover values...]."""
    hover = list(hover or ())
    ids = [row_id(r) for r in result.row_ids]
    positions = _positions(result, table) if (table is not None) else None
    if hover and table is None:
        raise StepError("hover columns need the table the projection was computed on.")
    hover_values = [_column_text(table, name, positions) for name in hover]
    colour = _colouring(result, table, positions, color_by, clustering, outliers)
    kind, values, colour_title = colour
    # customdata: row id, the hover columns, and for a number colouring its value
    custom = np.empty((len(ids), 2 + len(hover)), dtype=object)
    custom[:, 0] = ids
    for j, column_values in enumerate(hover_values, start=1):
        custom[:, j] = column_values
    if kind == "numbers":
        custom[:, -1] = [_cell_text(v) for v in values]
    else:
        custom = custom[:, :-1]
    lines = ["<b>%{customdata[0]}</b>",
             f"{result.axis_titles[0]}: %{{x:.4g}}", f"{result.axis_titles[1]}: %{{y:.4g}}"]
    lines.extend(f"{escaped(name)}: %{{customdata[{j}]}}" for j, name in enumerate(hover, 1))
    template = "<br>".join(lines)
    marker_size = 7 if len(ids) <= 2000 else 5
    trace_type = go.Scattergl if len(ids) > WEBGL_POINTS else go.Scatter
    figure = go.Figure()
    if kind == "labels":
        for label, colour_value, members in _label_groups(values):
            figure.add_trace(trace_type(
                x=result.x[members], y=result.y[members], mode="markers", name=label,
                customdata=custom[members],
                marker=dict(size=marker_size, color=colour_value, opacity=0.85,
                            line=dict(width=0)),
                hovertemplate=template + f"<br>{escaped(colour_title)}: {escaped(label)}"
                + "<extra></extra>"))
    elif kind == "numbers":
        present = np.isfinite(values)
        if (~present).any():
            figure.add_trace(trace_type(
                x=result.x[~present], y=result.y[~present], mode="markers", name="missing",
                customdata=custom[~present],
                marker=dict(size=marker_size, color=MISSING_COLOUR, opacity=0.7),
                hovertemplate=template + f"<br>{escaped(colour_title)}: missing"
                + "<extra></extra>"))
        figure.add_trace(trace_type(
            x=result.x[present], y=result.y[present], mode="markers", name=colour_title,
            customdata=custom[present], showlegend=False,
            marker=dict(size=marker_size, color=values[present], colorscale=SEQUENTIAL,
                        opacity=0.9, line=dict(width=0),
                        colorbar=dict(title=dict(text=colour_title), thickness=14,
                                      outlinewidth=0)),
            hovertemplate=template + f"<br>{escaped(colour_title)}: "
            f"%{{customdata[{len(hover) + 1}]}}<extra></extra>"))
    else:
        figure.add_trace(trace_type(
            x=result.x, y=result.y, mode="markers", name="rows", customdata=custom,
            showlegend=False,
            marker=dict(size=marker_size, color=PALETTE[0], opacity=0.75, line=dict(width=0)),
            hovertemplate=template + "<extra></extra>"))
    x_title, y_title = result.axis_titles
    if result.explained_variance_ratio is not None:
        ratios = list(result.explained_variance_ratio) + [0.0]
        x_title = f"{x_title} ({ratios[0]:.1%} of the variance)"
        y_title = f"{y_title} ({ratios[1]:.1%})"
    apply_style(figure, title=_scatter_title(result), x_title=x_title, y_title=y_title,
                legend_title=colour_title or "")
    figure.update_layout(dragmode="lasso")
    return figure


def scree_figure(result) -> go.Figure:
    """Explained variance ratio per principal component, with the running total."""
    ratios = np.asarray(result.explained_variance_ratio[:MAX_COMPONENTS], dtype=float)
    names = [f"PC{i + 1}" for i in range(len(ratios))]
    figure = go.Figure()
    figure.add_trace(go.Bar(x=names, y=ratios, name="this component",
                            marker=dict(color=PALETTE[0]),
                            hovertemplate="%{x}: %{y:.2%} of the variance<extra></extra>"))
    figure.add_trace(go.Scatter(x=names, y=np.cumsum(ratios), name="running total",
                                mode="lines+markers", line=dict(color=PALETTE[1], width=2),
                                hovertemplate="up to %{x}: %{y:.2%}<extra></extra>"))
    shown = "" if len(result.explained_variance_ratio) <= MAX_COMPONENTS else \
        f" (first {MAX_COMPONENTS} of {len(result.explained_variance_ratio)})"
    apply_style(figure, title=f"Explained variance by principal component{shown}",
                x_title="principal component", y_title="share of the variance")
    figure.update_yaxes(tickformat=".0%", range=[0, 1.02])
    return figure


def loadings_figure(result) -> go.Figure:
    """Each feature's weight on the x and y axes (the largest ``MAX_LOADINGS`` features)."""
    items = sorted(result.loadings.items(), key=lambda kv: -(kv[1][0] ** 2 + kv[1][1] ** 2))
    items = items[:MAX_LOADINGS][::-1]  # largest at the top of a horizontal bar chart
    names = [name for name, _ in items]
    figure = go.Figure()
    for index, colour in ((0, PALETTE[0]), (1, PALETTE[1])):
        figure.add_trace(go.Bar(
            y=names, x=[w[index] for _, w in items], orientation="h",
            name=f"{'x' if index == 0 else 'y'}: {result.axis_titles[index]}",
            marker=dict(color=colour),
            hovertemplate="%{y}: %{x:.3f}<extra></extra>"))
    more = "" if len(result.loadings) <= MAX_LOADINGS else \
        f" ({MAX_LOADINGS} largest of {len(result.loadings)} features)"
    apply_style(figure, title=f"Loadings{more}", x_title="weight", legend_title="axis")
    figure.update_layout(barmode="group", height=max(360, 26 * len(names) + 140))
    return figure


def selected_rows(selection) -> list:
    """The row ids of selected points: ``selection`` is a plotly selection (a dict with
    "points", each with "customdata") or a list of such points."""
    points = selection.get("points", []) if isinstance(selection, dict) else selection
    rows = []
    for point in points or []:
        data = point.get("customdata") if isinstance(point, dict) else None
        if data is None:
            continue
        rows.append(data[0] if isinstance(data, (list, tuple)) else data)
    return list(dict.fromkeys(rows))


# ----------------------------------------------------------------------------------------


def _scatter_title(result) -> str:
    from analysis.projection import METHOD_TITLES

    sampled = f", a random sample of {result.n_rows}" if result.sampled else ""
    return f"{METHOD_TITLES[result.method]} of {len(result.row_ids)} rows{sampled}"


def _positions(result, table) -> np.ndarray:
    """Positions in ``table`` of the result's rows (StepError if the table lacks some)."""
    positions = np.asarray(result.positions)
    if len(positions) and positions.max() < table.n_rows \
            and np.array_equal(table.row_ids[positions], result.row_ids):
        return positions
    found = pd.Index(table.row_ids).get_indexer(pd.Index(result.row_ids))
    if (found < 0).any():
        raise StepError(f"{table.name} does not hold every row of this result; draw it with "
                        "the table it was computed on.")
    return found


def _by_row(ids, source_ids, source_values, missing):
    """Values of ``source`` for ``ids`` (``missing`` where the source has no such row)."""
    found = pd.Index(source_ids).get_indexer(pd.Index(ids))
    values = np.asarray(source_values)
    out = np.array([values[f] if f >= 0 else missing for f in found], dtype=object)
    return out


def _colouring(result, table, positions, color_by, clustering, outliers):
    """("labels" | "numbers" | None, values per point, title)."""
    if color_by is None:
        return None, None, ""
    if color_by == "cluster":
        if clustering is None:
            raise StepError("colouring by cluster needs a clustering result; run a clustering "
                            "step first.")
        labels = _by_row(result.row_ids, clustering.row_ids, clustering.labels, None)
        words = np.array(["not clustered" if c is None else "noise" if c == -1
                          else f"cluster {c}" for c in labels], dtype=object)
        return "labels", words, "cluster"
    if color_by == "outlier score":
        if outliers is None:
            raise StepError("colouring by outlier score needs the result of an objects-to-"
                            "look-at step; run one first.")
        scores = _by_row(result.row_ids, outliers.row_ids, outliers.scores, np.nan)
        return "numbers", scores.astype(float), "outlier score"
    column = color_by
    if color_by == "target":
        if result.target is None:
            raise StepError("this projection has no target to colour by; name a column "
                            "instead.")
        column = result.target
    if table is None:
        raise StepError(f"colouring by {column!r} needs the table the projection was "
                        "computed on.")
    info = table.column(column)
    if info.role == "array":
        raise StepError(f"{table.name}: {column!r} holds arrays, which have no colour; "
                        "choose a number, flag or category column.")
    if info.role == "invariant" and info.dtype in ("integer", "real", "big integer",
                                                   "rational"):
        values = table.numeric(column)[positions]
        if np.isinf(values).any():
            # integers past the float range: colour on the signed log scale, and say so
            cells = table.frame[column].to_numpy(dtype=object)[positions]
            return "numbers", np.array([_signed_log(v) for v in cells]), f"slog({column})"
        return "numbers", values, column
    texts = _column_text(table, column, positions)
    return "labels", np.array(texts, dtype=object), column


def _signed_log(value) -> float:
    """sign(x) * log10(1 + |x|), exact enough for integers of any size."""
    if value is None or (isinstance(value, float) and np.isnan(value)):
        return np.nan
    size = math.log10(1 + abs(value))  # log10 takes Python integers of any size
    return -size if value < 0 else size


def _label_groups(values: np.ndarray):
    """(label, colour, member mask) per label: common labels first, missing last, in grey."""
    labels = np.array(["missing" if v is None else str(v) for v in values], dtype=object)
    counts = pd.Series(labels).value_counts()
    present = [label for label in counts.index if label != "missing"]
    if len(present) > MAX_LABELS:
        kept = set(present[: MAX_LABELS - 1])
        labels = np.array([v if v in kept or v == "missing" else "other" for v in labels],
                          dtype=object)
        present = present[: MAX_LABELS - 1] + ["other"]
    for index, label in enumerate(sorted(present, key=_label_order)):
        colour = MISSING_COLOUR if label == "other" else PALETTE[index % len(PALETTE)]
        yield label, colour, labels == label
    if (labels == "missing").any():
        yield "missing", MISSING_COLOUR, labels == "missing"


def _label_order(label: str):
    """Numbers in numeric order, then other labels alphabetically; "other" last."""
    if label == "other":
        return (2, 0.0, label)
    try:
        return (0, float(Fraction(label)), label)
    except (ValueError, ZeroDivisionError):
        return (1, 0.0, label)


def _column_text(table, name: str, positions: np.ndarray) -> list[str]:
    """A column's values at ``positions`` as short text."""
    table.column(name)
    values = table.frame[name].to_numpy(dtype=object)[positions]
    return [_cell_text(v) for v in values]


def _cell_text(value) -> str:
    if value is None or (isinstance(value, float) and np.isnan(value)) or value is pd.NA:
        return "missing"
    if isinstance(value, Fraction):
        return fraction_text(value)
    if isinstance(value, np.ndarray):
        text = np.array2string(value, separator=",", threshold=40).replace("\n", "")
        return text if len(text) <= 60 else text[:57] + "..."
    if isinstance(value, (float, np.floating)):
        return f"{float(value):.6g}"
    if isinstance(value, (np.bool_, bool)):
        return "true" if value else "false"
    return str(value)
