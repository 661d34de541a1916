"""A study: an ordered list of steps over one table, saved as plain JSON and re-run headless.

A study file (``*.study.json``) looks like this::

    {
      "version": "invariant-scout-study/1",
      "title": "Elliptic curves over small primes",
      "table": "elliptic_curves.csv",
      "table_digest": "3f1c...",            (sha256 of the table's bytes, or null)
      "table_settings": {"id_column": "curve", "roles": {"p": "category"}},
      "steps": [
        {"kind": "overview", "title": null, "params": {"top_correlations": 10, "seed": 0}},
        {"kind": "projection", "title": "PCA", "params": {"method": "pca", "seed": 0, ...}}
      ],
      "results": {                          (optional: a study saved with its results, whose
                                             "version" is then "invariant-scout-study/2")
        "table_digest": "3f1c...",          (the table the results were computed on)
        "steps": [null, {"kind": "projection", "params": {...}, "json": {...},
                         "stored": {...}}]  (one per step; null where a step has no result)
      }
    }

A saved result keeps its ``to_json()`` (the figures other programs read) and the whole result
in the tagged form of :mod:`analysis.stored`, from which the page and the report draw it
again without running; on reading, the rebuilt result must give the same JSON.

The file is checked by hand against this schema when it is read: an unknown step kind, an
unknown setting, a value of the wrong type or an unknown version gives a :class:`StudyError`
naming the step (counted from 1) and the setting. Step parameters are the fields of the step
classes registered in :mod:`analysis.steps`; a study stores every field, defaults included, so
that a later change of a default does not change the numbers a saved study gives.

:func:`run_study` runs each step in order. A step that cannot run on the table records its
message and the rest go on; results are cached by (table digest and roles, kind, parameters).
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
import math
import os
import re
import secrets
import threading
import time
import types
import typing
from collections import OrderedDict
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path

from analysis.errors import ScoutError, StudyError, TableError
from analysis.progress import Progress, Reporter, StepStopped, Stopper
from analysis.settings import SEED_LIMIT
from analysis.steps import (
    KIND_TITLES,
    STEP_KINDS,
    make_step,
    step_params,
    step_settings,
)
from analysis.table import ROLES, Table

STUDY_VERSION = "invariant-scout-study/1"
# A file that carries results has a format of its own, so that a reader from before results
# existed says which format it met rather than stumbling on the key "results".
RESULTS_VERSION = "invariant-scout-study/2"
# The formats this version reads: settings only, and settings with their results (a file of
# format 1 with results, written before format 2 existed, is read too).
READ_VERSIONS = (STUDY_VERSION, RESULTS_VERSION)
RUN_VERSION = "invariant-scout-run/1"
_VERSION_PREFIX = "invariant-scout-study/"
# A study is a few kilobytes, and with its results a few megabytes for a table of tens of
# thousands of rows; anything far bigger is not a study.
MAX_STUDY_BYTES = 100 * 1024**2
_TOP_KEYS = ("version", "title", "table", "table_digest", "table_settings", "steps", "results")
_RESULTS_KEYS = ("table_digest", "steps")
_SAVED_STEP_KEYS = ("kind", "params", "json", "stored")
_STEP_KEYS = ("kind", "title", "params")
_SETTINGS_KEYS = ("id_column", "roles")
_DIGEST = re.compile(r"^[0-9a-f]{64}$")


# ----------------------------------------------------------------------------------------
# The study


@dataclass(frozen=True)
class TableSettings:
    """How the study reads its table: the id column and role overrides (column -> role).

    ``roles`` may be given as a dict; it is kept as a tuple of (column, role) pairs so that
    the settings stay immutable. ``role_overrides`` gives it back as a dict.
    """

    id_column: str | None = None
    roles: tuple[tuple[str, str], ...] = ()

    def __post_init__(self):
        roles = self.roles
        if isinstance(roles, dict):
            roles = roles.items()
        object.__setattr__(self, "roles", tuple((str(c), str(r)) for c, r in roles))

    @property
    def role_overrides(self) -> dict[str, str]:
        return dict(self.roles)

    def to_json(self) -> dict:
        return {"id_column": self.id_column, "roles": self.role_overrides}


@dataclass(frozen=True)
class StudyStep:
    """One step of a study: its kind, its parameters (every field of the step, seed included)
    and an optional title shown instead of the kind's name."""

    kind: str
    params: dict = field(default_factory=dict)
    title: str | None = None

    @property
    def display_title(self) -> str:
        return self.title or KIND_TITLES.get(self.kind, self.kind)

    @property
    def seed(self) -> int | None:
        return self.params.get("seed")

    def build(self):
        """The step object (e.g. a ProjectionStep) these parameters describe."""
        return make_step(self.kind, self.params)

    def to_json(self) -> dict:
        return {"kind": self.kind, "title": self.title, "params": _copy_json(self.params)}


@dataclass(frozen=True)
class Study:
    """An ordered list of steps over one table.

    ``table`` is the table's file name, resolved next to the study file by
    :meth:`table_path`; ``table_digest`` is the sha256 of the table's bytes when the study
    was made (None when unknown); ``table_settings`` holds the id column and role overrides.
    """

    table: str
    steps: tuple[StudyStep, ...] = ()
    title: str = ""
    table_digest: str | None = None
    table_settings: TableSettings = field(default_factory=TableSettings)

    def __post_init__(self):
        object.__setattr__(self, "steps", tuple(self.steps))

    def table_path(self, study_path: str | Path) -> Path:
        """Where the table is: ``table`` taken relative to the folder of the study file."""
        return Path(study_path).parent / self.table

    def to_json(self) -> dict:
        return study_to_json(self)


