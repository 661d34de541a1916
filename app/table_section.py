"""The table: choosing or uploading one, its size and columns, each column's role, and the
study-wide target, feature columns, array encoding and group column."""

from __future__ import annotations

import dataclasses

import pandas as pd
import streamlit as st

from analysis.errors import ScoutError, StudyError
from analysis.features import default_feature_columns
from analysis.study import (
    TableSettings,
    apply_table_settings,
    steps_following_target,
    update_step,
    with_target,
)
from analysis.table import ROLES
from app import loading, share, state
from app.figure_view import slug
from app.settings import ENCODINGS, NONE_LABEL

ROLE_WORDS = {
    "id": "names each object",
    "invariant": "a number",
    "category": "a label from a few values",
    "flag": "true or false",
    "array": "a list or matrix",
    "text": "ignored by the steps",
}

ROLE_PLURALS = {"invariant": "invariants", "category": "categories", "flag": "flags",
                "array": "arrays", "text": "text", "id": "ids"}


# ----------------------------------------------------------------------------------------
# Choosing a table (sidebar)


SOURCES = {"sample": "A sample table", "file": "A file of mine"}


def table_picker() -> None:
    """A sample table or an upload. A new choice puts the table on the page aside with its
    study (at once, or after the user's word when the study has results)."""
    pg = state.page()
    if pg.show_sample is not None:
        # A study opened on a sample table: show that sample as the choice.
        st.session_state["table.source"] = "sample"
        st.session_state["table.sample"] = pg.show_sample
        pg.sample_choice = pg.show_sample
        pg.show_sample = None
    st.markdown("### Table")
    source = st.radio("Where the table comes from", list(SOURCES), key="table.source",
                      format_func=SOURCES.get, horizontal=True, label_visibility="collapsed")
    if source == "sample":
        _sample_picker(pg)
    else:
        _upload_box(pg)
    if pg.load_error:
        st.caption(":red[This file could not be read; the message is at the top of the page.]")
    if pg.pending is not None:
        _pending_box(pg)


def offer_table(loaded: state.TableState) -> None:
    """A table arrived: open it at once when the study on the page has no results yet (or
    it is the same table), else let it wait for the user's word."""
    current = state.table_state()
    same = current is not None and current.base.digest == loaded.base.digest
    if same or not state.study_has_results():
        loading.put_table(loaded)
    else:
        state.page().pending = loaded


def _waiting(name: str | None, *, sample: bool) -> bool:
    """Whether a table of this kind (and name, when given) waits to be opened."""
    pending = state.page().pending
    return pending is not None and pending.sample == sample \
        and (name is None or pending.name == name)


def _pending_box(pg) -> None:
    """What happens to the study on the page if the waiting table is opened, the study file
    to download first, and the choice to open the table or stay."""
    current = state.table_state()
    study = state.study()
    waiting = pg.pending
    again = state.kept_for(waiting.base.digest) is not None
    with st.container(border=True, key="table.waiting"):
        st.markdown(f"**{waiting.name}** is read and waiting to be opened.")
        st.caption(f"The study on the page stays kept for {current.name}, with its steps, "
                   f"settings and results: choose {current.name} again in this session and "
                   "it comes back. A file of it keeps it for later sessions too."
                   + (f" {waiting.name} was open before: its own study comes back."
                      if again else "")
                   + _letting_go(state.to_let_go(current.base.digest)))
        st.download_button("Download the current study first", data=share.study_text(study),
                           file_name=f"{slug(study.title or current.name)}.study.json",
                           mime="application/json", key="table.keep_file",
                           icon=":material/download:", on_click="ignore", width="stretch")
        # one under the other: the sidebar is too narrow for two table names side by side
        st.button(f"Open {waiting.name}", key="table.switch", type="primary",
                  on_click=_open_waiting, width="stretch")
        st.button(f"Stay with {current.name}", key="table.stay", on_click=_stay,
                  width="stretch")


def _letting_go(names: list[str]) -> str:
    if not names:
        return ""
    return (f" To keep memory in bounds, the results of the study on {' and '.join(names)} will "
            f"be let go (the {state.KEPT_WHOLE} tables put aside last keep theirs); "
            "their steps and settings stay.")


def _open_waiting() -> None:
    pg = state.page()
    if pg.pending is not None:
        loading.put_table(pg.pending)


def _stay() -> None:
    """Keep the table on the page; the pickers show it again."""
    pg = state.page()
    pg.pending = None
    current = state.table_state()
    if current.sample:
        st.session_state["table.source"] = "sample"
        st.session_state["table.sample"] = current.name
        pg.sample_choice = current.name
    else:
        st.session_state["table.source"] = "file"


