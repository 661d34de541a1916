"""The house style of every figure: a white page, a light grid, readable type, our colours.

Builders call :func:`apply_style` last, so the app, the report and exported pictures look
alike.
"""

from __future__ import annotations

import plotly.graph_objects as go

# Label colours, chosen to stay apart from each other on white and in print.
PALETTE = ("#2b6cb0", "#d9822b", "#2f9e72", "#c0392b", "#7b5ea7", "#8c6d46", "#d35d9a",
           "#5f6b73", "#a6a21f", "#1f9bb0", "#e0b43a", "#4a4fb5")
MISSING_COLOUR = "#b8bec4"
# Numbers: pale gold through teal to deep indigo, readable at both ends on white.
SEQUENTIAL = [[0.0, "#e3c94f"], [0.5, "#3f9c8f"], [1.0, "#2c3270"]]
# Signed differences: blue below, near-white at zero, red above.
DIVERGING = [[0.0, "#2b6cb0"], [0.5, "#f4f4f2"], [1.0, "#c0392b"]]
FONT = "Helvetica Neue, Helvetica, Arial, sans-serif"


def apply_style(figure: go.Figure, *, title: str, x_title: str = "", y_title: str = "",
                legend_title: str = "") -> go.Figure:
    """Our plain look: white background, light grid, readable type, nothing borrowed."""
    axis = dict(showgrid=True, gridcolor="#e8eaed", zeroline=False, linecolor="#9aa0a6",
                automargin=True,
                ticks="outside", tickcolor="#9aa0a6", title_font=dict(size=14),
                tickfont=dict(size=12))
    figure.update_layout(
        template="none",
        title=dict(text=title, x=0.01, xanchor="left", font=dict(size=17, color="#1f2328")),
        font=dict(family=FONT, size=13, color="#1f2328"),
        paper_bgcolor="white", plot_bgcolor="white",
        margin=dict(l=70, r=30, t=60, b=60),
        legend=dict(title=dict(text=legend_title), bgcolor="rgba(255,255,255,0.85)",
                    bordercolor="#dfe2e5", borderwidth=1, font=dict(size=12)),
        hoverlabel=dict(bgcolor="white", bordercolor="#9aa0a6", font=dict(family=FONT,
                                                                           size=12)),
    )
    figure.update_xaxes(title_text=x_title, **axis)
    figure.update_yaxes(title_text=y_title, **axis)
    return figure


def escaped(text) -> str:
    """Text for plotly's hover and titles, which read HTML-like markup: a column named
    "a<b" must show as written."""
    return str(text).replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;")