# ----------------------------------------------------------------------------------------
# Building and editing studies


def check_step(kind: str, params: dict | None = None, *, where: str = "step") -> dict:
    """Check a step's kind and parameters; return every parameter, defaults filled in.

    Raises StudyError naming ``where`` (e.g. "my.study.json: step 3") and the setting when
    the kind is unknown, a setting is unknown, or a value has the wrong type.
    """
    if not isinstance(kind, str):
        raise StudyError(f"{where}: the step kind must be text, got {_short(kind)}.")
    if kind not in STEP_KINDS:
        raise StudyError(f"{where}: unknown step kind {kind!r}; known kinds are "
                         f"{', '.join(STEP_KINDS)}.")
    try:
        records = {record.name: record for record in step_settings(kind)}
    except ImportError as exc:
        raise StudyError(f"{where}: the {kind!r} step is not available in this "
                         f"installation ({exc}).") from None
    params = {} if params is None else params
    if not isinstance(params, dict):
        raise StudyError(f"{where} ({kind}): 'params' must be an object of settings, got "
                         f"{_short(params)}.")
    unknown = [name for name in params if name not in records]
    if unknown:
        raise StudyError(f"{where} ({kind}): unknown setting {unknown[0]!r}; known settings "
                         f"are {', '.join(sorted(records))}.")
    for name, value in params.items():
        expected = records[name].type
        if expected is not None and not _fits(value, expected):
            raise StudyError(f"{where} ({kind}): setting {name!r} must be "
                             f"{_describe(expected)}, got {_short(value)}.")
    seed = params.get("seed")
    if seed is not None and not (isinstance(seed, int) and 0 <= seed < SEED_LIMIT):
        raise StudyError(f"{where} ({kind}): setting 'seed' must be a whole number from 0 "
                         f"to {SEED_LIMIT - 1}, got {_short(seed)}.")
    try:
        step = make_step(kind, _copy_json(params))
    except StudyError as exc:
        raise StudyError(f"{where}: {exc}") from None
    except (TypeError, ValueError) as exc:
        raise StudyError(f"{where} ({kind}): bad settings ({exc}).") from None
    return step_params(step)


def new_step(kind: str, params: dict | None = None, *, title: str | None = None) -> StudyStep:
    """A checked StudyStep with every parameter filled in (StudyError if malformed)."""
    if title is not None and not isinstance(title, str):
        raise StudyError(f"step title must be text, got {_short(title)}.")
    return StudyStep(kind=kind, params=check_step(kind, params), title=title or None)


def add_step(study: Study, kind: str, params: dict | None = None, *,
             title: str | None = None, index: int | None = None) -> Study:
    """A new study with a step inserted at ``index`` (0-based; default: at the end)."""
    step = new_step(kind, params, title=title)
    steps = list(study.steps)
    position = len(steps) if index is None else _position(index, len(steps) + 1, "insert")
    steps.insert(position, step)
    return dataclasses.replace(study, steps=tuple(steps))


def remove_step(study: Study, index: int) -> Study:
    """A new study without the step at ``index`` (0-based)."""
    position = _position(index, len(study.steps), "remove")
    steps = list(study.steps)
    del steps[position]
    return dataclasses.replace(study, steps=tuple(steps))


def move_step(study: Study, index: int, new_index: int) -> Study:
    """A new study with the step at ``index`` moved to ``new_index`` (both 0-based)."""
    position = _position(index, len(study.steps), "move")
    target = _position(new_index, len(study.steps), "move to")
    steps = list(study.steps)
    steps.insert(target, steps.pop(position))
    return dataclasses.replace(study, steps=tuple(steps))


def update_step(study: Study, index: int, *, params: dict | None = None,
                title: str | None | type[...] = ...) -> Study:
    """A new study with the step at ``index`` given new parameters and/or a new title.

    ``params`` are merged over the step's current parameters and checked again.
    """
    position = _position(index, len(study.steps), "change")
    old = study.steps[position]
    merged = dict(old.params)
    merged.update(params or {})
    step = new_step(old.kind, merged, title=old.title if title is ... else title)
    steps = list(study.steps)
    steps[position] = step
    return dataclasses.replace(study, steps=tuple(steps))


def target_setting(kind: str) -> str | None:
    """The setting of a step of ``kind`` that names the study's target, or None: the column a
    projection and the objects to look at colour and rank by, the separator predicts, and a
    clustering is compared with (its record says ``follows_target``)."""
    return next((r.name for r in step_settings(kind) if r.follows_target), None)


def steps_following_target(study: Study, target: str | None) -> tuple[int, ...]:
    """The steps (0-based) whose settings change when the study's target becomes ``target``,
    so whose results must be computed again.

    A step follows the target through :func:`target_setting`. A separator always needs a
    target, so it keeps its own when the study's target is cleared, and a separator that
    explains the objects breaking a statement keeps that statement.
    """
    following = []
    for index, step in enumerate(study.steps):
        name = target_setting(step.kind)
        if name is None or name not in step.params:
            continue
        if step.kind == "separator" and (target is None or step.params.get("target_statement")):
            continue
        if step.params.get(name) != target:
            following.append(index)
    return tuple(following)