def _sample_picker(pg) -> None:
    names = loading.sample_names()
    choice = st.selectbox("Sample table", names, key="table.sample",
                          help="Tables computed by sample_tables/make_tables.py.")
    current = state.table_state()
    showing = current is not None and current.sample and current.name == choice
    if pg.sample_choice is None:
        pg.sample_choice = choice
    elif (choice != pg.sample_choice or not showing) and not _waiting(choice, sample=True):
        pg.sample_choice = choice
        try:
            offer_table(loading.load_sample(choice))
            pg.load_error = None
        except ScoutError as exc:
            pg.load_error = str(exc)
    note = loading.SAMPLE_NOTES.get(choice)
    if note:
        st.caption(note)


def _upload_box(pg) -> None:
    upload = st.file_uploader(
        "Your table", type=loading.UPLOAD_TYPES, key="table.upload",
        help="CSV or TSV (with a header row), JSON (an array of records), JSON Lines or "
             "Parquet. One row per object, one column per invariant.")
    if upload is not None and upload.file_id != pg.upload_id:
        pg.upload_id = upload.file_id
        try:
            # a sign of life at once: a large table takes seconds to read and type
            with st.spinner(f"Reading {upload.name} ({upload.size / 1e6:,.1f} MB) and typing "
                            "its columns…"):
                loaded = loading.load_bytes(upload.name, upload.getvalue(), sample=False)
        except ScoutError as exc:
            pg.load_error = str(exc)
        else:
            pg.load_error = None
            offer_table(loaded)
    elif upload is None:
        pg.upload_id = None
        if _waiting(None, sample=False):
            pg.pending = None  # the file waiting to be opened was taken out of the box
        pg.load_error = None  # the file that could not be read is gone from the box
        current = state.table_state()
        if current is not None and current.sample:
            st.caption(f"Until you choose a file, the page shows the sample {current.name}.")


# ----------------------------------------------------------------------------------------
# The table's facts and roles (top of the page)


def table_header() -> None:
    table_state = state.table_state()
    table = table_state.table
    study = state.study()
    pg = state.page()
    st.title(study.title or f"Study of {table.name}")
    counts = {role: len(table.names_with_role(role)) for role in ROLES}
    parts = [f"{table.n_rows:,} objects".replace(",", "\u2009"),
             f"{len(table.columns)} columns"]
    parts += [f"{n} {ROLE_PLURALS[role] if n != 1 else role}"
              for role, n in counts.items() if n and role != "id"]
    named = f"named by **{table.id_column}**" if table.id_column else "named by row number"
    source = "sample table" if table_state.sample else "uploaded"
    st.markdown(f"**{table.name}** ({source}) · " + " · ".join(parts) + f" · {named}")
    if pg.load_error:
        st.error(pg.load_error)
    with st.expander("Columns and roles", icon=":material/table_rows:"):
        _roles_editor(table)
        for warning in table.warnings:
            st.caption(f"Note: {warning}")
    _focus_row(table)


def _roles_editor(table) -> None:
    pg = state.page()
    st.caption("Change a role in the table below: " + "; ".join(
        f"**{role}**: {words}" for role, words in ROLE_WORDS.items()) + ".")
    frame = pd.DataFrame({
        "column": [c.name for c in table.columns],
        "role": [c.role for c in table.columns],
        "type": [c.dtype for c in table.columns],
        "missing": [c.missing for c in table.columns],
        "distinct": [c.distinct for c in table.columns],
        "found as": [c.detected_role for c in table.columns],
        "intervals": [c.intervals for c in table.columns],
        "marker words": ["; ".join(f"{w} ({n})" for w, n in c.markers.items())
                         for c in table.columns],
        "note": [c.note for c in table.columns],
    })
    key = f"table.roles.{pg.roles_version}"
    edited = st.data_editor(
        frame, key=key, hide_index=True, num_rows="fixed",
        disabled=["column", "type", "missing", "distinct", "found as", "intervals",
                  "marker words", "note"],
        column_config={"role": st.column_config.SelectboxColumn(
            "role", options=list(ROLES), required=True,
            help="What the column means to the steps"),
            "note": st.column_config.TextColumn("note", width="large")})
    if pg.roles_error:
        st.error(pg.roles_error)
    changes = {name: role for name, role, old in
               zip(edited["column"], edited["role"], frame["role"]) if role != old}
    if changes:
        pg.roles_version += 1
        try:
            set_roles(changes)
            pg.roles_error = None
            pg.run_all = True  # keep the page up to date with the new roles
        except ScoutError as exc:
            pg.roles_error = str(exc)
        st.rerun()


