"""What a browser session remembers, under six namespaced keys of ``st.session_state``.

- ``scout.table``: the loaded table (:class:`TableState`): its bytes, the table as read, and
  the table with the study's id column and role changes applied.
- ``scout.study``: the :class:`analysis.study.Study` itself, the very object that is saved
  as ``.study.json``. Every edit on the page replaces it with an edited copy.
- ``scout.cache``: an :class:`analysis.study.ResultCache` of step results, keyed by table
  digest and roles, step kind and parameters (seed included). Colours and hover columns are
  not parameters, so changing them never recomputes a step.
- ``scout.page``: page bookkeeping (:class:`PageState`): a stable id per step for widget keys,
  the messages of steps that could not run, and what the last upload was.
- ``scout.jobs``: the steps running now (:class:`analysis.study.StepJob`), by result key, so
  that a pass of the script cut short by a click finds its running steps again.
- ``scout.kept``: the studies of the other tables loaded in this session (:class:`KeptStudy`),
  by the sha256 digest of the table's bytes, so that going back to a table brings back its
  study, its settings and the results already computed. Only the ``KEPT_WHOLE`` tables put
  aside last keep their bytes and results; an older one keeps its study (steps, settings),
  which comes back, without results, when the same table is opened again.

Widget keys are separate (streamlit keeps them in session state too); they start with
``table.``, ``focus.``, ``study.``, ``add.``, ``share.``, ``target.`` or ``s<step id>.``.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass, field

import streamlit as st

from analysis.study import ResultCache, Study, apply_table_settings, result_key
from analysis.table import Table

TABLE = "scout.table"
STUDY = "scout.study"
CACHE = "scout.cache"
PAGE = "scout.page"
KEPT = "scout.kept"
JOBS = "scout.jobs"

# How many tables put aside keep their bytes and results in the session's memory; older ones
# keep only their study. A table of a million rows takes hundreds of megabytes.
KEPT_WHOLE = 3

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
    # result key -> message, for steps stopped on request before they finished
    stopped: dict[str, str] = field(default_factory=dict)
    run_all: bool = False
    just_added: int | None = None
    # the study-wide target, feature columns, array encoding and group column
    focus: dict = field(default_factory=dict)
    upload_id: str | None = None
    sample_choice: str | None = None
    study_upload_id: str | None = None
    load_error: str | None = None
    study_error: str | None = None
    # messages for the page, each tagged with the part of the page that posted it
    notices: list[Notice] = field(default_factory=list)
    show_sample: str | None = None
    roles_version: int = 0
    roles_error: str | None = None
    # a table that arrived while the study had results, waiting for the user to open it
    pending: TableState | None = None
    # the last change of a target, offered for undoing until something else changes
    target_change: TargetChange | None = None
    # steps to run in the next pass (by step id), besides those the user runs one by one
    run_uids: set[int] = field(default_factory=set)


@dataclass(frozen=True)
class Notice:
    """A message for the page: ``kind`` says which part posted it (and so where it shows and
    when it is cleared): "focus", "study", "add" or "kept"."""

    kind: str
    text: str


def post(kind: str, text: str) -> None:
    """Put a message of ``kind`` on the page."""
    page().notices.append(Notice(kind, text))


def clear_notices(kind: str) -> None:
    """Take the messages of ``kind`` off the page."""
    pg = page()
    pg.notices = [n for n in pg.notices if n.kind != kind]


def notices_of(*kinds: str) -> list[Notice]:
    return [n for n in page().notices if n.kind in kinds]


@dataclass
class TargetChange:
    """A target just changed: the study before and after, and the steps that follow it."""

    before: Study
    after: Study
    step_uids: list[int]
    old: str | None
    new: str | None
    uid: int | None = None  # the step whose own target changed; None for the study's target


@dataclass
class KeptStudy:
    """A table put aside with its study: what it takes to show both again as they were."""

    table: TableState | None  # None once let go to save memory (the study stays)
    study: Study
    step_ids: list[int]
    focus: dict
    # result key -> result, so that the results come back even when the cache let them go
    results: dict
    errors: dict
    name: str = ""

    @property
    def whole(self) -> bool:
        """True while the table's bytes and results are kept, not only its study."""
        return self.table is not None


def page() -> PageState:
    if PAGE not in st.session_state:
        st.session_state[PAGE] = PageState()
    return st.session_state[PAGE]


