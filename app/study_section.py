"""The study: its steps top to bottom, each with its settings, a run action and its results
where it stands; and the row that adds a step at the end."""

from __future__ import annotations

import dataclasses

import streamlit as st

from analysis.errors import ScoutError, StepError
from analysis.steps import KIND_TITLES, KINDS, STEP_KINDS, step_class
from analysis.study import (
    StepJob,
    add_step,
    move_step,
    remove_step,
    result_key,
)
from app import state
from app.display import duration
from app.loading import available_kinds
from app.panels import panel
from app.settings import NONE_LABEL, StepContext
from app.share import vector_ready

UMAP_FIRST = ("UMAP compiles its numerical code on its first use in this session; "
              "this run takes 15 s or more")


@st.cache_resource(show_spinner=False)
def _umap_runs() -> dict:
    """Whether UMAP has run in this server process (its first run compiles code)."""
    return {"done": False}


def _umap_label(title: str) -> str | None:
    """What to say while UMAP runs: nothing special once its code is compiled."""
    if _umap_runs()["done"]:
        return None
    try:
        from analysis.warmup import umap_warmup_status
    except ImportError:
        return f"{title}: {UMAP_FIRST}"
    status = umap_warmup_status()
    if status.startswith("done"):
        return None
    if status == "running":
        return (f"{title}: UMAP is still compiling its numerical code (begun when the page "
                "opened); this first run waits for it")
    return f"{title}: {UMAP_FIRST}"


def show_study() -> None:
    study = state.study()
    table_state = state.table_state()
    pg = state.page()
    table = table_state.table
    cache = state.cache()
    keys = [result_key(table, step.kind, step.params) for step in study.steps]
    missing = [key for key in keys if key not in cache]
    # Steps that could not run are not "waiting": their message says what to change.
    waiting = [key for key in missing if key not in pg.errors]
    change = pg.target_change
    if change is not None and change.after is not study:
        pg.target_change = change = None  # something else changed since: the offer lapses
    top = st.container()
    if change is not None and change.uid is None:
        with top:
            _target_notice(change, table)
    progress = None
    if pg.run_all and missing:
        progress = top.progress(0.0, text=f"Running {len(missing)} of "
                                f"{len(study.steps)} steps")
    elif waiting and not pg.run_all:
        left, right = top.columns([3, 1], vertical_alignment="center")
        left.caption(f"{_count(len(waiting), 'step')} not yet run with "
                     "the current settings.")
        right.button("Run every step", key="study.run_all", on_click=_request_run_all,
                     icon=":material/play_arrow:", width="stretch")
    others = {}
    for step in study.steps:
        found = cache.get(result_key(table, step.kind, step.params))
        if found is not None:
            others.setdefault(step.kind, found)
    done = 0
    for index, (uid, step) in enumerate(zip(list(pg.step_ids), study.steps)):
        ran = _show_step(index, uid, step, table, run_all=pg.run_all or uid in pg.run_uids,
                         others=others)
        if progress is not None and ran:
            done += 1
            progress.progress(min(done / len(missing), 1.0),
                              text=f"Ran {done} of {len(missing)} steps")
    if progress is not None:
        progress.empty()
    pg.run_all = False
    pg.run_uids.clear()
    pg.just_added = None
    _add_step_row(table)


def _target_notice(change, table) -> None:
    """Which steps follow the changed target and will run again, and how long they took
    last time, before any of them runs; run them, or go back to the target before."""
    pg = state.page()
    study = state.study()
    listed = [f"{pg.step_ids.index(u) + 1}. {study.steps[pg.step_ids.index(u)].display_title}"
              for u in change.step_uids if u in pg.step_ids]
    whose = "The study's target" if change.uid is None else "This step's target"
    old = NONE_LABEL if change.old is None else change.old
    new = NONE_LABEL if change.new is None else change.new
    with st.container(border=True, key=f"target-change-{change.uid or 0}"):
        st.markdown(f"{whose} is now **{new}** (it was **{old}**). Nothing has run yet.")
        if listed:
            verb = "depends" if len(listed) == 1 else "depend"
            st.markdown(f"{_count(len(listed), 'step')} {verb} on the target and will run "
                        "again: " + ", ".join(listed) + "." + _last_cost(change, table))
        else:
            st.markdown("No step depends on the target: nothing needs to run again.")
        left, right = st.columns(2)
        left.button("Run them now", key="target.run", type="primary", disabled=not listed,
                    icon=":material/play_arrow:", on_click=_run_target_steps, width="stretch")
        right.button(f"Back to {old}", key="target.undo", icon=":material/undo:",
                     on_click=state.undo_target_change, width="stretch")


