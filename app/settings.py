"""Widgets for a step's settings, each bound to one parameter of the step in the study.

The study is the single source of truth: before a widget is drawn its value is taken from
the step's parameters, and a change goes straight back into the study (through
``analysis.study.update_step``, which checks it). Widget keys are ``s<step id>.<setting>``,
stable while the step moves up and down the page. A widget's label, help, choices with their
words and range are the step's setting record's (``analysis.steps.step_settings``).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import streamlit as st

from analysis.errors import StudyError
from analysis.settings import ARRAY_ENCODING, named
from analysis.steps import step_settings
from analysis.study import StudyStep, target_setting, update_step
from app import state

NONE_LABEL = "(none)"
# the array encodings in words, for the table's study-wide choice too
ENCODINGS = ARRAY_ENCODING.words


@dataclass
class StepContext:
    """What a panel needs to draw one step."""

    index: int
    uid: int
    step: StudyStep
    table: object  # the Table with the study's roles applied
    vector: bool = False  # offer SVG and PDF downloads of figures
    # the first result of each kind on the page, for colouring one step by another
    others: dict = field(default_factory=dict)

    @property
    def params(self) -> dict:
        return self.step.params

    def key(self, name: str) -> str:
        return f"s{self.uid}.{name}"

    def record(self, name: str):
        """The record of the step's setting ``name``."""
        return record(self.step.kind, name)


def record(kind: str, name: str):
    """The record of setting ``name`` of a step of ``kind``."""
    return named(step_settings(kind))[name]


def words(kind: str, name: str) -> dict:
    """Each choice of setting ``name`` of a step of ``kind`` and its words."""
    return record(kind, name).words


def _changed(uid: int, name: str, key: str, convert) -> None:
    """on_change: write the widget's value into the study (or keep the message)."""
    pg = state.page()
    current = state.study()
    if uid not in pg.step_ids or current is None:
        return
    index = pg.step_ids.index(uid)
    value = convert(st.session_state[key])
    pg.errors.pop(f"settings:{uid}", None)
    try:
        state.set_study(update_step(current, index, params={name: value}))
    except StudyError as exc:
        pg.errors[f"settings:{uid}"] = str(exc)
        return
    step = current.steps[index]
    if name == target_setting(step.kind) and step.params.get(name) != value:
        state.note_target_change(current, [index], old=step.params.get(name), new=value,
                                 uid=uid)


def _sync(key: str, value) -> None:
    if key not in st.session_state or st.session_state[key] != value:
        st.session_state[key] = value


def choice(ctx: StepContext, name: str, options: dict | list | None = None, *,
           container=st) -> None:
    """A selectbox over the setting's choices, in their words; ``options`` (a dict maps each
    value to the words shown) replaces them where the page words them otherwise."""
    setting = ctx.record(name)
    label, help = setting.label, setting.help
    options = setting.words if options is None else options
    words = options if isinstance(options, dict) else {o: str(o) for o in options}
    values = list(words)
    current = ctx.params.get(name)
    if current not in values:
        values.append(current)
    key = ctx.key(name)
    _sync(key, current)
    container.selectbox(label, values, key=key, help=help,
                        placeholder=words.get(None, NONE_LABEL),
                        format_func=lambda v: words.get(v, NONE_LABEL if v is None else str(v)),
                        on_change=_changed, args=(ctx.uid, name, key, lambda v: v))


def column(ctx: StepContext, name: str, columns: list[str], *, optional: bool = True,
           container=st) -> None:
    """A selectbox over column names, with "(none)" when the setting may be empty."""
    label, help = ctx.record(name).label, ctx.record(name).help
    values = ([None] if optional else []) + list(columns)
    current = ctx.params.get(name)
    if current not in values:
        values.append(current)
    key = ctx.key(name)
    _sync(key, current)
    container.selectbox(label, values, key=key, help=help, placeholder=NONE_LABEL,
                        format_func=lambda v: NONE_LABEL if v is None else str(v),
                        on_change=_changed, args=(ctx.uid, name, key, lambda v: v))


def columns(ctx: StepContext, name: str, options: list[str], defaults: list[str], *,
            container=st) -> None:
    """A multiselect of column names; left empty it means the defaults (stored as None, so
    that a saved study keeps meaning "every suitable column" on a wider table)."""
    label, help = ctx.record(name).label, ctx.record(name).help
    current = ctx.params.get(name)
    shown = [] if current is None else list(current)
    options = list(options) + [c for c in shown if c not in options]
    key = ctx.key(name)
    _sync(key, shown)

    def convert(value):
        return None if not value or list(value) == list(defaults) else list(value)

    container.multiselect(label, options, key=key, help=help,
                          placeholder=f"every suitable column ({len(defaults)})",
                          on_change=_changed, args=(ctx.uid, name, key, convert))


