"""The overview step: how many objects, what each column holds, pairs that move together."""

from __future__ import annotations

import pandas as pd
import streamlit as st

from app import display, settings
from app.figure_view import show_figures


def describe(params: dict) -> str:
    return "the table's columns, ranges and strongly correlated pairs"


def settings_panel(ctx: settings.StepContext) -> None:
    settings.whole_number(ctx, "top_correlations", "Correlated pairs to list", minimum=0,
                          maximum=100, help="Pairs of invariants with Pearson |r| ≥ 0.9.")


def show(ctx: settings.StepContext, result) -> None:
    left, middle, right = st.columns(3)
    left.metric("Objects (rows)", display.number(result.rows))
    middle.metric("Columns", len(result.columns))
    right.metric("Named by", result.id_column or "row number")
    for warning in result.warnings:
        st.caption(f"Note: {warning}")
    st.dataframe(_columns_frame(result), hide_index=True, key=ctx.key("columns_table"))
    if result.correlations:
        lines = [f"- `{a}` and `{b}`: Pearson r = {r:+.3f}" for a, b, r in result.correlations]
        st.markdown("**Invariants that move together** (|r| ≥ 0.9)\n" + "\n".join(lines))
    show_figures(result, ctx.table, ctx.key("figures"), vector=ctx.vector)


def _columns_frame(result) -> pd.DataFrame:
    rows = []
    for c in result.columns:
        if c.minimum is not None:
            values = f"{c.minimum} … {c.maximum}"
        else:
            values = ", ".join(f"{v} ({n})" for v, n in c.common[:4])
        rows.append({"column": c.name, "role": c.role, "type": c.dtype,
                     "missing": c.missing, "distinct": c.distinct, "values": values,
                     "mean": "" if c.mean is None else display.number(c.mean)})
    return pd.DataFrame(rows)
