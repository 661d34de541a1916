"""Share: download the study and open one again, download the HTML report, and offer
figures as SVG and PDF where kaleido can drive a chromium."""

from __future__ import annotations

import dataclasses

import streamlit as st

from analysis.errors import ScoutError
from analysis.study import run_study, saved_results, study_file_text
from app import loading, state
from app.figure_view import slug, vector_export_problem


def study_text(study) -> str:
    """The study as the text of its .study.json file."""
    return study_file_text(study)


def study_with_results_text(study, table, cache) -> str:
    """The study with the results ``cache`` holds for its steps on ``table`` (the study's
    settings applied), as the text of its .study.json file."""
    return study_file_text(study, saved_results(study, table, cache))


def report_bytes(study, base_table, cache) -> bytes:
    """The study run (from cached results where they exist) as one offline HTML page."""
    from analysis.report import report_html

    run = run_study(study, base_table, cache=cache)
    return report_html(run, table=run.source_table).encode("utf-8")


def share_panel() -> None:
    study = state.study()
    table_state = state.table_state()
    pg = state.page()
    st.markdown("### Share")
    if st.session_state.get("share.title") != study.title:
        st.session_state["share.title"] = study.title
    st.text_input("Study title", key="share.title", on_change=_retitle)
    name = slug(study.title or table_state.name)
    st.download_button("Download the study", data=study_text(study),
                       file_name=f"{name}.study.json", mime="application/json",
                       key="share.study", icon=":material/download:", on_click="ignore",
                       width="stretch",
                       help="A small JSON file: the table's name and digest, its roles, and "
                            "every step with its settings and seed. Open it here again, or "
                            "re-run it with `python -m analysis run`.")
    cache = state.cache()
    st.download_button("Download the study with its results",
                       data=lambda: study_with_results_text(study, table_state.table, cache),
                       file_name=f"{name}.results.study.json", mime="application/json",
                       key="share.study_results", icon=":material/download:",
                       on_click="ignore", width="stretch",
                       help="The study file with every result computed so far, tied to the "
                            "table's digest: opened here with the same table, the results "
                            "show at once without running. Larger: it holds every row's "
                            "figures.")
    st.download_button("Download the report (HTML)",
                       data=lambda: report_bytes(study, table_state.base, cache),
                       file_name=f"{name}.html", mime="text/html", key="share.report",
                       icon=":material/description:", on_click="ignore", width="stretch",
                       help="One self-contained page with every step's numbers and "
                            "figures; it opens offline.")
    opened = st.file_uploader("Open a study", type=["json"], key="share.open",
                              help="A .study.json file saved from this page. Its steps "
                                   "replace the page and run again, or show their saved "
                                   "results when the file carries them for this table.")
    if opened is not None and opened.file_id != pg.study_upload_id:
        pg.study_upload_id = opened.file_id
        try:
            note = loading.open_study(loading.read_study(opened.name, opened.getvalue()))
        except ScoutError as exc:
            pg.study_error = str(exc)
        else:
            pg.study_error = None
            state.clear_notices("study")
            if note:
                state.post("study", note)
            st.rerun()
    elif opened is None:
        pg.study_upload_id = None
    if pg.study_error:
        st.error(pg.study_error)
    st.caption("Every picture's toolbar has a camera button that saves it as PNG.")
    st.toggle("Also offer SVG and PDF", key="share.vector",
              help="Drawn by kaleido, which needs chromium; each picture then gets SVG "
                   "and PDF buttons. A picture takes a few seconds to draw this way.")
    if st.session_state.get("share.vector"):
        problem = vector_export_problem()
        if problem:
            st.warning("SVG and PDF are not available here: kaleido could not draw with "
                       f"chromium ({problem}). Install chromium, or use the camera button "
                       "for PNG.")


def vector_ready() -> bool:
    return bool(st.session_state.get("share.vector")) and vector_export_problem() is None


def _retitle() -> None:
    study = state.study()
    title = st.session_state.get("share.title", "").strip()
    state.set_study(dataclasses.replace(study, title=title))