def with_target(study: Study, target: str | None) -> Study:
    """The study with ``target`` given to every step of :func:`steps_following_target`; a
    step that uses the target as a feature column stops doing so."""
    for index in steps_following_target(study, target):
        step = study.steps[index]
        name = target_setting(step.kind)
        change: dict = {name: target}
        chosen = step.params.get("columns")
        if name == "target" and target is not None and chosen and target in chosen:
            change["columns"] = [c for c in chosen if c != target] or None
        study = update_step(study, index, params=change)
    return study


def default_study(table: Table, target: str | None = None, seed: int = 0) -> Study:
    """A first study of ``table``: overview, PCA projection, clustering (method chosen by a
    sweep), a separator when ``target`` is given, relations and bounds, objects to look at.

    The study records the table's digest, its id column and every role the user changed.
    """
    if target is not None:
        info = table.column(target)
        if info.role in ("id", "array"):
            raise StudyError(f"{table.name}: the {info.role} column {target!r} cannot be a "
                             "target. Choose a category, flag or invariant column.")
    plan: list[tuple[str, dict]] = [
        ("overview", {"seed": seed}),
        ("projection", {"method": "pca", "target": target, "seed": seed}),
        ("clustering", {"method": "auto", "compare": target, "seed": seed}),
    ]
    if target is not None:
        plan.append(("separator", {"target": target, "seed": seed}))
    plan.append(("relations", {"seed": seed}))
    plan.append(("outliers", {"target": target, "seed": seed}))
    steps = []
    for kind, params in plan:
        known = {record.name for record in step_settings(kind)}
        # Leave out settings a kind does not have (and unset ones), so defaults apply.
        params = {k: v for k, v in params.items() if k in known and v is not None}
        steps.append(new_step(kind, params))
    roles = {c.name: c.role for c in table.columns
             if c.role != c.detected_role and c.role != "id"}
    title = f"Study of {table.name}" + (f": what decides {target}?" if target else "")
    return Study(table=table.name, steps=tuple(steps), title=title, table_digest=table.digest,
                 table_settings=TableSettings(id_column=table.id_column, roles=roles))


def _position(index, length: int, verb: str) -> int:
    if isinstance(index, bool) or not isinstance(index, int) or not 0 <= index < length:
        raise StudyError(f"cannot {verb} step {index!r}: the study has steps 0 to "
                         f"{length - 1} (counted from 0).")
    return index


# ----------------------------------------------------------------------------------------
# JSON


@dataclass(frozen=True)
class SavedResults:
    """The results a study file carries: one per step of its study (None where a step has
    none), computed on the table whose bytes have the sha256 digest ``table_digest``."""

    table_digest: str
    results: tuple = ()

    def __post_init__(self):
        object.__setattr__(self, "results", tuple(self.results))

    def fits(self, table: Table) -> bool:
        """True when the results were computed on a table with these very bytes."""
        return self.table_digest == table.digest

    @property
    def count(self) -> int:
        """How many steps have a saved result."""
        return sum(result is not None for result in self.results)


@dataclass(frozen=True)
class StudyFile:
    """What a study file holds: the study, and its results when it was saved with them."""

    study: Study
    saved: SavedResults | None = None


def study_to_json(study: Study, saved: SavedResults | None = None) -> dict:
    """The study as plain JSON, in the order the file shows it; with ``saved``, the file
    also carries those results (one per step)."""
    data = {
        "version": STUDY_VERSION if saved is None else RESULTS_VERSION,
        "title": study.title,
        "table": study.table,
        "table_digest": study.table_digest,
        "table_settings": study.table_settings.to_json(),
        "steps": [step.to_json() for step in study.steps],
    }
    if saved is not None:
        if len(saved.results) != len(study.steps):
            raise ValueError("saved results out of step with the study")  # a bug
        data["results"] = {"table_digest": saved.table_digest,
                           "steps": [_saved_step_json(step, result, number)
                                     for number, (step, result)
                                     in enumerate(zip(study.steps, saved.results), start=1)]}
    return data


def _saved_step_json(step: StudyStep, result, number: int):
    if result is None:
        return None
    from analysis.stored import encode

    return {"kind": step.kind, "params": _copy_json(step.params),
            "json": _plain_json(result.to_json()),
            "stored": encode(result, where=f"step {number}")}


def _plain_json(value):
    """``value`` as it reads back from a JSON file (tuples become lists, and so on)."""
    return json.loads(json.dumps(value, ensure_ascii=False, allow_nan=False))


def saved_results(study: Study, table: Table, cache: ResultCache) -> SavedResults:
    """The results ``cache`` holds for the steps of ``study`` on ``table`` (the table with
    the study's settings applied), ready to be saved with the study."""
    found = [cache.get(result_key(table, step.kind, step.params)) for step in study.steps]
    return SavedResults(table_digest=table.digest, results=tuple(found))


def restore_results(study: Study, saved: SavedResults, table: Table,
                    cache: ResultCache) -> int:
    """Put the saved results in ``cache`` for ``table`` (the study's settings applied) when
    they were computed on a table with the same bytes; return how many were put there
    (0 when the table differs)."""
    if not saved.fits(table):
        return 0
    count = 0
    for step, result in zip(study.steps, saved.results):
        if result is not None:
            cache.put(result_key(table, step.kind, step.params), result)
            count += 1
    return count


def study_from_json(data, source: str = "study") -> Study:
    """Check plain JSON against the study schema and build the Study.

    ``source`` (a file name) starts every message. Raises StudyError naming the step (counted
    from 1) and the setting on any problem. Saved results are checked too; see
    :func:`study_file_from_json` to have them.
    """
    return study_file_from_json(data, source).study


