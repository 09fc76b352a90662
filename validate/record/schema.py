"""The JSON Schema (draft 2020-12) of results.json, generated from the record's declarations.

The schema is shipped as validate/record/results.schema.json for laboratory information
systems that read the record. It is made from the dataclass fields and type hints of
validate.record.types, so it cannot drift from what the program writes; a test compares the
shipped file with a fresh one. Regenerate it after changing the record's layout with

    python -m validate.record.schema
"""

from __future__ import annotations

import dataclasses
import json
import sys
import types
import typing
from pathlib import Path
from typing import Any

from validate.record.tree import hints_of, is_omitted_when_none, json_key
from validate.record.types import SCHEMA_VERSION, Record

SCHEMA_FILE = Path(__file__).with_name("results.schema.json")
DIALECT = "https://json-schema.org/draft/2020-12/schema"
_SCALARS = {str: "string", bool: "boolean", int: "integer", float: "number", type(None): "null"}


def record_schema() -> dict:
    """The schema of a whole record, with every part under $defs."""
    definitions: dict[str, dict] = {}
    _define(Record, definitions)
    top = definitions.pop(Record.__name__)
    top["properties"]["schema_version"]["pattern"] = rf"^{SCHEMA_VERSION.split('.')[0]}\.[0-9]+$"
    top["description"] = (f"{_doc_of(Record)} Layout version {SCHEMA_VERSION}. Numbers that are not finite "
                          "are written as null.")
    return {"$schema": DIALECT, "title": "validate quality record (results.json)", **top,
            "$defs": dict(sorted(definitions.items()))}


def schema_text() -> str:
    return json.dumps(record_schema(), indent=2, ensure_ascii=False) + "\n"


def _define(cls: type, definitions: dict[str, dict]) -> dict:
    """A reference to the definition of dataclass `cls`, adding it (and its parts) to `definitions`."""
    name = cls.__name__
    if name not in definitions:
        definitions[name] = {}  # reserved first: a part may refer to itself
        hints = hints_of(cls)
        properties, required = {}, []
        for field in dataclasses.fields(cls):
            prop = _schema_of(hints[field.name], definitions)
            if field.metadata.get("doc"):
                prop = {**prop, "description": field.metadata["doc"]}
            properties[json_key(field)] = prop
            if not is_omitted_when_none(field):
                required.append(json_key(field))
        body: dict[str, Any] = {"type": "object"}
        if _doc_of(cls):
            body["description"] = _doc_of(cls)
        body.update({"properties": properties, "required": required, "additionalProperties": False})
        definitions[name] = body
    return {"$ref": f"#/$defs/{name}"}


def _schema_of(hint: Any, definitions: dict[str, dict]) -> dict:
    if hint is Any:
        return {}  # any JSON value
    if dataclasses.is_dataclass(hint) and isinstance(hint, type):
        return _define(hint, definitions)
    if hint in _SCALARS:
        return {"type": _SCALARS[hint]}
    origin, args = typing.get_origin(hint), typing.get_args(hint)
    if origin in (types.UnionType, typing.Union):
        members = [_schema_of(a, definitions) for a in args]
        if all(set(m) == {"type"} for m in members):  # plain types only: one "type" list
            return {"type": [m["type"] for m in members]}
        return {"anyOf": members}
    if origin is typing.Literal:
        return {"enum": list(args)}
    if origin in (tuple, list):
        return {"type": "array", "items": _schema_of(args[0] if args else Any, definitions)}
    if origin is dict:
        return {"type": "object", "additionalProperties": _schema_of(args[1], definitions)}
    raise TypeError(f"no JSON Schema for the type {hint!r}")


def _doc_of(cls: type) -> str:
    """The class's own docstring (not the signature dataclass writes when there is none)."""
    doc = cls.__doc__ or ""
    return "" if doc.startswith(f"{cls.__name__}(") else " ".join(doc.split())


def main(argv: list[str] | None = None) -> int:
    """Write the schema to the package (or to the path given)."""
    if argv and argv[0].startswith("-"):  # not a path: `--help` must not become a file named --help
        print("usage: python -m validate.record.schema [PATH]   (default: the package's results.schema.json)")
        return 0 if argv[0] in ("-h", "--help") else 2
    target = Path(argv[0]) if argv else SCHEMA_FILE
    target.write_text(schema_text(), encoding="utf-8")
    print(f"wrote {target}")
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
