"""Figures for the objects-to-look-at step: the score of each listed row, with its reasons on
hover and its id in customdata, coloured by what put it on the list; and the standing of each
listed row on each measure, which shows why it is there."""

from __future__ import annotations

import numpy as np
import plotly.graph_objects as go

from analysis.figures.style import PALETTE, SEQUENTIAL, apply_style, escaped
from analysis.plain import row_id

# Rows drawn: the top of the list.
MAX_BARS = 50
GROUP_COLOURS = {"position": PALETTE[0], "separator": PALETTE[1], "relations": PALETTE[3]}
GROUP_WORDS = {"position": "sits apart from the other rows",
               "separator": "a cross-validated model of the target gets it wrong",
               "relations": "breaks a relation or bound"}


def figures(result, table=None, **_) -> list:
    """Titled figures for an outliers result (none when the list is empty)."""
    if not result.outliers:
        return []
    return [("Objects to look at", score_figure(result)),
            ("Standing of each listed row on each measure", standing_figure(result))]


def score_figure(result) -> go.Figure:
    """The listed rows' scores as dots, the first row at the top.

    Dots rather than bars: the scores of a list's top crowd near 1, and the axis is zoomed
    to tell them apart, which bars (read by their length from 0) would misrepresent.
    """
    listed = list(result.outliers[:MAX_BARS])
    figure = go.Figure()
    labels = [f"{o.rank}. {row_id(o.row)}" for o in listed]
    groups = [_strongest(o.standing) for o in listed]
    for group in dict.fromkeys(groups):
        members = [i for i, g in enumerate(groups) if g == group]
        figure.add_trace(go.Scatter(
            y=[labels[i] for i in members], x=[listed[i].score for i in members],
            mode="markers", name=GROUP_WORDS[group],
            marker=dict(color=GROUP_COLOURS[group], size=10, line=dict(width=0)),
            customdata=np.array([[row_id(listed[i].row), _reason_text(listed[i].reasons)]
                                 for i in members], dtype=object),
            hovertemplate=("<b>%{customdata[0]}</b><br>score %{x:.4f}<br>%{customdata[1]}"
                           "<extra></extra>")))
    more = "" if len(result.outliers) <= MAX_BARS else \
        f" (first {MAX_BARS} of {len(result.outliers)})"
    apply_style(figure, title=f"Objects to look at{more}",
                x_title="score: highest standing on position, separator or relations",
                legend_title="strongest reason")
    figure.update_yaxes(categoryorder="array", categoryarray=labels[::-1])
    low = min(o.score for o in listed)
    figure.update_xaxes(range=[low - 0.05 * (1 - low) - 0.002, 1.0 + 0.05 * (1 - low) + 0.002])
    figure.update_layout(height=max(360, 22 * len(listed) + 160))
    return figure


def standing_figure(result) -> go.Figure:
    """Listed rows by measures: the fraction of other rows each row outscores on each."""
    listed = list(result.outliers[:MAX_BARS])
    measures = list(result.measures)
    labels = [f"{o.rank}. {row_id(o.row)}" for o in listed]
    z = np.array([[o.standing.get(m, np.nan) for m in measures] for o in listed])
    figure = go.Figure(go.Heatmap(
        z=z, x=measures, y=labels, zmin=0, zmax=1, colorscale=SEQUENTIAL,
        customdata=np.array([[row_id(o.row)] * len(measures) for o in listed], dtype=object),
        colorbar=dict(title=dict(text="standing"), thickness=14, outlinewidth=0,
                      tickformat=".0%"),
        hovertemplate=("<b>%{customdata}</b><br>%{x}: scores higher than %{z:.1%} of the "
                       "other rows<extra></extra>")))
    apply_style(figure, title="Why each row is listed: standing on each measure")
    figure.update_yaxes(autorange="reversed", showgrid=False)
    figure.update_xaxes(showgrid=False, side="top")
    figure.update_layout(height=max(360, 22 * len(listed) + 200), margin=dict(t=100))
    return figure


def _strongest(standing: dict) -> str:
    """The group (position, separator or relations) with the highest standing."""
    from analysis.outliers import POSITION

    groups = {}
    position = [standing[m] for m in POSITION if m in standing]
    if position:
        groups["position"] = float(np.mean(position))
    for name in ("separator", "relations"):
        if name in standing:
            groups[name] = standing[name]
    return max(groups, key=groups.get) if groups else "position"


def _reason_text(reasons) -> str:
    # hover text is HTML-like: escape, and put each reason on its own line
    return "<br>".join(escaped(r) for r in reasons)