def study_file_from_json(data, source: str = "study") -> StudyFile:
    """Check plain JSON against the study schema: the study and its saved results (each
    rebuilt and held against its stored JSON). StudyError naming the step on any problem."""
    if not isinstance(data, dict):
        raise StudyError(f"{source}: a study is a JSON object with a 'version' and 'steps'; "
                         f"got {_json_type(data)}.")
    if "version" not in data:
        raise StudyError(f"{source}: no 'version'; this does not look like an Invariant Scout "
                         f"study (expected \"version\": \"{STUDY_VERSION}\").")
    version = data["version"]
    if version not in READ_VERSIONS:
        if isinstance(version, str) and version.startswith(_VERSION_PREFIX):
            raise StudyError(f"{source}: study format {version!r} is not one this version of "
                             f"Invariant Scout reads ({' or '.join(map(repr, READ_VERSIONS))})."
                             " Upgrade Invariant Scout or save the study again from the "
                             "version that wrote it.")
        raise StudyError(f"{source}: unknown version {_short(version)}; an Invariant Scout "
                         f"study has \"version\": \"{STUDY_VERSION}\".")
    unknown = [key for key in data if key not in _TOP_KEYS]
    if unknown:
        raise StudyError(f"{source}: unknown key {unknown[0]!r}; a study has the keys "
                         f"{', '.join(_TOP_KEYS)}.")
    title = data.get("title", "")
    if title is None:
        title = ""
    if not isinstance(title, str):
        raise StudyError(f"{source}: 'title' must be text, got {_short(title)}.")
    table = data.get("table")
    if not isinstance(table, str) or not table.strip():
        raise StudyError(f"{source}: 'table' must name the table file, got {_short(table)}.")
    digest = data.get("table_digest")
    if digest is not None and (not isinstance(digest, str) or not _DIGEST.match(digest)):
        raise StudyError(f"{source}: 'table_digest' must be a sha256 digest (64 lowercase "
                         f"hex digits) or null, got {_short(digest)}.")
    settings = _settings_from_json(data.get("table_settings"), source)
    steps_data = data.get("steps")
    if not isinstance(steps_data, list):
        raise StudyError(f"{source}: 'steps' must be a list of steps, got "
                         f"{_short(steps_data)}.")
    steps = tuple(_step_from_json(item, f"{source}: step {number}")
                  for number, item in enumerate(steps_data, start=1))
    study = Study(table=table, steps=steps, title=title, table_digest=digest,
                  table_settings=settings)
    saved = None
    if data.get("results") is not None:
        saved = _saved_from_json(data["results"], steps, source)
    return StudyFile(study=study, saved=saved)


def _saved_from_json(data, steps: tuple[StudyStep, ...], source: str) -> SavedResults:
    if not isinstance(data, dict) or set(data) != set(_RESULTS_KEYS):
        raise StudyError(f"{source}: 'results' must be an object with the keys "
                         f"{', '.join(_RESULTS_KEYS)}, got {_short(data)}.")
    digest = data["table_digest"]
    if not isinstance(digest, str) or not _DIGEST.match(digest):
        raise StudyError(f"{source}: results: 'table_digest' must be a sha256 digest (64 "
                         f"lowercase hex digits), got {_short(digest)}.")
    items = data["steps"]
    if not isinstance(items, list) or len(items) != len(steps):
        raise StudyError(f"{source}: results: 'steps' must be a list with one entry per step "
                         f"({len(steps)}), got {_short(items)}.")
    results = tuple(_saved_step_from_json(item, step, f"{source}: results of step {number}")
                    for number, (item, step) in enumerate(zip(items, steps), start=1))
    return SavedResults(table_digest=digest, results=results)


def _saved_step_from_json(item, step: StudyStep, where: str):
    from analysis.stored import decode

    if item is None:
        return None
    if not isinstance(item, dict) or set(item) != set(_SAVED_STEP_KEYS):
        raise StudyError(f"{where}: a saved result is null or an object with the keys "
                         f"{', '.join(_SAVED_STEP_KEYS)}.")
    if item["kind"] != step.kind or item["params"] != step.params:
        raise StudyError(f"{where}: the result was computed for another step or other "
                         "settings than the step has; save the study again, or remove "
                         "'results' from the file to run it afresh.")
    try:
        result = decode(item["stored"], where="stored")
    except RecursionError:
        raise StudyError(f"{where}: the stored result is nested too deeply.") from None
    except StudyError as exc:
        raise StudyError(f"{where}: {exc}") from None
    if getattr(type(result), "kind", None) != step.kind or not hasattr(result, "to_json"):
        raise StudyError(f"{where}: the stored result is not the result of its step "
                         f"({KIND_TITLES[step.kind]}).")
    try:
        again = _plain_json(result.to_json())
    except Exception as exc:  # noqa: BLE001 - a hand-made record may break in many ways
        raise StudyError(f"{where}: the stored result cannot be read back "
                         f"({type(exc).__name__}: {exc}).") from None
    if again != item["json"]:
        raise StudyError(f"{where}: the stored result does not give the figures written "
                         "beside it ('json'); the file was changed by hand or is damaged.")
    return result