def _last_cost(change, table) -> str:
    """How long the listed steps took with the target before, from their results kept."""
    pg, cache = state.page(), state.cache()
    took = []
    for uid in change.step_uids:
        if uid not in pg.step_ids:
            continue
        before = change.before.steps[pg.step_ids.index(uid)]
        found = cache.get(result_key(table, before.kind, before.params))
        seconds = getattr(found, "elapsed_seconds", None)
        if seconds is not None:
            took.append(seconds)
    if not took:
        return ""
    if len(took) == len(change.step_uids) == 1:
        return f" With the target before, it took {duration(took[0])}."
    which = "they" if len(took) == len(change.step_uids) else f"{len(took)} of them"
    return f" With the target before, {which} took {duration(sum(took))} in all."


def _run_target_steps() -> None:
    pg = state.page()
    change = pg.target_change
    pg.target_change = None
    if change is not None:
        pg.run_uids.update(change.step_uids)


def _count(n: int, word: str) -> str:
    return f"{n} {word}" if n == 1 else f"{n} {word}s"


def _request_run_all() -> None:
    pg = state.page()
    pg.run_all = True
    pg.stopped.clear()


def _show_step(index: int, uid: int, step, table, *, run_all: bool, others: dict) -> bool:
    """Draw one step; run it first when asked. True when it ran in this pass."""
    pg = state.page()
    study = state.study()
    module = panel(step.kind)
    ctx = StepContext(index=index, uid=uid, step=step, table=table,
                      vector=vector_ready(), others=others)
    ran = False
    with st.container(border=True, key=f"step-{uid}"):
        title_col, up_col, down_col, remove_col = st.columns(
            [12, 1, 1, 1], vertical_alignment="center", gap="small")
        title_col.markdown(f"#### {index + 1}. {step.display_title}")
        # Drawn again once the result is known, so that it names what was computed.
        caption = title_col.empty()
        caption.caption(module.describe(step.params))
        up_col.button("", key=f"s{uid}.up", icon=":material/arrow_upward:",
                      help="Move this step up", type="tertiary", disabled=index == 0,
                      on_click=_move, args=(uid, -1))
        down_col.button("", key=f"s{uid}.down", icon=":material/arrow_downward:",
                        help="Move this step down", type="tertiary",
                        disabled=index == len(study.steps) - 1, on_click=_move, args=(uid, 1))
        remove_col.button("", key=f"s{uid}.remove", icon=":material/close:",
                          help="Remove this step from the study", type="tertiary",
                          on_click=_remove, args=(uid,))
        with st.expander("Settings", expanded=pg.just_added == uid, icon=":material/tune:"):
            try:
                module.settings_panel(ctx)
            except Exception as exc:  # noqa: BLE001 - odd settings must not sink the page
                st.error(f"These settings cannot be shown ({type(exc).__name__}: {exc}). "
                         "Remove the step and add it again, or edit the study file.")
            message = pg.errors.get(f"settings:{uid}")
            if message:
                st.error(message)
        change = pg.target_change
        if change is not None and change.uid == uid:
            _target_notice(change, table)
        # The settings may have changed the step just now: read it again.
        step = state.study().steps[index]
        ctx.step = step
        key = result_key(table, step.kind, step.params)
        result = state.cache().get(key)
        error = pg.errors.get(key)
        if result is None:
            place = st.empty()
            # A click of the run action arrives before the button is drawn again: run in
            # the button's place, and draw it only when the step still has no result.
            asked = bool(st.session_state.get(f"s{uid}.run"))
            if asked:
                pg.stopped.pop(key, None)
            going = key in state.jobs()
            if asked or going or (run_all and error is None and key not in pg.stopped):
                result, error = _run(step, table, key, place, uid)
                ran = True
            if result is None:
                place.button("Run this step", key=f"s{uid}.run", type="primary",
                             icon=":material/play_arrow:")
        caption.caption(module.describe(step.params, result))
        stopped = pg.stopped.get(key) if result is None else None
        if stopped:
            st.warning(f"{stopped} The other steps keep their results; run this one again "
                       "when you like.", icon=":material/stop_circle:")
        elif error:
            st.error(error)
        elif result is None:
            st.caption("Not run yet with these settings.")
        else:
            try:
                module.show(ctx, result)
            except Exception as exc:  # noqa: BLE001 - one broken panel must not sink the page
                st.error(f"This step's results could not be shown ({type(exc).__name__}: "
                         f"{exc}). The other steps are unaffected.")
    return ran