def jobs() -> dict:
    """The steps running now, by result key."""
    if JOBS not in st.session_state:
        st.session_state[JOBS] = {}
    return st.session_state[JOBS]


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
    pg.stopped.clear()
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


def study_has_results() -> bool:
    """True when at least one step of the study on the page has a result."""
    current, table = study(), table_state()
    if current is None or table is None:
        return False
    found = cache()
    return any(result_key(table.table, step.kind, step.params) in found
               for step in current.steps)


def kept_studies() -> dict[str, KeptStudy]:
    if KEPT not in st.session_state:
        st.session_state[KEPT] = {}
    return st.session_state[KEPT]


def keep_current() -> None:
    """Put the table on the page aside with its study, by the digest of the table's bytes."""
    current, table = study(), table_state()
    pg = page()
    clear_notices("kept")
    if current is None or table is None:
        return
    found = cache()
    results = {}
    for step in current.steps:
        key = result_key(table.table, step.kind, step.params)
        if key in found:
            results[key] = found.get(key)
    kept = kept_studies()
    kept.pop(table.base.digest, None)  # put aside again: now the latest
    kept[table.base.digest] = KeptStudy(
        table=table, study=current, step_ids=list(pg.step_ids), focus=dict(pg.focus),
        results=results, errors=dict(pg.errors), name=table.name)
    for name in _let_go(kept):
        post("kept", f"The results of the study on {name} were let go to save "
                          f"memory (the {KEPT_WHOLE} tables put aside last keep theirs). Its "
                          f"steps and settings are kept: open {name} again and they come back, "
                          "ready to run.")


def to_let_go(digest: str) -> list[str]:
    """The tables whose results putting aside the table with ``digest`` would let go."""
    kept = kept_studies()
    return [kept[d].name for d in _past_limit(kept, also=digest)]


def _past_limit(kept: dict[str, KeptStudy], also: str | None = None) -> list[str]:
    """The digests of the tables kept whole beyond the last KEPT_WHOLE, oldest first, once
    the table ``also`` (if any) is put aside as the latest."""
    whole = [d for d, k in kept.items() if k.whole and d != also]
    extra = 1 if also is not None else 0
    return whole[:max(0, len(whole) + extra - KEPT_WHOLE)]


def _let_go(kept: dict[str, KeptStudy]) -> list[str]:
    """Keep the bytes and results of the last KEPT_WHOLE tables only; return the others'
    names, whose studies stay."""
    names = []
    found = cache()
    for digest in _past_limit(kept):
        old = kept[digest]
        for key in old.results:
            found.discard(key)
        kept[digest] = dataclasses.replace(old, table=None, results={}, errors={})
        names.append(old.name)
    return names


def kept_for(digest: str) -> KeptStudy | None:
    """The study kept for the table with these bytes, if one was put aside."""
    return kept_studies().get(digest)


def resume(kept: KeptStudy, arrived: TableState | None = None) -> None:
    """Show a kept table and its study again as they were; nothing runs by itself. A study
    whose table was let go comes back on ``arrived`` (the same bytes, read again)."""
    pg = page()
    st.session_state[TABLE] = kept.table if kept.whole else arrived
    st.session_state[STUDY] = kept.study
    pg.step_ids = list(kept.step_ids)
    pg.focus = dict(kept.focus)
    pg.errors = dict(kept.errors)
    if not kept.whole:
        post("kept", f"The study on {kept.name} is back with its steps and settings; "
                          "its results were let go earlier to save memory. Run its steps to "
                          "compute them again.")
    pg.run_all = False
    pg.just_added = None
    found = cache()
    for key, result in kept.results.items():
        found.put(key, result)
    refresh_table()


def note_target_change(before: Study, indices, *, old, new, uid: int | None = None) -> None:
    """Remember a change of target just made to the study on the page (``indices``: the
    steps, 0-based, that follow it), so that the page can list them and offer to go back."""
    pg = page()
    pg.target_change = TargetChange(before=before, after=study(),
                                    step_uids=[pg.step_ids[i] for i in indices],
                                    old=old, new=new, uid=uid)


def undo_target_change() -> None:
    """Go back to the study as it was before the last change of target."""
    pg = page()
    change = pg.target_change
    pg.target_change = None
    if change is None or study() is not change.after:
        return
    set_study(change.before)
    if change.uid is None:
        pg.focus["target"] = change.old