def _settings_from_json(data, source: str) -> TableSettings:
    if data is None:
        return TableSettings()
    if not isinstance(data, dict):
        raise StudyError(f"{source}: 'table_settings' must be an object with 'id_column' and "
                         f"'roles', got {_short(data)}.")
    unknown = [key for key in data if key not in _SETTINGS_KEYS]
    if unknown:
        raise StudyError(f"{source}: table_settings: unknown key {unknown[0]!r}; known keys are "
                         f"{', '.join(_SETTINGS_KEYS)}.")
    id_column = data.get("id_column")
    if id_column is not None and not isinstance(id_column, str):
        raise StudyError(f"{source}: table_settings: 'id_column' must be a column name or "
                         f"null, got {_short(id_column)}.")
    roles = data.get("roles") or {}
    if not isinstance(roles, dict):
        raise StudyError(f"{source}: table_settings: 'roles' must map column names to roles, "
                         f"got {_short(roles)}.")
    for column, role in roles.items():
        if role not in ROLES:
            raise StudyError(f"{source}: table_settings: column {column!r}: unknown role "
                             f"{_short(role)}; roles are {', '.join(ROLES)}.")
    return TableSettings(id_column=id_column, roles=roles)


def _step_from_json(item, where: str) -> StudyStep:
    if not isinstance(item, dict):
        raise StudyError(f"{where}: a step is an object with 'kind' and 'params', got "
                         f"{_short(item)}.")
    unknown = [key for key in item if key not in _STEP_KEYS]
    if unknown:
        raise StudyError(f"{where}: unknown key {unknown[0]!r}; a step has the keys "
                         f"{', '.join(_STEP_KEYS)}.")
    if "kind" not in item:
        raise StudyError(f"{where}: no 'kind'; known kinds are {', '.join(STEP_KINDS)}.")
    title = item.get("title")
    if title is not None and not isinstance(title, str):
        raise StudyError(f"{where}: 'title' must be text or null, got {_short(title)}.")
    params = check_step(item["kind"], item.get("params"), where=where)
    return StudyStep(kind=item["kind"], params=params, title=title or None)


def save_study(study: Study, path: str | Path, saved: SavedResults | None = None) -> None:
    """Write the study as indented JSON (replacing the file in one move), with ``saved``
    results when given.

    Refuses (StudyError) to write over the study's own table.
    """
    text = study_file_text(study, saved)
    write_text_file(path, text, keep_safe=(study.table, study.table_digest))


def study_file_text(study: Study, saved: SavedResults | None = None) -> str:
    """The text of the study's file: indented JSON; compact where results are stored, which
    hold long arrays."""
    data = study_to_json(study, saved)
    if saved is None:
        return json.dumps(data, indent=2, ensure_ascii=False, allow_nan=False) + "\n"
    results = data.pop("results")
    head = json.dumps(data, indent=2, ensure_ascii=False, allow_nan=False)
    body = json.dumps(results, ensure_ascii=False, allow_nan=False, separators=(",", ":"))
    return head[:-2] + ',\n  "results": ' + body + "\n}\n"


def write_text_file(path: str | Path, text: str, *,
                    keep_safe: tuple[str, str | None] | None = None) -> None:
    """Write UTF-8 text to ``path`` through a temporary file and one rename, so that a reader
    never sees half a file. The new file gets the usual permissions (the umask applies).

    ``keep_safe`` is (table file name, sha256 digest): writing over a file of that name whose
    bytes have that digest, the user's table, is refused. Errors are StudyError naming the
    path.
    """
    path = Path(path)
    if path.is_dir():
        raise StudyError(f"{path}: is a folder; give a file name to write.")
    if keep_safe is not None and keep_safe[1] and path.name == Path(keep_safe[0]).name \
            and path.is_file() and _file_digest(path) == keep_safe[1]:
        raise StudyError(f"{path}: this is the table itself; it is never written over. "
                         "Choose another file name.")
    temporary = path.with_name(f".{path.name}.{os.getpid()}.{secrets.token_hex(4)}.tmp")
    try:
        with open(temporary, "x", encoding="utf-8", newline="\n") as out:
            out.write(text)
        os.replace(temporary, path)
    except OSError as exc:
        temporary.unlink(missing_ok=True)
        raise StudyError(f"{path}: cannot be written ({exc.strerror or exc}). Check that the "
                         "folder exists and can be written to.") from None
    except BaseException:
        temporary.unlink(missing_ok=True)
        raise


