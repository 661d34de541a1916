"""The overview step: how many objects, what each column holds, pairs that move together."""

from __future__ import annotations

import pandas as pd
import streamlit as st

from app import display, settings
from app.figure_view import show_figures


def describe(params: dict, result=None) -> str:
    return "the table's columns, ranges and strongly correlated pairs"


def settings_panel(ctx: settings.StepContext) -> None:
    settings.whole_number(ctx, "top_correlations")


def show(ctx: settings.StepContext, result) -> None:
    # how the table was read (labels merged, cells not read as numbers): first, as elsewhere
    display.warnings(result.warnings)
    named = f"named by {result.id_column}" if result.id_column else "named by row number"
    missing = sum(1 for c in result.columns if c.missing)
    st.markdown(f"{display.plural(result.rows, 'object')}, "
                f"{display.plural(len(result.columns), 'column')}, {named}; "
                + (f"{display.plural(missing, 'column')} with missing values."
                   if missing else "no missing values."))
    if result.correlations:
        lines = [f"- `{a}` and `{b}`: Pearson r = {r:+.3f}" for a, b, r in result.correlations]
        st.markdown("**Invariants that move together** (|r| ≥ 0.9)\n" + "\n".join(lines))
        if result.correlation_rows is not None:
            st.caption(f"Correlations computed on a random sample of "
                       f"{result.correlation_rows:,} of the {result.rows:,} rows.")
    with st.expander(f"Every column: ranges, means, common values ({len(result.columns)})",
                     icon=":material/view_list:"):
        st.dataframe(_columns_frame(result), hide_index=True, key=ctx.key("columns_table"))
    show_figures(result, ctx.table, ctx.key("figures"), vector=ctx.vector)
    display.notes(result.notes)


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
