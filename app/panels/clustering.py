"""The clustering step: groups of similar objects, the sweep that chose them, and what sets
each group apart."""

from __future__ import annotations

import pandas as pd
import streamlit as st

from app import display, settings
from app.figure_view import show_figures

METHODS = {
    "auto": "choose by a sweep (k-means, Gaussian mixture, agglomerative)",
    "kmeans": "k-means",
    "gmm": "Gaussian mixture",
    "agglomerative": "agglomerative (Ward)",
    "hdbscan": "HDBSCAN (finds its own number)",
}


def describe(params: dict, result=None) -> str:
    method = METHODS.get(params.get("method"), params.get("method"))
    if params.get("method") == "auto":
        method = "clusters chosen by a sweep"
    k = params.get("k")
    compare = params.get("compare")
    return (f"{method}" + (f", k = {k}" if k else "")
            + (f", compared with {compare}" if compare else ""))


def settings_panel(ctx: settings.StepContext) -> None:
    table = ctx.table
    left, right = st.columns(2)
    settings.choice(ctx, "method", "Method", METHODS, container=left)
    settings.column(ctx, "compare", "Compare with", settings.label_columns(table),
                    container=right, help="A label to compare the clusters with (adjusted "
                                          "Rand index, normalized mutual information). It is "
                                          "not used as a feature.")
    left, right = st.columns(2)
    settings.whole_number(ctx, "k", "Number of clusters (0: let the sweep choose)",
                          optional=True, maximum=200, container=left)
    settings.whole_range(ctx, "k_range", "The sweep tries k from … to", minimum=2,
                         maximum=30, container=right)
    # The compared label is left out of the features, as a target would be.
    settings.feature_block(ctx, label="compare")
    left, middle, right = st.columns(3)
    settings.flag(ctx, "standardize", "Standardize features", container=left)
    if ctx.params.get("method") == "hdbscan":
        settings.whole_number(ctx, "min_cluster_size", "Smallest cluster (HDBSCAN)",
                              minimum=2, maximum=100_000, container=middle)
    settings.seed(ctx, container=right)


def show(ctx: settings.StepContext, result) -> None:
    display.warnings(result.warnings)
    table = ctx.table
    title = METHODS.get(result.method, result.method).split(" (")[0]
    st.markdown(f"**{title}, k = {result.k}** on {display.plural(result.n_rows, 'object')}. "
                f"{result.reason}")
    facts = st.columns(3)
    facts[0].metric("Clusters", result.k)
    facts[1].metric("Silhouette", display.number(result.silhouette),
                    help="From -1 to 1; higher means tighter, better separated clusters.")
    if result.agreement is not None:
        facts[2].metric(f"Agreement with {result.compare}",
                        display.number(result.agreement.get("ari")),
                        delta=f"adjusted Rand index; NMI "
                              f"{display.number(result.agreement.get('nmi'))}",
                        delta_color="off", delta_arrow="off",
                        help="Adjusted Rand index: 0 is chance, 1 is the same partition. "
                             "Normalized mutual information: "
                             f"{display.number(result.agreement.get('nmi'))}.")
    show_figures(result, table, ctx.key("figures"), vector=ctx.vector)
    st.caption("To see the clusters in a picture, colour a projection step by cluster.")
    if result.profiles:
        st.markdown("##### What sets each cluster apart")
        st.dataframe(pd.DataFrame([{
            "cluster": "noise" if p.cluster == -1 else p.cluster, "objects": p.size,
            "differs from the rest in": "; ".join(p.distinguished_by) or "nothing notable"}
            for p in result.profiles]), hide_index=True, key=ctx.key("profiles"))
    if result.sweep:
        with st.expander(f"The sweep ({len(result.sweep)} clusterings tried)"):
            st.dataframe(pd.DataFrame([{
                "method": METHODS.get(e.method, e.method).split(" (")[0], "k": e.k,
                "silhouette": e.silhouette, "BIC": e.bic, "clusters": e.clusters,
                "noise": e.noise} for e in result.sweep]),
                hide_index=True, key=ctx.key("sweep"))
    display.notes(result.notes)
