"""One way between the record's typed tree and its JSON form, for every part of it.

`to_dict` and `from_dict` are driven by the dataclass fields and their type hints, so no part
of the record has a hand-written conversion that could drift from its declaration:

- a field's JSON key is its name, or `metadata["key"]` where the name cannot be a Python name
  (equipment's "class");
- a field made with `omitted_when_none()` is left out of the JSON when it is None (keys that a
  stage adds only sometimes, e.g. a result's Monte Carlo block);
- numbers that are not finite (NaN, infinity) are written as null, the one way the record has
  always stored them; numpy scalars become plain Python numbers;
- `from_dict` checks the shape on the way in: every key known, every required key present,
  every value of the declared JSON type. A `RecordShapeError` names where the shape is wrong.

Supported hints: str, int, float, bool, None, Literal[...], Any (any JSON value, unchecked),
X | Y, tuple[X, ...], list[X], dict[str, X] and frozen dataclasses.
"""

from __future__ import annotations

import dataclasses
import functools
import math
import types
import typing
from typing import Any, TypeVar

T = TypeVar("T")
Number = float | None  # a number of the record; null where it is not defined (or not finite)
JsonObject = dict[str, Any]  # a JSON object whose keys vary: its values are not checked
_SCALARS: dict[type, str] = {str: "text", bool: "true or false", int: "a whole number", float: "a number"}


class RecordShapeError(ValueError):
    """A value does not have the shape the record declares; `where` is its path, e.g. results[2].value."""

    def __init__(self, where: str, problem: str):
        super().__init__(f"{where or 'the record'}: {problem}")
        self.where = where
        self.problem = problem


def omitted_when_none(doc: str = "") -> Any:
    """A field that defaults to None and is left out of the JSON when it is None."""
    return dataclasses.field(default=None, metadata={"omit_when_none": True, "doc": doc})


def described(doc: str, **kwargs) -> Any:
    """A field with a description for the JSON Schema (and, with key=..., another JSON key)."""
    metadata = {"doc": doc, **({"key": kwargs.pop("key")} if "key" in kwargs else {})}
    return dataclasses.field(metadata=metadata, **kwargs)


def json_key(field: dataclasses.Field) -> str:
    return field.metadata.get("key", field.name)


def is_omitted_when_none(field: dataclasses.Field) -> bool:
    return bool(field.metadata.get("omit_when_none"))


@functools.cache
def hints_of(cls: type) -> dict[str, Any]:
    """The resolved type hints of a dataclass (cached: the record has thousands of parts)."""
    return typing.get_type_hints(cls)


def to_dict(value: Any) -> Any:
    """The JSON form of any part of the record (or of any plain value inside it)."""
    if dataclasses.is_dataclass(value) and not isinstance(value, type):
        out = {}
        for field in dataclasses.fields(value):
            item = getattr(value, field.name)
            if item is None and is_omitted_when_none(field):
                continue
            out[json_key(field)] = to_dict(item)
        return out
    if isinstance(value, dict):
        return {str(k): to_dict(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [to_dict(v) for v in value]
    if hasattr(value, "item") and not isinstance(value, (str, bytes)):
        value = value.item()  # numpy scalar -> Python number
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return value


def from_dict(hint: Any, data: Any, where: str = "") -> Any:
    """`data` (JSON form) as a value of type `hint`; raises RecordShapeError where it does not fit."""
    if hint is Any:
        return to_dict(data)  # any JSON value, kept in its JSON form
    if dataclasses.is_dataclass(hint) and isinstance(hint, type):
        return _dataclass_from_dict(hint, data, where)
    origin = typing.get_origin(hint)
    if origin in (types.UnionType, typing.Union):
        return _union_from_dict(typing.get_args(hint), data, where)
    if origin is typing.Literal:
        if data not in typing.get_args(hint):
            raise RecordShapeError(where, f"expected one of {list(typing.get_args(hint))}, got {data!r}")
        return data
    if origin in (tuple, list):
        return _sequence_from_dict(origin, typing.get_args(hint), data, where)
    if origin is dict:
        if not isinstance(data, dict):
            raise RecordShapeError(where, f"expected an object, got {_describe(data)}")
        value_hint = typing.get_args(hint)[1]
        return {str(k): from_dict(value_hint, v, f"{where}.{k}") for k, v in data.items()}
    return _scalar_from_dict(hint, data, where)


def _dataclass_from_dict(cls: type, data: Any, where: str) -> Any:
    if not isinstance(data, dict):
        raise RecordShapeError(where, f"expected an object, got {_describe(data)}")
    fields = dataclasses.fields(cls)
    known = {json_key(f) for f in fields}
    unknown = [k for k in data if k not in known]
    if unknown:
        raise RecordShapeError(where, f"unexpected key {unknown[0]!r} (known keys: {', '.join(sorted(known))})")
    hints = hints_of(cls)
    values = {}
    for field in fields:
        key = json_key(field)
        inner = f"{where}.{key}" if where else key
        if key not in data:
            if is_omitted_when_none(field):
                continue
            raise RecordShapeError(inner, "required key is missing")
        values[field.name] = from_dict(hints[field.name], data[key], inner)
    return cls(**values)


def _union_from_dict(members: tuple, data: Any, where: str) -> Any:
    if data is None:
        if type(None) in members:
            return None
        raise RecordShapeError(where, f"expected {_name_of(members)}, got null")
    problems = []
    for member in members:
        if member is type(None):
            continue
        try:
            return from_dict(member, data, where)
        except RecordShapeError as exc:
            problems.append(exc)
    if not problems:
        raise RecordShapeError(where, f"expected null, got {_describe(data)}")
    # the deepest complaint says most about what is wrong (e.g. a bad number inside an object)
    raise max(problems, key=lambda e: len(e.where))


def _sequence_from_dict(origin: type, args: tuple, data: Any, where: str) -> Any:
    if not isinstance(data, (list, tuple)):
        raise RecordShapeError(where, f"expected a list, got {_describe(data)}")
    item_hint = args[0] if args else Any
    items = [from_dict(item_hint, v, f"{where}[{i}]") for i, v in enumerate(data)]
    return tuple(items) if origin is tuple else items


def _scalar_from_dict(hint: Any, data: Any, where: str) -> Any:
    if hint is type(None):
        if data is not None:
            raise RecordShapeError(where, f"expected null, got {_describe(data)}")
        return None
    if hasattr(data, "item") and not isinstance(data, (str, bytes)):
        data = data.item()  # numpy scalar from a stage's dict
    fits = {str: isinstance(data, str), bool: isinstance(data, bool),
            int: isinstance(data, int) and not isinstance(data, bool),
            float: isinstance(data, (int, float)) and not isinstance(data, bool)}
    if hint not in fits:
        raise TypeError(f"the record cannot hold values of type {hint!r} ({where})")
    if not fits[hint]:
        raise RecordShapeError(where, f"expected {_SCALARS[hint]}, got {_describe(data)}")
    return data


def _name_of(members: tuple) -> str:
    return " or ".join(_SCALARS.get(m, getattr(m, "__name__", str(m))) for m in members if m is not type(None))


def _describe(data: Any) -> str:
    if data is None:
        return "null"
    if isinstance(data, dict):
        return "an object"
    if isinstance(data, (list, tuple)):
        return "a list"
    return f"{type(data).__name__} {data!r}"[:80]


class RecordPart:
    """Base of every part of the record: the generic conversion as methods."""

    def to_dict(self) -> dict:
        return to_dict(self)

    @classmethod
    def from_dict(cls: type[T], data: Any, where: str = "") -> T:
        return from_dict(cls, data, where)
