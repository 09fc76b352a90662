"""results.json and the content hash joined from one serialisation (validate.record.files.json_members)
give the very bytes of serialising the whole record and the record without its run block."""

from __future__ import annotations

import hashlib

import pytest

from validate.record.files import json_bytes, json_members, members_json
from validate.record.manifest import content_hash, content_hash_of_members

RECORDS = [
    {},
    {"run": {"record_id": "VR-1"}},
    {"a": 1},
    {"run": {"record_id": "VR-1", "created": "2026-01-01"}, "results": [{"value": 0.1, "unit": "mg/L"}],
     "notes": ["two\nlines, a \"quote\" and µ ± ² ν", [], {}], "empty": {}, "none": None,
     "nested": {"x": [[1.5e-300, -0.0, 2], {"deep": [True, False]}]}},
    {"notes": "a value with  \n  spaces and a brace }", "run": {}, "z": [1, {"run": 2}]},
]


@pytest.mark.parametrize("record", RECORDS)
def test_members_join_to_the_whole_file(record):
    assert members_json(json_members(record)) == json_bytes(record)


@pytest.mark.parametrize("record", RECORDS)
def test_members_without_run_give_the_content_hash(record):
    without_run = {k: v for k, v in record.items() if k != "run"}
    assert members_json(json_members(record), frozenset({"run"})) == json_bytes(without_run)
    assert content_hash_of_members(json_members(record)) == content_hash(record) == \
        hashlib.sha256(json_bytes(without_run)).hexdigest()


def test_a_value_json_cannot_hold_is_refused_as_before():
    with pytest.raises(ValueError):
        json_members({"x": float("nan")})
