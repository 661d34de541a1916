"""One record per setting of a step: its type, choices and their words, range, and the words
the page and the command line show.

Each step module declares ``SETTINGS``, a tuple of :class:`Setting`, once; the step's
``check()`` reads the choices and ranges from it (:func:`check_values`), the study file's
checks read the types, the command line builds its options from it, and the page draws its
widgets from it. A record's type and default are the step's dataclass field's own, filled in
by :func:`bound`, so they are never written twice.

>>> record = Setting("model", choices=(Choice("linear", "linear machine"),), option="--model")
>>> record.values
('linear',)
"""

from __future__ import annotations

import dataclasses
import functools
import math
import sys
import types
import typing
from dataclasses import dataclass

from analysis.errors import StepError
from analysis.features import ARRAY_ENCODINGS, INTERVAL_READINGS, LOG_SCALES, MISSING_POLICIES

# Seeds go to numpy and scikit-learn, which take 0 <= seed < 2**32.
SEED_LIMIT = 2**32


@dataclass(frozen=True)
class Choice:
    """One allowed value of a setting: the value stored, the words a person reads, and a
    short title where one is shown in figures and summaries (default: none)."""

    value: object
    words: str
    title: str = ""


_UNSET = object()


@dataclass(frozen=True)
class Setting:
    """A step's setting.

    name: the step's field (and the study file's parameter).
    choices: the allowed values with their words (empty: any value of the type).
    minimum, maximum: the allowed range of a number (None: open); ``above`` excludes the
        minimum itself (a positive number).
    label, help: the page's words for the widget; page_minimum, page_maximum, page_step: the
        range a widget offers where it is narrower than the allowed one.
    spoken, advice: how a message names the setting and says what to use (defaults: the
        name; "use one of ..." or "use a whole number of at least ...").
    option, option_help, metavar: the command line's option (None: not offered there).
    follows_target: this setting names the study's target for the step (at most one per
        step): it changes when the study's target does.
    type, default: the step's field annotation and default, filled in by :func:`bound`.
    """

    name: str
    choices: tuple[Choice, ...] = ()
    minimum: float | None = None
    maximum: float | None = None
    above: bool = False
    label: str = ""
    help: str | None = None
    page_minimum: float | None = None
    page_maximum: float | None = None
    page_step: float | None = None
    spoken: str | None = None
    advice: str | None = None
    option: str | None = None
    option_help: str | None = None
    metavar: str | None = None
    follows_target: bool = False
    type: object = None
    default: object = _UNSET

    @property
    def values(self) -> tuple:
        """The allowed values, in the order they are offered."""
        return tuple(c.value for c in self.choices)

    @property
    def words(self) -> dict:
        """Each allowed value and the words a person reads for it."""
        return {c.value: c.words for c in self.choices}

    @property
    def titles(self) -> dict:
        """Each allowed value that has a short title, and that title."""
        return {c.value: c.title for c in self.choices if c.title}

    @property
    def optional(self) -> bool:
        """Whether the step's field may be left unset (None)."""
        return type(None) in typing.get_args(self.type)

    @property
    def base_type(self):
        """The field's type without None: int, float, str, bool, list, ... (None: unknown)."""
        if typing.get_origin(self.type) not in (typing.Union, types.UnionType):
            kinds = {typing.get_origin(self.type) or self.type}
        else:
            kinds = {typing.get_origin(a) or a for a in typing.get_args(self.type)
                     if a is not type(None)}
        if kinds <= {list, tuple}:
            # a list in a study file, a tuple or a list on the step
            return list
        return kinds.pop() if len(kinds) == 1 else None

    @property
    def low(self):
        """The lowest value a widget offers."""
        return self.minimum if self.page_minimum is None else self.page_minimum

    @property
    def high(self):
        """The highest value a widget offers (None: no upper end)."""
        return self.maximum if self.page_maximum is None else self.page_maximum

    def problem(self, value) -> str | None:
        """What is wrong with ``value`` for this setting and what to use, or None if it is
        allowed. Only the choices and the range are judged; a type the record does not know
        is left to the step."""
        if value is None and self.optional:
            return None
        kind = self.base_type
        if self.choices:
            allowed = value in self.values and not (isinstance(value, bool)
                                                    and kind is not bool)
        elif kind is int:
            allowed = isinstance(value, int) and not isinstance(value, bool) \
                and self._in_range(value)
        elif kind is float:
            allowed = isinstance(value, (int, float)) and not isinstance(value, bool) \
                and math.isfinite(value) and self._in_range(value)
        else:
            return None
        if allowed:
            return None
        return f"{self.spoken or self.name} {value!r}: {self.advice or self._advice(kind)}."

    def check(self, value) -> None:
        """StepError with :meth:`problem`'s words when ``value`` is not allowed."""
        problem = self.problem(value)
        if problem is not None:
            raise StepError(problem)

    def _in_range(self, value) -> bool:
        if self.minimum is not None and (value <= self.minimum if self.above
                                         else value < self.minimum):
            return False
        return self.maximum is None or value <= self.maximum

    def _advice(self, kind) -> str:
        if self.choices:
            values = [str(v) for v in self.values]
            return (f"use {values[0]} or {values[1]}" if len(values) == 2
                    else f"use one of {', '.join(values)}")
        what = "a whole number" if kind is int else "a number"
        if self.minimum is not None and self.maximum is not None:
            text = f"use {what} from {self.minimum} to {self.maximum}"
        elif self.minimum is not None:
            text = ("use a positive number" if self.above and self.minimum == 0
                    else f"use {what} {'above' if self.above else 'of at least'} "
                         f"{self.minimum}")
        else:
            text = f"use {what}"
        return text + (", or leave it unset" if self.optional else "")


