"""Figures for the clustering step: the sweep (score against k, one line per method) and the
cluster profiles (how far each cluster's mean of each feature sits from the other rows').

A picture of the clusters themselves is the projection's scatter coloured by cluster
(``analysis.figures.projection.figures(..., color_by="cluster", clustering=result)``).
"""

from __future__ import annotations

import numpy as np
import plotly.graph_objects as go

from analysis.figures.style import DIVERGING, PALETTE, apply_style

# Features shown in the profile heatmap: those with the largest differences.
MAX_PROFILE_FEATURES = 30
METHOD_COLOURS = {"kmeans": PALETTE[0], "gmm": PALETTE[1], "agglomerative": PALETTE[2],
                  "hdbscan": PALETTE[4]}


def figures(result, table=None, **_) -> list:
    """Titled figures for a clustering result: the sweep (when k was swept), BIC for
    Gaussian mixtures, and the cluster profiles."""
    out = []
    scored = [e for e in result.sweep if e.k is not None and e.silhouette is not None]
    if len({e.k for e in scored}) > 1:
        out.append(("Silhouette against k", sweep_figure(result)))
    if len({e.k for e in result.sweep if e.bic is not None}) > 1:
        out.append(("BIC of the Gaussian mixtures", bic_figure(result)))
    out.append(("Cluster profiles", profile_figure(result)))
    return out


def sweep_figure(result) -> go.Figure:
    """Silhouette against k, one line per method, the chosen run circled."""
    from analysis.clustering import METHOD_TITLES

    figure = go.Figure()
    for method in dict.fromkeys(e.method for e in result.sweep):
        entries = sorted((e for e in result.sweep if e.method == method and e.k is not None),
                         key=lambda e: e.k)
        if not entries:
            continue
        figure.add_trace(go.Scatter(
            x=[e.k for e in entries],
            y=[np.nan if e.silhouette is None else e.silhouette for e in entries],
            mode="lines+markers", name=METHOD_TITLES[method],
            line=dict(color=METHOD_COLOURS.get(method, PALETTE[5]), width=2),
            marker=dict(size=8),
            customdata=[[e.clusters] for e in entries],
            hovertemplate=(f"{METHOD_TITLES[method]}<br>k = %{{x}} (%{{customdata[0]}} "
                           "clusters found)<br>silhouette %{y:.3f}<extra></extra>")))
    if result.silhouette is not None:
        figure.add_trace(go.Scatter(
            x=[result.k], y=[result.silhouette], mode="markers", name="chosen",
            marker=dict(size=18, color="rgba(0,0,0,0)", line=dict(color="#1f2328", width=2)),
            hovertemplate="chosen: %{x} clusters<extra></extra>"))
    apply_style(figure, title="Silhouette against k (higher: better separated clusters)",
                x_title="k (clusters asked for)", y_title="silhouette", legend_title="method")
    figure.update_xaxes(dtick=1)
    return figure


def bic_figure(result) -> go.Figure:
    """BIC of each Gaussian mixture against k (lower: better)."""
    entries = sorted((e for e in result.sweep if e.bic is not None), key=lambda e: e.k)
    best = min(entries, key=lambda e: e.bic)
    figure = go.Figure()
    figure.add_trace(go.Scatter(
        x=[e.k for e in entries], y=[e.bic for e in entries], mode="lines+markers",
        name="Gaussian mixture", line=dict(color=METHOD_COLOURS["gmm"], width=2),
        marker=dict(size=8), hovertemplate="k = %{x}<br>BIC %{y:.1f}<extra></extra>"))
    figure.add_trace(go.Scatter(
        x=[best.k], y=[best.bic], mode="markers", name="lowest BIC",
        marker=dict(size=18, color="rgba(0,0,0,0)", line=dict(color="#1f2328", width=2)),
        hovertemplate="lowest BIC at k = %{x}<extra></extra>"))
    apply_style(figure, title="BIC of the Gaussian mixtures (lower: better)",
                x_title="k (mixture components)", y_title="BIC")
    figure.update_xaxes(dtick=1)
    return figure


def profile_figure(result) -> go.Figure:
    """Clusters by features: colour is the standardized difference from the other rows,
    the text is the cluster's mean in the table's own units."""
    profiles = list(result.profiles)
    names = list(profiles[0].means) if profiles else []
    if len(names) > MAX_PROFILE_FEATURES:
        spread = {n: max(abs(p.differences[n]) for p in profiles) for n in names}
        names = sorted(names, key=lambda n: -spread[n])[:MAX_PROFILE_FEATURES]
    z = np.array([[p.differences[n] for n in names] for p in profiles])
    text = [[f"{p.means[n]:.3g}" for n in names] for p in profiles]
    rows = [("noise" if p.cluster == -1 else f"cluster {p.cluster}") + f" ({p.size} rows)"
            for p in profiles]
    reach = float(np.nanmax(np.abs(z))) if z.size else 1.0
    figure = go.Figure(go.Heatmap(
        z=z, x=names, y=rows, text=text, texttemplate="%{text}" if len(names) <= 15 else None,
        colorscale=DIVERGING, zmid=0, zmin=-reach, zmax=reach,
        colorbar=dict(title=dict(text="difference<br>(standard<br>deviations)"),
                      thickness=14, outlinewidth=0),
        hovertemplate=("%{y}<br>%{x}: mean %{text}<br>%{z:+.2f} standard deviations from "
                       "the other rows<extra></extra>")))
    more = "" if len(profiles[0].means if profiles else ()) <= MAX_PROFILE_FEATURES else \
        f" ({MAX_PROFILE_FEATURES} most different features)"
    apply_style(figure, title=f"Cluster profiles: mean of each feature{more}")
    figure.update_xaxes(showgrid=False, tickangle=-35)
    figure.update_yaxes(showgrid=False, autorange="reversed")
    figure.update_layout(height=max(320, 48 * len(rows) + 220))
    return figure