def _run(step, table, key: str, place, uid: int):
    """Run one step on a thread of its own (the study runner's error messages), showing in
    ``place`` what it does and a way to stop it; a run already going for these settings is
    watched rather than started again. A click anywhere on the page ends this pass of the
    script at the next drawing here (streamlit reruns the script); the step runs on and the
    next pass watches it again."""
    jobs = state.jobs()
    job = jobs.get(key)
    if job is None:
        job = jobs[key] = StepJob(step, table).start()
    label = f"{step.display_title}: {KINDS[step.kind].running}"
    umap = step.kind == "projection" and step.params.get("method") == "umap"
    if umap:
        label = _umap_label(step.display_title) or label
    with place.status(label + "…", expanded=True) as box:
        bar = box.progress(0.0, text="starting")
        early = box.empty()
        box.button("Stop this step", key=f"s{uid}.stop", icon=":material/stop:",
                   on_click=_stop, args=(key,),
                   help="Ends this step at its next report; the other steps keep their "
                        "results, and this one can be run again.")
        while not job.wait(LOOK_EVERY):
            _show_progress(job, bar, early)
        box.update(label=f"{step.display_title}: done in {job.outcome.elapsed_seconds:.1f} s",
                   state="complete" if job.outcome.ok else "error")
    place.empty()
    jobs.pop(key, None)
    return _collect(job.outcome, key, umap)


# How often the page looks at a running step, in seconds: each look redraws its bar, which
# is also where a click on the page takes effect.
LOOK_EVERY = 0.3


def _show_progress(job, bar, early) -> None:
    found = job.latest
    alive = f"{job.seconds:.0f} s"
    if found is None:
        bar.progress(0.0, text=f"working, {alive}")
        return
    share = found.share
    bar.progress(0.0 if share is None else share, text=f"{found.text} ({alive})")
    figures = dict(found.first_figures)
    if "accuracy" in figures and "baseline_accuracy" in figures:
        early.caption(f"Split 1: accuracy {figures['accuracy']:.3f} against "
                      f"{figures['baseline_accuracy']:.3f} for always guessing the "
                      "most common class.")
    elif "r2" in figures:
        early.caption(f"Split 1: R² {figures['r2']:.3f} on the test rows.")


def _collect(outcome, key: str, umap: bool):
    """Keep a finished step's result in the cache, or its message; a stopped step keeps
    neither, only the note that it was stopped."""
    pg = state.page()
    if umap and outcome.ok:
        _umap_runs()["done"] = True
    if outcome.ok:
        pg.errors.pop(key, None)
        pg.stopped.pop(key, None)
        state.cache().put(key, outcome.result)
        return outcome.result, None
    if outcome.stopped:
        pg.stopped[key] = outcome.error
        return None, None
    message = outcome.error
    if outcome.internal:
        message = ("This step stopped on an internal error; the rest of the study is "
                   f"unaffected. {outcome.error}")
    pg.errors[key] = message
    return None, message