def _file_digest(path: Path) -> str:
    digest = hashlib.sha256()
    with open(path, "rb") as handle:
        for block in iter(lambda: handle.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


def load_study(path: str | Path) -> Study:
    """Read and check a study file; StudyError (naming the file) if it is not a valid study.
    Saved results in the file are checked and left aside (see :func:`load_study_file`)."""
    return load_study_file(path).study


def load_study_file(path: str | Path) -> StudyFile:
    """Read and check a study file with its saved results, if any (StudyError naming the
    file when it is not a valid study)."""
    path = Path(path)
    name = str(path)
    try:
        if path.is_dir():
            raise StudyError(f"{name}: is a folder, not a study file.")
        size = path.stat().st_size
        if size > MAX_STUDY_BYTES:
            raise StudyError(f"{name}: {size} bytes is far too big for a study (at most "
                             f"{MAX_STUDY_BYTES}); is this a table rather than a study?")
        data = path.read_bytes()
    except FileNotFoundError:
        raise StudyError(f"{name}: no such file. Check the path.") from None
    except OSError as exc:
        raise StudyError(f"{name}: cannot be read ({exc.strerror}).") from None
    return read_study_file(data, name)


def read_study_file(data: bytes, name: str) -> StudyFile:
    """A study file from its bytes (an upload, say), checked; StudyError naming ``name``."""
    if len(data) > MAX_STUDY_BYTES:
        raise StudyError(f"{name}: {len(data)} bytes is far too big for a study (at most "
                         f"{MAX_STUDY_BYTES}); is this a table rather than a study?")
    try:
        text = data.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise StudyError(f"{name}: not UTF-8 text (bad bytes at offset {exc.start}); a study "
                         "is a JSON file.") from None
    try:
        parsed = json.loads(text, parse_constant=_reject_constant)
    except json.JSONDecodeError as exc:
        raise StudyError(f"{name}, line {exc.lineno}, column {exc.colno}: not valid JSON "
                         f"({exc.msg}). A study is a JSON file written by Invariant "
                         "Scout.") from None
    except ValueError as exc:
        raise StudyError(f"{name}: not valid JSON ({exc}).") from None
    except RecursionError:
        raise StudyError(f"{name}: JSON nested too deeply to be a study.") from None
    return study_file_from_json(parsed, source=name)


def _reject_constant(word: str):
    raise ValueError(f"{word} is not a JSON number")


# ----------------------------------------------------------------------------------------
# Checking JSON values against the annotations of step fields


def _fits(value, annotation) -> bool:
    origin = typing.get_origin(annotation)
    args = typing.get_args(annotation)
    if annotation is typing.Any:
        return True
    if annotation is type(None) or annotation is None:
        return value is None
    if origin in (typing.Union, types.UnionType):
        return any(_fits(value, arg) for arg in args)
    if origin is typing.Literal:
        return value in args
    if annotation is bool:
        return isinstance(value, bool)
    if annotation is int:
        return isinstance(value, int) and not isinstance(value, bool)
    if annotation is float:
        return isinstance(value, (int, float)) and not isinstance(value, bool) \
            and math.isfinite(value)
    if annotation is str:
        return isinstance(value, str)
    if origin in (list, tuple, set, frozenset) or annotation in (list, tuple):
        if not isinstance(value, list):
            return False
        if not args:
            return True
        inner = args[0]
        return all(_fits(v, inner) for v in value)
    if origin is dict or annotation is dict:
        if not isinstance(value, dict):
            return False
        inner = args[1] if len(args) == 2 else typing.Any
        return all(isinstance(k, str) and _fits(v, inner) for k, v in value.items())
    # An annotation we do not know how to check: the step validates it when it runs.
    return True


def _describe(annotation) -> str:
    origin = typing.get_origin(annotation)
    args = typing.get_args(annotation)
    if annotation is type(None):
        return "null"
    if origin in (typing.Union, types.UnionType):
        return " or ".join(_describe(arg) for arg in args)
    if origin is typing.Literal:
        return "one of " + ", ".join(json.dumps(a) for a in args)
    names = {bool: "true or false", int: "a whole number", float: "a number", str: "text"}
    if annotation in names:
        return names[annotation]
    if origin in (list, tuple, set, frozenset) or annotation in (list, tuple):
        return f"a list of {_plural(args[0])}" if args else "a list"
    if origin is dict or annotation is dict:
        return "an object"
    return getattr(annotation, "__name__", str(annotation))


def _plural(annotation) -> str:
    words = {str: "names (text)", int: "whole numbers", float: "numbers"}
    return words.get(annotation, _describe(annotation))


def _json_type(value) -> str:
    if isinstance(value, list):
        return "a list"
    if isinstance(value, str):
        return "text"
    if isinstance(value, bool):
        return "true/false"
    if isinstance(value, (int, float)):
        return "a number"
    if value is None:
        return "null"
    return type(value).__name__


def _short(value, width: int = 50) -> str:
    try:
        text = json.dumps(value, ensure_ascii=False)
    except (TypeError, ValueError):
        text = repr(value)
    return text if len(text) <= width else text[: width - 3] + "..."


def _copy_json(value):
    """A deep copy of plain JSON data, so that a study's parameters cannot be changed."""
    if isinstance(value, dict):
        return {k: _copy_json(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_copy_json(v) for v in value]
    return value


# ----------------------------------------------------------------------------------------
# Running a study


class ResultCache:
    """Step results kept in memory, keyed by (table digest and roles, kind, parameters).

    Holds at most ``max_entries`` results; the least recently used goes first. Only results
    are kept, never errors, so a step that failed for want of memory is tried again.
    """

    def __init__(self, max_entries: int = 64):
        if max_entries < 1:
            raise ValueError("a result cache needs room for at least one result")
        self.max_entries = max_entries
        self._entries: OrderedDict[str, object] = OrderedDict()

    def get(self, key: str):
        """The cached result for ``key``, or None."""
        if key not in self._entries:
            return None
        self._entries.move_to_end(key)
        return self._entries[key]

    def put(self, key: str, result) -> None:
        self._entries[key] = result
        self._entries.move_to_end(key)
        while len(self._entries) > self.max_entries:
            self._entries.popitem(last=False)

    def clear(self) -> None:
        self._entries.clear()

    def discard(self, key: str) -> None:
        """Let the result for ``key`` go, if it is held."""
        self._entries.pop(key, None)

    def __contains__(self, key: str) -> bool:
        return key in self._entries

    def __len__(self) -> int:
        return len(self._entries)


def table_key(table: Table) -> str:
    """What a cached result depends on in a table: its bytes and how its columns are read."""
    roles = [[c.name, c.role] for c in table.columns]
    return json.dumps([table.digest, table.id_column, roles], ensure_ascii=False)


def result_key(table: Table, kind: str, params: dict) -> str:
    """The cache key of one step on one table (the parameters include the seed)."""
    return json.dumps([table_key(table), kind, params], sort_keys=True, ensure_ascii=False,
                      default=str)


@dataclass(frozen=True)
class TableInfo:
    """The table a study ran on."""

    name: str
    digest: str
    rows: int
    id_column: str | None = None

    def to_json(self) -> dict:
        return {"name": self.name, "digest": self.digest, "rows": self.rows,
                "id_column": self.id_column}


@dataclass(frozen=True)
class StepOutcome:
    """What became of one step: its result, or the message saying why it could not run.

    ``index`` counts from 0; ``internal`` is True when the error is a bug in the program
    rather than something about the table or the settings.
    """

    index: int
    kind: str
    title: str
    params: dict
    result: object = None
    error: str | None = None
    elapsed_seconds: float = 0.0
    cached: bool = False
    internal: bool = False
    stopped: bool = False  # the user asked the step to stop before it finished

    @property
    def ok(self) -> bool:
        return self.error is None

    def to_json(self) -> dict:
        """The outcome as plain JSON, without timings (which :meth:`StudyRun.to_json` keeps
        apart so that two runs can be compared)."""
        return {
            "index": self.index,
            "kind": self.kind,
            "title": self.title,
            "params": _copy_json(self.params),
            "ok": self.ok,
            "error": self.error,
            "result": None if self.result is None else self.result.to_json(),
        }


@dataclass(frozen=True)
class StudyRun:
    """The outcome of running a study on a table.

    ``source_table`` is the table the steps saw (roles applied); the report draws figures from
    it. It is left out of comparisons and of the JSON.
    """

    study: Study
    table: TableInfo
    outcomes: tuple[StepOutcome, ...]
    warnings: tuple[str, ...] = ()
    source_table: Table | None = field(default=None, repr=False, compare=False)

    @property
    def ok(self) -> bool:
        """True when every step ran."""
        return all(outcome.ok for outcome in self.outcomes)

    @property
    def elapsed_seconds(self) -> float:
        return sum(outcome.elapsed_seconds for outcome in self.outcomes)

    @property
    def results(self) -> list:
        """The results of the steps that ran, in order."""
        return [o.result for o in self.outcomes if o.result is not None]

    def _repr_html_(self) -> str:
        from analysis.notebook import run_html

        return run_html(self)

    def summary(self) -> str:
        """The run in a few lines per step, for the command line."""
        title = self.study.title or f"Study of {self.table.name}"
        failed = sum(not o.ok for o in self.outcomes)
        lines = [f"{title}",
                 f"table {self.table.name}: {self.table.rows} rows, "
                 f"sha256 {self.table.digest[:12]}...; {len(self.outcomes)} steps"
                 + (f", {failed} could not run" if failed else "")]
        lines.extend(f"warning: {w}" for w in self.warnings)
        for outcome in self.outcomes:
            timing = "cached" if outcome.cached else f"{outcome.elapsed_seconds:.1f} s"
            lines.append("")
            lines.append(f"[{outcome.index + 1}] {outcome.title} ({outcome.kind}, {timing})")
            if outcome.ok:
                text = _safe_summary(outcome.result)
                lines.extend("    " + line for line in text.splitlines())
            else:
                lines.append(f"    could not run: {outcome.error}")
        return "\n".join(lines)

    def to_json(self) -> dict:
        """Plain JSON: the study, the table, and each step's result or error.

        Timings sit under the top-level key "timing" only, so that two runs of one study on
        one table give equal JSON once that key is removed.
        """
        return {
            "version": RUN_VERSION,
            "study": study_to_json(self.study),
            "table": self.table.to_json(),
            "ok": self.ok,
            "warnings": list(self.warnings),
            "steps": [outcome.to_json() for outcome in self.outcomes],
            "timing": {
                "steps": [round(o.elapsed_seconds, 6) for o in self.outcomes],
                "cached": [o.cached for o in self.outcomes],
                "total": round(self.elapsed_seconds, 6),
            },
        }


ProgressCallback = Callable[[str, int, int], None]
_TIMING_KEYS = ("timing", "elapsed_seconds")


def without_timing(data):
    """A copy of run JSON with every timing removed (the top-level "timing" key and any
    "elapsed_seconds" a step's result reports), for comparing two runs number by number."""
    if isinstance(data, dict):
        return {k: without_timing(v) for k, v in data.items() if k not in _TIMING_KEYS}
    if isinstance(data, list):
        return [without_timing(v) for v in data]
    return data


def apply_table_settings(study: Study, table: Table) -> Table:
    """The table with the study's id column and role overrides applied (StudyError if they
    do not fit it: a column missing, a cell that does not fit a role)."""
    settings = study.table_settings
    if not settings.roles and settings.id_column in (None, table.id_column):
        return table
    try:
        return table.with_roles(
            settings.role_overrides,
            id_column=... if settings.id_column is None else settings.id_column,
        )
    except TableError as exc:
        raise StudyError(f"the study's table settings do not fit {table.name}: {exc}") \
            from None


def run_study(study: Study, table: Table, *, cache: ResultCache | None = None,
              progress: ProgressCallback | None = None) -> StudyRun:
    """Run every step of ``study`` on ``table``, in order.

    The study's id column and role overrides are applied first (StudyError if they do not
    fit the table). A table whose digest differs from the study's gives a warning, not a
    failure. A step that cannot run records its message and the next step runs; an
    unexpected exception inside a step is recorded as an internal error, never raised.
    ``progress(stage, done, total)`` is called before each step and once at the end.
    Results come from and go to ``cache`` when one is given.
    """
    table = apply_table_settings(study, table)
    warnings = []
    if study.table_digest is not None and study.table_digest != table.digest:
        warnings.append(
            f"{table.name} is not the table this study was saved with (its sha256 digest "
            f"{table.digest[:12]}... differs from {study.table_digest[:12]}...); the numbers "
            "may differ from the saved study's."
        )
    total = len(study.steps)
    outcomes = []
    for index, step in enumerate(study.steps):
        title = step.display_title
        if progress is not None:
            progress(f"step {index + 1} of {total}: {title}", index, total)
        outcomes.append(_run_one(index, step, title, table, cache))
    if progress is not None:
        progress("done", total, total)
    info = TableInfo(name=table.name, digest=table.digest, rows=table.n_rows,
                     id_column=table.id_column)
    return StudyRun(study=study, table=info, outcomes=tuple(outcomes),
                    warnings=tuple(warnings), source_table=table)


def run_step(step: StudyStep, table: Table, *, index: int = 0,
             cache: ResultCache | None = None, progress=None) -> StepOutcome:
    """Run one step on a table whose study settings are already applied (see
    :func:`apply_table_settings`). Never raises for a failing step: the outcome holds the
    result or the message. ``progress`` receives the step's :class:`analysis.progress.Progress`
    records, for the steps that report them."""
    return _run_one(index, step, step.display_title, table, cache, progress)


def _run_one(index: int, step: StudyStep, title: str, table: Table,
             cache: ResultCache | None, progress=None) -> StepOutcome:
    base = dict(index=index, kind=step.kind, title=title, params=_copy_json(step.params))
    key = result_key(table, step.kind, step.params)
    if cache is not None:
        hit = cache.get(key)
        if hit is not None:
            return StepOutcome(**base, result=hit, cached=True)
    started = time.perf_counter()
    try:
        built = step.build()
        result = built.run(table, progress=progress)
    except StepStopped as exc:
        text = str(exc)
        return StepOutcome(**base, error=text[:1].upper() + text[1:], stopped=True,
                           elapsed_seconds=time.perf_counter() - started)
    except ScoutError as exc:
        return StepOutcome(**base, error=str(exc),
                           elapsed_seconds=time.perf_counter() - started)
    except MemoryError:
        return StepOutcome(**base, error="out of memory. Try fewer columns or a sample of "
                           "the table.", elapsed_seconds=time.perf_counter() - started)
    except Exception as exc:  # noqa: BLE001 - one broken step must not lose the others
        message = (f"internal error ({type(exc).__name__}: {exc}). This is a bug in Invariant "
                   "Scout, not in your table; please report it with the study file.")
        return StepOutcome(**base, error=message, internal=True,
                           elapsed_seconds=time.perf_counter() - started)
    elapsed = time.perf_counter() - started
    if cache is not None:
        cache.put(key, result)
    return StepOutcome(**base, result=result, elapsed_seconds=elapsed)


class StepJob:
    """One step running on a thread of its own, so that whoever waits for it (the page)
    stays free to draw its progress and to ask it to stop.

    The step's :class:`analysis.progress.Progress` records land in ``latest``; :meth:`stop`
    asks it to end at its next report (every kind reports, between units of its work). A
    step asked to stop after its last report still ends as stopped, its result set aside.
    ``outcome`` is the :class:`StepOutcome` once the step has ended, with ``stopped`` set
    when it was stopped. Nothing goes into a cache here; the caller keeps the result it
    wants.
    """

    def __init__(self, step: StudyStep, table: Table, *, index: int = 0):
        self.step = step
        self.index = index
        self.latest: Progress | None = None
        self.outcome: StepOutcome | None = None
        self.started = time.monotonic()
        self._stopper = Stopper()
        self._table = table
        self._thread = threading.Thread(target=self._work, daemon=True,
                                        name=f"step {index + 1}: {step.kind}")

    def start(self) -> StepJob:
        self._thread.start()
        return self

    def _work(self) -> None:
        reporter = Reporter(self._note, stopper=self._stopper)
        outcome = run_step(self.step, self._table, index=self.index, progress=reporter)
        if self._stopper.requested and outcome.ok:
            # the stop came after the step's last report: its result is not wanted
            outcome = dataclasses.replace(outcome, result=None, stopped=True,
                                          error="Stopped on request; the result that came "
                                                "later was set aside.")
        self.outcome = outcome

    def _note(self, found: Progress) -> None:
        self.latest = found

    def stop(self) -> None:
        """Ask the step to stop at its next report."""
        self._stopper.request()

    @property
    def stopping(self) -> bool:
        return self._stopper.requested

    @property
    def done(self) -> bool:
        return self.outcome is not None

    @property
    def seconds(self) -> float:
        """Seconds since the step started."""
        return time.monotonic() - self.started

    def wait(self, seconds: float | None = None) -> bool:
        """Wait up to ``seconds`` (None: until the end) for the step; True once it ended."""
        self._thread.join(seconds)
        return self.done


def _safe_summary(result) -> str:
    try:
        return result.summary()
    except Exception as exc:  # noqa: BLE001 - a summary must not sink the whole run's text
        return f"(no summary: {type(exc).__name__}: {exc})"
