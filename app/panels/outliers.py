"""Objects to look at: a ranked list of the objects that stand out, with the reasons, to
follow up by hand; downloadable as spreadsheet-safe CSV."""

from __future__ import annotations

import streamlit as st

from analysis.export import csv_text
from app import display, settings
from app.figure_view import show_figures, slug


def describe(params: dict, result=None) -> str:
    """What the step lists; once it ran, whether a prediction of the target took part (it
    cannot when the target does not fit one)."""
    target = params.get("target")
    judged = target and (result is None or "separator" in result.measures)
    return (f"the {params.get('top')} objects that stand out most"
            + (f", including those whose {target} the other invariants predict worst"
               if judged else ""))


def settings_panel(ctx: settings.StepContext) -> None:
    table = ctx.table
    left, middle, right = st.columns(3)
    settings.column(ctx, "target", settings.label_columns(table), container=left)
    settings.whole_number(ctx, "top", container=middle)
    settings.flag(ctx, "relations", container=right)
    settings.feature_block(ctx)
    left, middle, right = st.columns(3)
    settings.whole_number(ctx, "k", container=left)
    settings.whole_number(ctx, "n_neighbors", container=middle)
    settings.seed(ctx, container=right)


def show(ctx: settings.StepContext, result) -> None:
    display.warnings(result.warnings)
    table = ctx.table
    measures = ", ".join(result.measures) or "nothing: no measure tells the objects apart"
    st.markdown(f"**{display.plural(len(result.outliers), 'object')} to look at**, of "
                f"{display.number(result.n_rows)}, ranked by {measures}.")
    if not result.outliers:
        return
    frame = result.to_frame()
    label = table.id_column or "row"
    shown = frame.rename(columns={"row": label})
    shown[label] = [display.cell(v) for v in shown[label]]
    event = st.dataframe(shown, hide_index=True, key=ctx.key("list"), on_select="rerun",
                         selection_mode="multi-row",
                         column_config={"score": st.column_config.NumberColumn(format="%.3f")})
    left, right = st.columns([3, 1], vertical_alignment="center")
    caption = f"Score: {result.combination}. Select rows to see all their invariants."
    if result.open_values:
        caption += (f" The last {display.plural(len(result.open_values), 'object')} have an "
                    f"open value of {result.target} (missing or an interval) that a confident "
                    "prediction would settle: predictions to check by hand, not values.")
    left.caption(caption)
    right.download_button("Download the list (CSV)", data=csv_text(frame),
                          file_name=f"{slug(table.name)}-objects-to-look-at.csv",
                          mime="text/csv", key=ctx.key("csv"), icon=":material/download:",
                          on_click="ignore",
                          width="stretch")
    picked = list(getattr(getattr(event, "selection", None), "rows", []) or [])
    if picked:
        listed = (*result.outliers, *result.open_values)
        ids = [listed[i].row for i in picked if i < len(listed)]
        st.dataframe(display.rows_frame(table, ids), hide_index=True,
                     key=ctx.key("picked"))
    show_figures(result, table, ctx.key("figures"), vector=ctx.vector)
    display.notes(result.notes)
