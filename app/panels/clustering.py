"""The clustering step: groups of similar objects, the sweep that chose them, and what sets
each group apart."""

from __future__ import annotations

import pandas as pd
import streamlit as st

from app import display, settings
from app.figure_view import show_figures


def _method_words() -> dict:
    return settings.words("clustering", "method")


def describe(params: dict, result=None) -> str:
    method = _method_words().get(params.get("method"), params.get("method"))
    if params.get("method") == "auto":
        method = "clusters chosen by a sweep"
    k = params.get("k")
    compare = params.get("compare")
    return (f"{method}" + (f", k = {k}" if k else "")
            + (f", compared with {compare}" if compare else ""))


def settings_panel(ctx: settings.StepContext) -> None:
    table = ctx.table
    left, right = st.columns(2)
    settings.choice(ctx, "method", container=left)
    settings.column(ctx, "compare", settings.label_columns(table), container=right)
    left, right = st.columns(2)
    settings.whole_number(ctx, "k", container=left)
    settings.whole_range(ctx, "k_range", container=right)
    # The compared label is left out of the features, as a target would be.
    settings.feature_block(ctx)
    left, middle, right = st.columns(3)
    settings.flag(ctx, "standardize", container=left)
    if ctx.params.get("method") == "hdbscan":
        settings.whole_number(ctx, "min_cluster_size", container=middle)
    settings.seed(ctx, container=right)


def show(ctx: settings.StepContext, result) -> None:
    display.warnings(result.warnings)
    table = ctx.table
    title = _method_words().get(result.method, result.method).split(" (")[0]
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
                "method": _method_words().get(e.method, e.method).split(" (")[0], "k": e.k,
                "silhouette": e.silhouette, "BIC": e.bic, "clusters": e.clusters,
                "noise": e.noise} for e in result.sweep]),
                hide_index=True, key=ctx.key("sweep"))
    display.notes(result.notes)
