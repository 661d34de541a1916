"""The projection step: a 2-d picture of the objects (PCA, UMAP, t-SNE, LDA)."""

from __future__ import annotations

import streamlit as st

from app import display, settings
from app.figure_view import show_figures

NO_COLOUR = "(one colour)"


def describe(params: dict, result=None) -> str:
    """The step's caption. The colouring is a view choice made under the picture, so the
    caption names the target only where it changes the picture's axes (LDA)."""
    method = settings.words("projection", "method").get(
        params.get("method"), params.get("method")).split(" (")[0]
    target = params.get("target")
    separating = params.get("method") == "lda" and target
    return f"{method} of the feature columns" + (f", separating {target}" if separating else "")


def settings_panel(ctx: settings.StepContext) -> None:
    left, right = st.columns(2)
    settings.choice(ctx, "method", container=left)
    settings.column(ctx, "target", settings.label_columns(ctx.table), container=right)
    settings.feature_block(ctx)
    method = ctx.params.get("method")
    left, middle, right = st.columns(3)
    settings.flag(ctx, "standardize", container=left)
    if method == "umap":
        settings.whole_number(ctx, "n_neighbors", container=middle)
    if method == "tsne":
        settings.real_number(ctx, "perplexity", container=middle)
    if method in ("umap", "tsne"):
        settings.whole_number(ctx, "sample_size", container=right)
    settings.seed(ctx)


def show(ctx: settings.StepContext, result) -> None:
    display.warnings(result.warnings)
    table = ctx.table
    facts = [f"{display.number(result.n_projected)} objects drawn"
             + (f" (a random sample of {display.number(result.n_rows)})"
                if result.sampled else ""),
             f"{display.plural(len(result.features), 'feature')}"]
    if result.explained_variance_ratio is not None:
        shown = sum(result.explained_variance_ratio[:2])
        facts.append(f"the picture shows {shown:.0%} of the variance")
    st.markdown(" · ".join(facts))
    display.names_list("Features used", result.features)
    clustering = ctx.others.get("clustering")
    outliers = ctx.others.get("outliers")
    extra = tuple(name for name, found in (("cluster", clustering),
                                           ("outlier score", outliers)) if found is not None)
    colour, hover = view_options(ctx, table, result.target, extra=extra)
    show_figures(result, table, ctx.key("figures"), vector=ctx.vector, color_by=colour,
                 hover=hover, clustering=clustering, outliers=outliers)
    if result.loadings:
        lines = []
        for axis, index in (("x", 0), ("y", 1)):
            top = sorted(result.loadings.items(), key=lambda kv: -abs(kv[1][index]))[:3]
            words = ", ".join(f"`{name}` ({w[index]:+.2f})" for name, w in top)
            lines.append(f"- {axis}, the {result.axis_titles[index]}, is mostly {words}")
        st.markdown("\n".join(lines))
    display.notes(result.notes)


def view_options(ctx: settings.StepContext, table, target: str | None,
                 extra: tuple[str, ...] = ()) -> tuple[str | None, list[str]]:
    """Colour and hover choices for a scatter plot. They change the picture only, never the
    numbers, so they are not step settings and never re-run the step."""
    names = [c.name for c in table.columns if c.role not in ("array", "id")]
    first = (["target"] if target else []) + list(extra)
    options = [NO_COLOUR] + first + [n for n in names if n not in first]
    key, hover_key = ctx.key("colour"), ctx.key("hover")
    if st.session_state.get(key) not in options:
        st.session_state[key] = first[0] if first else NO_COLOUR
    invariants = [c.name for c in table.columns if c.role in ("invariant", "flag", "category")]
    if hover_key not in st.session_state:
        st.session_state[hover_key] = invariants[:4]
    elif any(h not in names for h in st.session_state[hover_key]):
        st.session_state[hover_key] = [h for h in st.session_state[hover_key] if h in names]
    left, right = st.columns([1, 2])
    words = {"target": f"target ({target})", "cluster": "cluster (from the clustering step)",
             "outlier score": "standing out (from the objects-to-look-at step)"}
    left.selectbox("Colour by", options, key=key, format_func=lambda v: words.get(v, v))
    right.multiselect("Show on hover", names, key=hover_key,
                      help="Besides the object's id.")
    colour = st.session_state[key]
    return (None if colour == NO_COLOUR else colour), list(st.session_state[hover_key])
