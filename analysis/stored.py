"""Step results written as plain JSON and read back into result objects, for study files
that carry their results.

A study file may come from anyone, so nothing here runs code named by the file: a result is
written as tagged JSON (see :func:`encode`) and read back by :func:`decode`, which builds only
dataclasses of the step modules listed in :data:`RESULT_MODULES`, numpy arrays of plain
element types, fractions, tuples, dicts and JSON scalars. Anything else is a
:class:`StoredResultError` naming the place in the value (``fields.equation.terms[2]``).

The tags are one-key objects whose key starts with ``$``::

    {"$dataclass": "analysis.equations.Term", "fields": {...}}
    {"$array": {"dtype": "int64", "shape": [3], "data": [1, 2, 3]}}
    {"$tuple": [...]}   {"$dict": [[key, value], ...]}   {"$fraction": "3/4"}
    {"$float": "nan"}   (also "inf" and "-inf"; finite floats are plain JSON numbers)
    {"$note": {"code": "rows_dropped", "text": "...", "figures": {"$dict": [...]}}}

A :class:`~analysis.notes.Note` keeps its code and figures through the file; the result's
``to_json`` (the command line's JSON and the study's ``json``) still writes its words only.
"""

from __future__ import annotations

import dataclasses
import importlib
import math
import re
from fractions import Fraction

import numpy as np

from analysis.errors import StudyError
from analysis.notes import Note

# The modules whose dataclasses a stored result may hold: the step modules and the records
# their results carry.
RESULT_MODULES = (
    "analysis.overview", "analysis.projection", "analysis.clustering", "analysis.separation",
    "analysis.relations", "analysis.outliers", "analysis.equations", "analysis.congruences",
    "analysis.importance", "analysis.reading", "analysis.interval_rows", "analysis.leakage",
    "analysis.derived", "analysis.progress", "analysis.features",
)
# numpy element kinds an array may have: booleans, integers, floats, text, Python objects
# (each element then stored and checked like any other value).
_ARRAY_KINDS = "biufUO"
_NAME = re.compile(r"^[A-Za-z][A-Za-z0-9_]*$")
_NOTE_CODE = re.compile(r"^[a-z][a-z0-9_]*$")
_NOTE_KEYS = {"code", "text", "figures"}
_FLOAT_WORDS = {"nan": math.nan, "inf": math.inf, "-inf": -math.inf}
# Arrays with more cells than this are not a result of a table a study file could carry.
MAX_CELLS = 50_000_000


class StoredResultError(StudyError):
    """A stored result that cannot be written or read back; the message names where."""


def encode(value, where: str = "result"):
    """``value`` (a step's result, or any part of it) as tagged plain JSON."""
    if isinstance(value, Note):
        return {"$note": {"code": value.code, "text": str(value),
                          "figures": encode(value.figures, f"{where}.figures")}}
    if value is None or isinstance(value, (bool, str)):
        return value
    if isinstance(value, int):
        return int(value)
    if isinstance(value, float):
        return value if math.isfinite(value) else {"$float": _float_word(value)}
    if isinstance(value, Fraction):
        return {"$fraction": f"{value.numerator}/{value.denominator}"}
    if isinstance(value, (np.ndarray, np.generic)):
        return _encode_array(np.asarray(value), where, scalar=isinstance(value, np.generic))
    if dataclasses.is_dataclass(value) and not isinstance(value, type):
        return _encode_dataclass(value, where)
    if isinstance(value, tuple):
        return {"$tuple": [encode(v, f"{where}[{i}]") for i, v in enumerate(value)]}
    if isinstance(value, list):
        return [encode(v, f"{where}[{i}]") for i, v in enumerate(value)]
    if isinstance(value, dict):
        return {"$dict": [[encode(k, f"{where} key"), encode(v, f"{where}[{k!r}]")]
                          for k, v in value.items()]}
    raise StoredResultError(f"{where}: a {type(value).__name__} cannot be stored in a study "
                            "file. This is a bug in Invariant Scout; save the study without "
                            "its results.")


def _float_word(value: float) -> str:
    if math.isnan(value):
        return "nan"
    return "inf" if value > 0 else "-inf"


def _encode_dataclass(value, where: str) -> dict:
    cls = type(value)
    if cls.__module__ not in RESULT_MODULES:
        raise StoredResultError(f"{where}: a {cls.__name__} from {cls.__module__} cannot be "
                                "stored in a study file.")
    fields = {f.name: encode(getattr(value, f.name), f"{where}.{f.name}")
              for f in dataclasses.fields(value)}
    return {"$dataclass": f"{cls.__module__}.{cls.__qualname__}", "fields": fields}


def _encode_array(array: np.ndarray, where: str, *, scalar: bool) -> dict:
    if array.dtype.kind not in _ARRAY_KINDS:
        raise StoredResultError(f"{where}: an array of {array.dtype} cannot be stored.")
    if array.dtype.kind == "O":
        data = [encode(v, f"{where}[{i}]") for i, v in enumerate(array.ravel().tolist())]
        dtype = "object"
    else:
        data = [encode(v, where) for v in array.ravel().tolist()]
        dtype = array.dtype.str
    return {"$array": {"dtype": dtype, "shape": list(array.shape), "data": data,
                       "scalar": scalar}}


