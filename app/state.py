"""What a browser session remembers, under four namespaced keys of ``st.session_state``.

- ``scout.table``: the loaded table (:class:`TableState`): its bytes, the table as read, and
  the table with the study's id column and role changes applied.
- ``scout.study``: the :class:`analysis.study.Study` itself, the very object that is saved
  as ``.study.json``. Every edit on the page replaces it with an edited copy.
- ``scout.cache``: an :class:`analysis.study.ResultCache` of step results, keyed by table
  digest and roles, step kind and parameters (seed included). Colours and hover columns are
  not parameters, so changing them never recomputes a step.
- ``scout.page``: page bookkeeping (:class:`PageState`): a stable id per step for widget keys,
  the messages of steps that could not run, and what the last upload was.

Widget keys are separate (streamlit keeps them in session state too); they start with
``table.``, ``focus.``, ``study.``, ``add.``, ``share.`` or ``s<step id>.``.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import streamlit as st

from analysis.study import ResultCache, Study, apply_table_settings
from analysis.table import Table

TABLE = "scout.table"
STUDY = "scout.study"
CACHE = "scout.cache"
PAGE = "scout.page"

# The study-wide choices offered above the steps, and the step setting each one sets.
FOCUS_FIELDS = ("target", "columns", "array_encoding", "groups")


@dataclass
class TableState:
    """The loaded table: ``base`` as read from ``data``, ``table`` with the study's settings."""

    name: str
    data: bytes
    base: Table
    sample: bool
    table: Table
    settings: object  # the TableSettings that ``table`` was made with


@dataclass
class PageState:
    """Bookkeeping that is not part of the study."""

    step_ids: list[int] = field(default_factory=list)
    next_id: int = 1
    # result key -> message, for steps that could not run with those settings
    errors: dict[str, str] = field(default_factory=dict)
    run_all: bool = False
    just_added: int | None = None
    # the study-wide target, feature columns, array encoding and group column
    focus: dict = field(default_factory=dict)
    upload_id: str | None = None
    sample_choice: str | None = None
    study_upload_id: str | None = None
    load_error: str | None = None
    study_error: str | None = None
    notices: list[str] = field(default_factory=list)
    show_sample: str | None = None
    roles_version: int = 0
    roles_error: str | None = None


def page() -> PageState:
    if PAGE not in st.session_state:
        st.session_state[PAGE] = PageState()
    return st.session_state[PAGE]


def cache() -> ResultCache:
    if CACHE not in st.session_state:
        st.session_state[CACHE] = ResultCache(max_entries=96)
    return st.session_state[CACHE]


def study() -> Study | None:
    return st.session_state.get(STUDY)


def table_state() -> TableState | None:
    return st.session_state.get(TABLE)


def set_study(new: Study) -> None:
    """Replace the study, keeping one widget id per step (new steps get new ids)."""
    pg = page()
    if len(pg.step_ids) != len(new.steps):
        raise RuntimeError("step ids out of step with the study")  # a bug, not user input
    st.session_state[STUDY] = new
    refresh_table()


def start_study(new: Study) -> None:
    """Put a whole new study on the page (fresh step ids, every step to run)."""
    pg = page()
    pg.step_ids = []
    for _ in new.steps:
        pg.step_ids.append(pg.next_id)
        pg.next_id += 1
    pg.errors.clear()
    pg.run_all = True
    pg.just_added = None
    st.session_state[STUDY] = new
    refresh_table()


def new_step_id() -> int:
    pg = page()
    uid = pg.next_id
    pg.next_id += 1
    return uid


def set_table(state: TableState) -> None:
    st.session_state[TABLE] = state


def refresh_table() -> None:
    """Re-apply the study's id column and roles to the loaded table when they changed.

    Raises StudyError when the settings do not fit the table; callers show the message.
    """
    state = table_state()
    current = study()
    if state is None or current is None:
        return
    if state.settings == current.table_settings:
        return
    state.table = apply_table_settings(current, state.base)
    state.settings = current.table_settings