def _stop(key: str) -> None:
    """The stop action: ask the running step to end at its next report, and run nothing
    more in this pass."""
    pg = state.page()
    pg.run_all = False
    pg.run_uids.clear()
    job = state.jobs().get(key)
    if job is None:
        return
    job.stop()


def _position(uid: int) -> int | None:
    ids = state.page().step_ids
    return ids.index(uid) if uid in ids else None


def _move(uid: int, offset: int) -> None:
    index = _position(uid)
    if index is None:
        return
    target = index + offset
    study = state.study()
    if not 0 <= target < len(study.steps):
        return
    pg = state.page()
    pg.step_ids.insert(target, pg.step_ids.pop(index))
    state.set_study(move_step(study, index, target))


def _remove(uid: int) -> None:
    index = _position(uid)
    if index is None:
        return
    pg = state.page()
    pg.step_ids.pop(index)
    state.set_study(remove_step(state.study(), index))


# ----------------------------------------------------------------------------------------
# Adding a step


def new_step_params(kind: str, table, focus: dict) -> dict:
    """Settings for a new step: the study-wide target, features, encoding and group column
    where the kind has them; defaults otherwise."""
    fields = {f.name for f in dataclasses.fields(step_class(kind))}
    target = focus.get("target")
    params: dict = {}
    if kind == "separator" and target is None:
        target = first_flag(table)
        if target is None:
            raise StepError("a separator needs a target: a flag or category column to "
                            "explain. Choose one under Target above.")
    if target is not None:
        if "target" in fields and kind in ("projection", "separator", "outliers"):
            params["target"] = target
        if "compare" in fields and kind == "clustering":
            params["compare"] = target
    features = focus.get("columns")
    if features is not None and "columns" in fields:
        if kind == "relations":
            chosen = [c for c in features if table.role(c) == "invariant"]
        else:
            chosen = [c for c in features if c != params.get("target")]
        if chosen:
            params["columns"] = chosen
    if focus.get("array_encoding") and "array_encoding" in fields:
        params["array_encoding"] = focus["array_encoding"]
    if focus.get("groups") and "groups" in fields:
        params["groups"] = focus["groups"]
    return params


def first_flag(table) -> str | None:
    for role in ("flag", "category"):
        names = table.names_with_role(role)
        if names:
            return names[0]
    return None


def _add(table) -> None:
    kind = st.session_state.get("add.kind")
    pg = state.page()
    state.clear_notices("add")
    if kind is None:
        return
    try:
        params = new_step_params(kind, table, pg.focus)
    except ScoutError as exc:
        state.post("add", f"Could not add the step: {exc}")
        return
    add_step_with(kind, params)


def add_step_with(kind: str, params: dict) -> None:
    """Add a step of ``kind`` with ``params`` at the end of the study (a message on the page
    if the settings do not fit)."""
    pg = state.page()
    try:
        new = add_step(state.study(), kind, params)
    except ScoutError as exc:
        state.post("add", f"Could not add the step: {exc}")
        return
    uid = state.new_step_id()
    pg.step_ids.append(uid)
    pg.just_added = uid
    state.set_study(new)


def _add_step_row(table) -> None:
    kinds = available_kinds()
    st.markdown("##### Add a step")
    left, right = st.columns([3, 1], vertical_alignment="bottom")
    left.selectbox("Kind of step", kinds, key="add.kind",
                   format_func=lambda k: f"{KIND_TITLES.get(k, k)}: {KINDS[k].finds}",
                   label_visibility="collapsed")
    right.button("Add step", key="add.button", on_click=_add, args=(table,),
                 icon=":material/add:", width="stretch")
    for notice in state.notices_of("add"):
        st.error(notice.text)
    waiting = [KIND_TITLES[k] for k in STEP_KINDS if k not in kinds]
    if waiting:
        st.caption("Not installed yet: " + ", ".join(waiting) + ".")