def whole_number(ctx: StepContext, name: str, *, container=st) -> None:
    """A number input for a whole number; for a setting that may be unset, 0 stands for
    "not set"."""
    setting = ctx.record(name)
    label, help, optional = setting.label, setting.help, setting.optional
    minimum = 0 if setting.low is None else int(setting.low)
    maximum = None if setting.high is None else int(setting.high)
    current = ctx.params.get(name)
    key = ctx.key(name)
    low = 0 if optional else minimum
    shown = 0 if current is None else int(current)
    # A value out of range (from a hand-edited study) is shown at the nearest end; the step
    # itself reports it when it runs.
    shown = max(low, shown if maximum is None else min(shown, maximum))
    _sync(key, shown)

    def convert(value):
        value = int(value)
        return None if optional and value == 0 else value

    container.number_input(label, min_value=low, max_value=maximum,
                           step=1, key=key, help=help,
                           on_change=_changed, args=(ctx.uid, name, key, convert))


def whole_range(ctx: StepContext, name: str, *, container=st) -> None:
    """A slider for a range of whole numbers, stored as [low, high]."""
    setting = ctx.record(name)
    label, help = setting.label, setting.help
    minimum, maximum = int(setting.low), int(setting.high)
    low, high = (int(v) for v in ctx.params.get(name))
    low, high = max(low, minimum), max(high, minimum)
    key = ctx.key(name)
    _sync(key, (low, high))
    container.slider(label, min_value=minimum, max_value=max(maximum, high), step=1, key=key,
                     help=help, on_change=_changed,
                     args=(ctx.uid, name, key, lambda v: [int(v[0]), int(v[1])]))


def real_number(ctx: StepContext, name: str, *, container=st) -> None:
    """A number input over the setting's range, in its steps."""
    setting = ctx.record(name)
    label, help, step = setting.label, setting.help, setting.page_step
    minimum, maximum = setting.low, setting.high
    current = ctx.params.get(name)
    key = ctx.key(name)
    _sync(key, min(max(float(current), float(minimum)), float(maximum)))
    container.number_input(label, min_value=float(minimum), max_value=float(maximum),
                           step=float(step), key=key, help=help,
                           on_change=_changed, args=(ctx.uid, name, key, float))


def flag(ctx: StepContext, name: str, *, container=st) -> None:
    """A toggle for a setting that is on or off."""
    label, help = ctx.record(name).label, ctx.record(name).help
    key = ctx.key(name)
    _sync(key, bool(ctx.params.get(name)))
    container.toggle(label, key=key, help=help,
                     on_change=_changed, args=(ctx.uid, name, key, bool))


def seed(ctx: StepContext, container=st) -> None:
    whole_number(ctx, "seed", container=container)


def feature_block(ctx: StepContext, *, container=st) -> None:
    """The settings every step that builds a feature matrix shares. The column the step's
    target setting names (a clustering's compared label too) is never offered as a
    feature."""
    from analysis.features import default_feature_columns

    table = ctx.table
    target = ctx.params.get(target_setting(ctx.step.kind) or "target")
    usable = [c.name for c in table.columns
              if c.role in ("invariant", "flag", "category", "array") and c.name != target]
    defaults = default_feature_columns(table, target=target)
    columns(ctx, "columns", usable, defaults, container=container)
    left, middle, right = container.columns(3)
    if "array_encoding" in ctx.params and table.names_with_role("array"):
        choice(ctx, "array_encoding", container=left)
    if "log_scale" in ctx.params:
        choice(ctx, "log_scale", container=middle)
    if "missing" in ctx.params:
        choice(ctx, "missing", container=right)
    if "intervals" in ctx.params and any(c.intervals for c in table.columns):
        choice(ctx, "intervals", container=right)


def label_columns(table) -> list[str]:
    """Columns that can serve as a target or a label: flags, categories, invariants."""
    return [c.name for c in table.columns if c.role in ("flag", "category", "invariant")]


def colour_options(table, extra: list[str]) -> list[str]:
    names = [c.name for c in table.columns if c.role not in ("array",)]
    return list(extra) + [n for n in names if n not in extra]
