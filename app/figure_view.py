"""Drawing a step's figures: plotly charts that list the rows a reader selects, and saving
them as pictures (PNG from the chart's own camera button; SVG and PDF through kaleido when a
chromium it can drive is installed)."""

from __future__ import annotations

import re

import streamlit as st

from analysis.figures import figures_for, picture_bytes
from app import display


def chart_config(filename: str) -> dict:
    """plotly's toolbar: keep the camera (toImage) for PNG, drop the plotly logo."""
    return {
        "displaylogo": False,
        "toImageButtonOptions": {"format": "png", "filename": filename, "scale": 2},
    }


def slug(text: str) -> str:
    return re.sub(r"[^a-z0-9]+", "-", text.lower()).strip("-") or "figure"


@st.cache_resource(show_spinner=False)
def _vector_export_check() -> str | None:
    """None when kaleido can write SVG here, else the reason it cannot (checked once)."""
    try:
        import plotly.graph_objects as go

        go.Figure(go.Scatter(x=[0, 1], y=[0, 1])).to_image(format="svg")
    except Exception as exc:  # noqa: BLE001 - any failure means: no vector export here
        reason = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
        return reason[:300]
    return None


def vector_export_problem() -> str | None:
    return _vector_export_check()


def show_figures(result, table, key: str, *, vector: bool = False, **options) -> None:
    """Draw every figure of ``result``; scatter plots list the rows the reader selects."""
    try:
        figures = figures_for(result, table, **options)
    except Exception as exc:  # noqa: BLE001 - a picture that fails must not hide the numbers
        st.error(f"The picture could not be drawn ({type(exc).__name__}: {exc}). The numbers "
                 "below are unaffected.")
        return
    if not figures:
        return
    if len(figures) == 1:
        places = [st.container()]
    else:
        # One picture at a time, the others a click away: the page stays short.
        places = st.tabs([title for title, _ in figures])
    for number, ((title, figure), place) in enumerate(zip(figures, places)):
        with place:
            show_figure(figure, f"{key}.fig{number}", title=title, table=table,
                        vector=vector)


def row_traces(figure, table) -> set[int]:
    """The traces whose points are objects of the table: markers (no lines) whose customdata
    starts with a row id. Their points can be selected to list those objects."""
    ids = {display.row_key(v) for v in table.row_ids}
    found = set()
    for number, trace in enumerate(figure.data):
        data = getattr(trace, "customdata", None)
        mode = getattr(trace, "mode", None) or "markers"
        if data is None or "lines" in mode or len(data) == 0:
            continue
        firsts = [row[0] if isinstance(row, (list, tuple)) or getattr(row, "ndim", 0)
                  else row for row in data]
        if all(display.row_key(v) in ids for v in firsts):
            found.add(number)
    return found


def show_figure(figure, key: str, *, title: str, table=None, vector: bool = False) -> None:
    name = slug(title)
    traces = row_traces(figure, table) if table is not None else set()
    if traces:
        event = st.plotly_chart(figure, key=key, on_select="rerun", theme=None,
                                selection_mode=("points", "box", "lasso"),
                                config=chart_config(name))
        _list_selected(selected_ids(event, traces), table, key)
    else:
        st.plotly_chart(figure, key=key, theme=None, config=chart_config(name))
    if vector:
        row = st.container(horizontal=True, gap="small", vertical_alignment="center")
        row.caption("Save this picture as")
        row.download_button("SVG", data=lambda f=figure: picture_bytes(f, "svg"),
                            file_name=f"{name}.svg", mime="image/svg+xml",
                            key=f"{key}.svg", icon=":material/download:", on_click="ignore")
        row.download_button("PDF", data=lambda f=figure: picture_bytes(f, "pdf"),
                            file_name=f"{name}.pdf", mime="application/pdf",
                            key=f"{key}.pdf", icon=":material/download:", on_click="ignore")


def selected_ids(event, traces: set[int] | None = None) -> list:
    """Row ids of the selected points (the first entry of each point's customdata), from
    the given traces only when ``traces`` is given."""
    if not event:
        return []
    try:
        points = event["selection"]["points"]
    except (KeyError, TypeError):
        return []
    ids = []
    for point in points:
        if traces is not None and point.get("curve_number") not in traces:
            continue
        data = point.get("customdata")
        if isinstance(data, (list, tuple)):
            data = data[0] if data else None
        if data is not None and data not in ids:
            ids.append(data)
    return ids


def _list_selected(ids: list, table, key: str) -> None:
    if not ids:
        st.caption("Click a point, or drag a box or lasso, to list those objects here.")
        return
    st.markdown(f"**{display.plural(len(ids), 'object')} selected**")
    st.dataframe(display.rows_frame(table, ids), hide_index=True, key=f"{key}.rows",
                 height=min(38 + 35 * len(ids), 360))