def set_roles(changes: dict[str, str]) -> None:
    """Give columns new roles: the study's table settings change, and the table with them.

    Raises TableError or StudyError (the message names the column and the cell) when a
    column's cells do not fit its new role; nothing changes then.
    """
    study = state.study()
    table_state = state.table_state()
    base = table_state.base
    settings = study.table_settings
    roles = settings.role_overrides
    id_column = settings.id_column
    for name, role in changes.items():
        base.column(name)
        if role == "id":
            id_column = name
            roles.pop(name, None)
        else:
            roles[name] = role
            if name == id_column:
                id_column = None
    detected = {c.name: c.detected_role for c in base.columns}
    roles = {name: role for name, role in roles.items() if detected.get(name) != role}
    if id_column is None and base.id_column is not None and base.id_column not in roles:
        # The detected id column keeps its role unless the user gave it another one.
        id_column = base.id_column
    candidate = dataclasses.replace(
        study, table_settings=TableSettings(id_column=id_column, roles=roles))
    apply_table_settings(candidate, base)  # raises when a cell does not fit
    state.set_study(candidate)


# ----------------------------------------------------------------------------------------
# Study-wide choices


def _focus_row(table) -> None:
    pg = state.page()
    focus = pg.focus
    targets = [c.name for c in table.columns if c.role in ("flag", "category", "invariant")]
    target = focus.get("target")
    if target not in targets:
        target = None
    groups = [c.name for c in table.columns if c.role in ("category", "text", "array",
                                                          "invariant", "flag")]
    _sync("focus.target", target)
    _sync("focus.encoding", focus.get("array_encoding") or "invariant")
    _sync("focus.groups", focus.get("groups") if focus.get("groups") in groups else None)
    defaults = default_feature_columns(table, target=target)
    chosen = focus.get("columns")
    usable = [c.name for c in table.columns
              if c.role in ("invariant", "flag", "category", "array") and c.name != target]
    _sync("focus.features", [c for c in (chosen or []) if c in usable])
    arrays = table.names_with_role("array")
    left, middle, right = st.columns(3)
    left.selectbox("Target", [None] + targets, key="focus.target", placeholder=NONE_LABEL,
                   format_func=lambda v: NONE_LABEL if v is None else v,
                   on_change=_focus_changed, args=("target", "focus.target"),
                   help="The invariant or property to explain. Steps colour by it, the "
                        "separator predicts it, clusterings are compared with it.")
    middle.selectbox("Group column", [None] + groups, key="focus.groups",
                     placeholder=NONE_LABEL,
                     format_func=lambda v: NONE_LABEL if v is None else v,
                     on_change=_focus_changed, args=("groups", "focus.groups"),
                     help="Objects with the same value (for a matrix column: the same matrix "
                          "up to permuting rows and columns) stay on one side of every "
                          "train/test split.")
    right.selectbox("Matrix and list columns", list(ENCODINGS), key="focus.encoding",
                    format_func=lambda v: ENCODINGS[v], disabled=not arrays,
                    on_change=_focus_changed, args=("array_encoding", "focus.encoding"),
                    help="How array cells become features: invariants that do not change "
                         "when rows and columns are permuted, or the entries themselves.")
    st.multiselect("Feature columns", usable, key="focus.features",
                   placeholder=f"every invariant, flag, category and array column but the "
                               f"target ({len(defaults)})",
                   on_change=_focus_changed, args=("columns", "focus.features"),
                   help="The invariants the steps look at (all steps but the overview). "
                        "Leave empty for all of them.")


def _sync(key: str, value) -> None:
    if key not in st.session_state or st.session_state[key] != value:
        st.session_state[key] = value


def _focus_changed(name: str, key: str) -> None:
    """A study-wide choice changed: every step with that setting takes it."""
    pg = state.page()
    table = state.table_state().table
    value = st.session_state[key]
    before, old_target = state.study(), pg.focus.get("target")
    if name == "columns":
        target = pg.focus.get("target")
        defaults = default_feature_columns(table, target=target)
        value = None if not value or list(value) == defaults else list(value)
    pg.focus[name] = value
    state.clear_notices("focus")
    try:
        state.set_study(apply_focus(state.study(), table, name, value))
    except StudyError as exc:
        state.post("focus", str(exc))
        return
    if name == "target":
        # Nothing runs yet: the page says which steps follow the target and offers to go back.
        changed = steps_following_target(before, value)
        state.note_target_change(before, changed, old=old_target, new=value)
    else:
        pg.run_all = True  # the steps follow the study-wide choice at once


def apply_focus(study, table, name: str, value):
    """The study with a study-wide choice given to every step that has the setting."""
    if name == "target":
        return with_target(study, value)
    for index, step in enumerate(study.steps):
        params = step.params
        change: dict = {}
        if name == "columns" and "columns" in params:
            if step.kind == "relations":
                change["columns"] = None if value is None else (
                    [c for c in value if table.role(c) == "invariant"] or None)
            elif step.kind != "overview":
                target = params.get("target")
                change["columns"] = None if value is None else (
                    [c for c in value if c != target] or None)
        elif name == "array_encoding" and "array_encoding" in params:
            change["array_encoding"] = value
        elif name == "groups" and "groups" in params:
            change["groups"] = value
        if change and any(params.get(k) != v for k, v in change.items()):
            study = update_step(study, index, params=change)
    return study