def named(settings) -> dict[str, Setting]:
    """The settings by name."""
    return {s.name: s for s in settings}


def check_values(step) -> None:
    """Check every setting of ``step`` that its record judges (choices and ranges), in the
    record's order; StepError names the first bad one and what to use."""
    for record in bound(type(step)):
        record.check(getattr(step, record.name))


@functools.cache
def bound(cls) -> tuple[Setting, ...]:
    """The ``SETTINGS`` of the step class's module with each field's type and default filled
    in, every field of the class included (a field the module does not describe gets a bare
    record of its name)."""
    declared = named(getattr(sys.modules[cls.__module__], "SETTINGS", ()))
    hints = typing.get_type_hints(cls)
    fields = {f.name: f for f in dataclasses.fields(cls)}
    unknown = sorted(set(declared) - set(fields))
    if unknown:
        raise TypeError(f"{cls.__name__}: settings {unknown} are not fields of the step")
    order = list(declared) + [name for name in fields if name not in declared]
    records = []
    for name in order:
        field = fields[name]
        default = field.default if field.default is not dataclasses.MISSING else (
            field.default_factory() if field.default_factory is not dataclasses.MISSING
            else _UNSET)
        record = declared.get(name, Setting(name))
        records.append(dataclasses.replace(record, type=hints.get(name), default=default))
    return tuple(records)


def _chosen(values: tuple, words: dict) -> tuple[Choice, ...]:
    """Choices of ``values`` (a module's option tuple) with their words, every value worded."""
    missing = [v for v in values if v not in words] + [w for w in words if w not in values]
    if missing:
        raise TypeError(f"the words and the options differ at {missing}")
    return tuple(Choice(v, words[v]) for v in values)


# The settings every step that builds a feature matrix shares (analysis/features.py checks
# their values when it builds the features; these are their words).
COLUMNS = Setting(
    "columns", label="Feature columns", option="--features", metavar="A,B,...",
    help="The invariants the step looks at. Leave empty for every invariant, flag, category "
         "and array column but the target.",
    option_help="feature columns (default: every invariant, flag, category and array column "
                "but the target)")
ARRAY_ENCODING = Setting(
    "array_encoding", spoken="array encoding", label="Matrix and list columns",
    help="How array-valued cells become features.", option="--array-encoding",
    option_help="how matrix and list cells become features",
    choices=_chosen(ARRAY_ENCODINGS, {
        "invariant": "unchanged by permuting rows and columns (compact for large matrices)",
        "compact": "compact: size, rank, trace, determinant, spectra",
        "full": "unchanged by permuting rows and columns, every sorted entry",
        "flat": "entries flattened (padded to one shape)",
        "both": "both",
    }))
LOG_SCALE = Setting(
    "log_scale", spoken="log scale", label="Signed log scale", option="--log-scale",
    help="sign(x)·log10(1+|x|), for invariants with a heavy tail.",
    choices=_chosen(LOG_SCALES, {"auto": "only for integers beyond 64 bits", "never": "never",
                                 "always": "every numeric feature"}))
MISSING = Setting(
    "missing", spoken="missing-value policy", label="Missing values", option="--missing",
    choices=_chosen(MISSING_POLICIES, {"drop": "leave the row out",
                                       "impute": "fill in (median or most common)"}))
INTERVALS = Setting(
    "intervals", spoken="interval reading", label="Interval cells [low, high]",
    help="Cells known only by an interval: read as missing, or by one value.",
    option="--intervals",
    option_help="interval cells [low, high] of number columns: missing (default), or read as "
                "their low end, high end or midpoint",
    choices=_chosen(INTERVAL_READINGS, {"missing": "as missing cells", "low": "their low end",
                                        "high": "their high end",
                                        "midpoint": "their midpoint"}))
FEATURE_SETTINGS = (COLUMNS, ARRAY_ENCODING, LOG_SCALE, MISSING, INTERVALS)
SEED = Setting(
    "seed", minimum=0, maximum=SEED_LIMIT - 1, label="Seed",
    help="The same seed gives the same numbers every time.")
