"""The whole page: sidebar (table, share) and the study column."""

from __future__ import annotations

import streamlit as st

from analysis.errors import ScoutError
from app import loading, share, state, study_section, table_section

CAVEAT = ("A relation, bound or separating equation found here holds on the rows of this "
          "table: it is a conjecture the table supports, not a proof.")


def icon():
    """The page's icon, drawn here: a few points of a scatter picture on the page's blue.

    An image made in the process is served by the app itself, so the page asks no other host
    for it (a named icon or an emoji would be fetched from the network).
    """
    from PIL import Image, ImageDraw

    size = 64
    picture = Image.new("RGBA", (size, size), (0, 0, 0, 0))
    pen = ImageDraw.Draw(picture)
    pen.rounded_rectangle((2, 2, size - 3, size - 3), radius=12, fill=(58, 97, 144, 255))
    for x, y in ((16, 46), (26, 34), (36, 38), (44, 22), (50, 14)):
        pen.ellipse((x - 5, y - 5, x + 5, y + 5), fill=(255, 255, 255, 255))
    return picture


def _first_visit() -> None:
    """Open a sample table with its short study (run as the page draws): the one named in
    the address (``?table=graphs_up_to_7.csv``), else the lattice polygons."""
    if state.study() is not None:
        return
    name = st.query_params.get("table")
    if name not in loading.sample_names():
        name = loading.FIRST_SAMPLE
    st.session_state["table.sample"] = name
    try:
        loading.put_table(loading.load_sample(name))
    except ScoutError as exc:  # a broken installation, not the user's doing
        st.error(f"The sample table could not be opened: {exc}")
        st.stop()


def main() -> None:
    _first_visit()
    with st.sidebar:
        st.markdown("## Invariant Scout")
        st.caption("Patterns in a table of computed invariants.")
        table_section.table_picker()
        st.divider()
        share.share_panel()
    table_section.table_header()
    _digest_warning()
    for notice in state.notices_of("focus", "study", "kept"):
        if notice.kind == "focus":
            st.error(notice.text)
        else:
            st.info(notice.text)
    st.caption(CAVEAT)
    study_section.show_study()
    _warm_up_umap()


def _digest_warning() -> None:
    """Say so when the study was saved with other bytes than the table on the page."""
    study = state.study()
    table = state.table_state().base
    if study.table_digest and study.table_digest != table.digest:
        st.warning(f"This study was saved with a table whose contents differ from "
                   f"{table.name} (sha256 {study.table_digest[:12]}… against "
                   f"{table.digest[:12]}…); its numbers may differ from the saved ones.")


def _warm_up_umap() -> None:
    """Once the page is drawn, let UMAP compile its code in the background, so that the
    first UMAP picture does not wait 15 s or more. Not under AppTest, where the page runs
    inside the test process and a background compile would only slow the tests."""
    if st.get_option("global.appTest"):
        return
    try:
        from analysis.warmup import start_umap_warmup
    except ImportError:
        return
    start_umap_warmup()