def decode(data, where: str = "result"):
    """The value :func:`encode` wrote, checked tag by tag (StoredResultError naming where)."""
    if data is None or isinstance(data, (bool, str, int)):
        return data
    if isinstance(data, float):
        return data
    if isinstance(data, list):
        return [decode(v, f"{where}[{i}]") for i, v in enumerate(data)]
    if not isinstance(data, dict) or len(data) not in (1, 2):
        raise StoredResultError(f"{where}: not a stored value (an object with one '$' tag "
                                f"was expected, got {type(data).__name__}).")
    tag = next(iter(data))
    if tag == "$dataclass":
        return _decode_dataclass(data, where)
    if len(data) != 1:
        raise StoredResultError(f"{where}: a stored value has one tag, got {sorted(data)}.")
    body = data[tag]
    if tag == "$tuple" and isinstance(body, list):
        return tuple(decode(v, f"{where}[{i}]") for i, v in enumerate(body))
    if tag == "$dict" and isinstance(body, list):
        return _decode_dict(body, where)
    if tag == "$fraction" and isinstance(body, str):
        try:
            return Fraction(body)
        except (ValueError, ZeroDivisionError):
            raise StoredResultError(f"{where}: {body!r} is not a fraction p/q.") from None
    if tag == "$float" and body in _FLOAT_WORDS:
        return _FLOAT_WORDS[body]
    if tag == "$array" and isinstance(body, dict):
        return _decode_array(body, where)
    if tag == "$note" and isinstance(body, dict):
        return _decode_note(body, where)
    raise StoredResultError(f"{where}: unknown or malformed tag {tag!r}.")


def _decode_dict(body: list, where: str) -> dict:
    out = {}
    for i, pair in enumerate(body):
        if not isinstance(pair, list) or len(pair) != 2:
            raise StoredResultError(f"{where}: entry {i} of a dict is not a [key, value] pair.")
        key = decode(pair[0], f"{where} key {i}")
        try:
            hash(key)
        except TypeError:
            raise StoredResultError(f"{where}: key {i} of a dict cannot be a key.") from None
        out[key] = decode(pair[1], f"{where}[{key!r}]")
    return out


def _decode_note(body: dict, where: str) -> Note:
    code, text = body.get("code"), body.get("text")
    if set(body) != _NOTE_KEYS or not isinstance(text, str) or not isinstance(code, str) \
            or not _NOTE_CODE.match(code):
        raise StoredResultError(f"{where}: a stored note needs a code (snake_case), a text and "
                                "figures.")
    figures = decode(body["figures"], f"{where}.figures")
    if not isinstance(figures, dict) or not all(isinstance(k, str) for k in figures):
        raise StoredResultError(f"{where}: a stored note's figures are a dict named by words.")
    return Note(code, text, **figures)


def _result_class(name, where: str):
    if not isinstance(name, str) or "." not in name:
        raise StoredResultError(f"{where}: {name!r} does not name a result record.")
    module_name, _, class_name = name.rpartition(".")
    if module_name not in RESULT_MODULES or not _NAME.match(class_name):
        raise StoredResultError(f"{where}: {name!r} is not a record a step result holds.")
    try:
        module = importlib.import_module(module_name)
    except ImportError as exc:
        raise StoredResultError(f"{where}: {module_name} is not available here ({exc}).") \
            from None
    cls = module.__dict__.get(class_name)
    if not (isinstance(cls, type) and dataclasses.is_dataclass(cls)
            and cls.__module__ == module_name):
        raise StoredResultError(f"{where}: {name!r} is not a record a step result holds.")
    return cls


def _decode_dataclass(data: dict, where: str):
    cls = _result_class(data.get("$dataclass"), where)
    fields = data.get("fields")
    if set(data) != {"$dataclass", "fields"} or not isinstance(fields, dict):
        raise StoredResultError(f"{where}: a stored {cls.__name__} needs 'fields'.")
    known = {f.name: f for f in dataclasses.fields(cls)}
    if set(fields) != set(known):
        extra = sorted(set(fields) - set(known))
        lacking = sorted(set(known) - set(fields))
        raise StoredResultError(f"{where}: a stored {cls.__name__} has "
                                + (f"unknown fields {extra}" if extra else
                                   f"no fields {lacking}") + ".")
    values = {name: decode(fields[name], f"{where}.{name}") for name in known}
    given = {name: v for name, v in values.items() if known[name].init}
    try:
        built = cls(**given)
    except (TypeError, ValueError) as exc:
        raise StoredResultError(f"{where}: a {cls.__name__} cannot be made of these fields "
                                f"({exc}).") from None
    for name, v in values.items():
        if not known[name].init:
            object.__setattr__(built, name, v)
    return built


def _decode_array(body: dict, where: str):
    dtype, shape, data = body.get("dtype"), body.get("shape"), body.get("data")
    if not (isinstance(shape, list) and all(isinstance(n, int) and not isinstance(n, bool)
                                            and 0 <= n for n in shape)
            and isinstance(data, list) and isinstance(dtype, str)):
        raise StoredResultError(f"{where}: a stored array needs a dtype, a shape and data.")
    cells = math.prod(shape)
    if cells != len(data) or cells > MAX_CELLS:
        raise StoredResultError(f"{where}: a stored array of shape {shape} holds "
                                f"{len(data)} values.")
    try:
        kind = np.dtype(dtype).kind
    except TypeError:
        raise StoredResultError(f"{where}: {dtype!r} is not an array type.") from None
    if kind not in _ARRAY_KINDS:
        raise StoredResultError(f"{where}: an array of {dtype} cannot be read.")
    values = [decode(v, f"{where}[{i}]") for i, v in enumerate(data)]
    try:
        if kind == "O":
            array = np.empty(cells, dtype=object)
            for i, v in enumerate(values):
                array[i] = v
        else:
            array = np.array(values, dtype=dtype)
        array = array.reshape(shape)
    except (TypeError, ValueError, OverflowError) as exc:
        raise StoredResultError(f"{where}: the values do not fit an array of {dtype} "
                                f"({exc}).") from None
    if body.get("scalar") is True and array.shape == ():
        return array[()]
    return array
