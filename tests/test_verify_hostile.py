"""`validate verify` on a damaged or forged record folder.

A folder that is not a readable record (results.json or manifest.json malformed, nested
thousands deep, not strict JSON, not a regular file, too large, or asking its re-run for
settings no run may have) is refused with exit code 2 and a message naming the file; a
readable record with any edit (any byte of any file, any number of results.json even with
manifest.json made anew to match) is reported NOT verified, exit code 1. Never a traceback.
Two fuzzers draw the edits with hypothesis.

The demo data are invented (example_inputs/); these tests check the record's integrity.
"""

from __future__ import annotations

import json
import os
import shutil
from pathlib import Path

import pytest
from conftest import DEMOS
from hypothesis import HealthCheck, given, note, settings
from hypothesis import strategies as st

from validate import cli
from validate.record import files as record_files
from validate.record.manifest import MANIFEST_FILE, make_manifest
from validate.workflow import pipeline as api
from validate.workflow.verify import verify_record

DEMO = DEMOS / "phosphate_assay"


@pytest.fixture(scope="module")
def filed(tmp_path_factory) -> Path:
    """The demo with a small Monte Carlo run, filed once; each test works on its own copy."""
    base = tmp_path_factory.mktemp("filed")
    run = api.analyse(DEMO / "method.toml", trials=2000, seed=5, advice=False)
    api.write_outputs(run, base / "record", pdf=False)
    assert verify_record(base / "record").passed
    return base / "record"


@pytest.fixture
def folder(filed, tmp_path) -> Path:
    shutil.copytree(filed, tmp_path / "record")
    return tmp_path / "record"


def _read(folder: Path) -> dict:
    return json.loads((folder / "results.json").read_text(encoding="utf-8"))


def _write_record(folder: Path, record: dict) -> None:
    (folder / "results.json").write_text(json.dumps(record, indent=2, ensure_ascii=False) + "\n", encoding="utf-8")


def _reseal(folder: Path) -> None:
    """manifest.json made anew for the folder as it now is, as a forger would."""
    (folder / MANIFEST_FILE).unlink(missing_ok=True)
    (folder / MANIFEST_FILE).write_bytes(make_manifest(folder, _read(folder)).to_json())


def _verify(capsys, folder: Path) -> tuple[int, str]:
    code = cli.main(["verify", str(folder)])
    captured = capsys.readouterr()
    text = " ".join((captured.out + captured.err).split())
    assert "Traceback" not in text
    return code, text


# ---- not a readable record: exit 2 ----

def _replace(name: str, old: str, new: str):
    def edit(folder: Path) -> None:
        text = (folder / name).read_text(encoding="utf-8")
        assert old in text, f"test set-up: {old!r} not in {name}"
        (folder / name).write_text(text.replace(old, new, 1), encoding="utf-8")
    return edit


def _text(name: str, text: str):
    return lambda folder: (folder / name).write_text(text, encoding="utf-8")


def _fifo(name: str):
    def edit(folder: Path) -> None:
        if not hasattr(os, "mkfifo"):
            pytest.skip("named pipes need a POSIX system")
        (folder / name).unlink()
        os.mkfifo(folder / name)
    return edit


def _forged_setting(key: str, value):
    def edit(folder: Path) -> None:
        record = _read(folder)
        record["monte_carlo_settings"][key] = value
        _write_record(folder, record)
        _reseal(folder)
    return edit


UNREADABLE = [
    ("results nested 100000 deep", _text("results.json", "[" * 100_000 + "]" * 100_000), "nested more than 32 deep"),
    ("manifest nested 100000 deep", _text(MANIFEST_FILE, '{"a":' * 100_000 + "1" + "}" * 100_000),
     "manifest.json is nested more than 32 deep"),
    ("results cut in half", lambda f: (f / "results.json").write_bytes((f / "results.json").read_bytes()[:5000]),
     "not readable JSON"),
    ("results with NaN", _replace("results.json", '"value": ', '"value": NaN, "x": '), "NaN is not a JSON number"),
    ("results with a key twice", _replace("results.json", '"value": ', '"value": 1, "value": '), "appears twice"),
    ("results with a 5000-digit integer", _replace("results.json", '"value": ', '"value": 1' + "0" * 5000 + ', "x": '),
     "integer of 5001 digits"),
    ("results not UTF-8", lambda f: (f / "results.json").write_bytes(b"\xff\xfe{}"), "not UTF-8"),
    ("results a list", _text("results.json", "[1, 2]"), "not a record written by validate"),
    ("results a named pipe", _fifo("results.json"), "not a regular file"),
    ("manifest a named pipe", _fifo(MANIFEST_FILE), "manifest.json is not a regular file"),
    ("manifest a string", _text(MANIFEST_FILE, '"x"'), "manifest.json is not readable"),
    ("manifest naming a file outside", _replace(MANIFEST_FILE, '"path": "budget.csv"', '"path": "../budget.csv"'),
     "names a file outside its folder"),
    ("a record key renamed", _replace("results.json", '"budget": ', '"spending": '), "layout"),
    ("10^12 trials asked for", _forged_setting("trials", 10**12), "monte_carlo_settings"),
    ("a negative seed", _forged_setting("seed", -1), "the seed must be a whole number"),
    ("trials as a word", _forged_setting("trials", "many"), "give 0 (no Monte Carlo)"),
]


@pytest.mark.parametrize("label, damage, fragment", UNREADABLE, ids=[c[0] for c in UNREADABLE])
def test_a_folder_that_is_not_a_readable_record_is_refused_with_exit_2(folder, capsys, label, damage, fragment):
    damage(folder)
    code, text = _verify(capsys, folder)
    assert code == cli.EXIT_INPUT, text
    assert fragment in text
    assert text.startswith("input error") and ("results.json" in text or MANIFEST_FILE in text)


def test_a_record_larger_than_the_limit_is_refused_with_the_limit(folder, capsys, monkeypatch):
    monkeypatch.setattr(record_files, "MAX_JSON_BYTES", 1000)  # instead of writing 100 MB
    code, text = _verify(capsys, folder)
    assert code == cli.EXIT_INPUT and "the record is larger than the limit of 1000 bytes" in text


def test_the_nesting_scan_ignores_brackets_inside_strings():
    assert record_files.json_nesting('{"a": ["[[[[", {"b": "}}]]\\"[["}]}') == 3
    assert record_files.json_nesting("[]") == 1 and record_files.json_nesting('"[[["') == 0


def test_the_layout_of_manifest_json_is_checked_too(folder, capsys):
    # manifest.json cannot list its own hash; the one JSON writer gives one text for one content,
    # so whitespace added to it (meaning unchanged) is still an edit
    path = folder / MANIFEST_FILE
    path.write_text(path.read_text(encoding="utf-8").replace("{\n", "{ \n", 1), encoding="utf-8")
    code, text = _verify(capsys, folder)
    assert code == 1 and "manifest.json: CHANGED" in text and "NOT verified" in text


# ---- a readable record with an edit: exit 1 (fuzzers) ----

def _files(folder: Path) -> list[str]:
    return sorted(p.relative_to(folder).as_posix() for p in folder.rglob("*") if p.is_file())


@settings(max_examples=12, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(data=st.data())
def test_any_edit_of_any_file_is_caught(filed, tmp_path_factory, capsys, rerun_once, data):
    folder = tmp_path_factory.mktemp("edited") / "record"
    shutil.copytree(filed, folder)
    name = data.draw(st.sampled_from(_files(folder)), label="file")
    path = folder / name
    content = path.read_bytes()
    how = data.draw(st.sampled_from(["flip a byte", "cut", "append", "delete", "add a file beside it"]), label="edit")
    if how == "flip a byte":
        at = data.draw(st.integers(0, len(content) - 1), label="at")
        mask = data.draw(st.integers(1, 255), label="mask")
        path.write_bytes(content[:at] + bytes([content[at] ^ mask]) + content[at + 1:])
    elif how == "cut":
        path.write_bytes(content[:data.draw(st.integers(0, len(content) - 1), label="length")])
    elif how == "append":
        path.write_bytes(content + data.draw(st.binary(min_size=1, max_size=8), label="bytes"))
    elif how == "delete":
        path.unlink()
    else:
        (path.parent / "extra.txt").write_text("added later")
    note(f"{how} in {name}")
    code, text = _verify(capsys, folder)
    # 2 when the edit left results.json or manifest.json unreadable, else 1; never 0
    assert code in (1, cli.EXIT_INPUT), text
    assert code == cli.EXIT_INPUT or "NOT verified" in text


def _numbers(node, path=()):
    """(path, value) of every number and truth value in the record but its run block."""
    if isinstance(node, dict):
        for key, value in node.items():
            if not (path == () and key == "run"):
                yield from _numbers(value, (*path, key))
    elif isinstance(node, list):
        for index, value in enumerate(node):
            yield from _numbers(value, (*path, index))
    elif isinstance(node, (int, float)):
        yield path, node


def _dotted(path: tuple) -> str:
    return "".join(f"[{p}]" if isinstance(p, int) else f".{p}" for p in path).lstrip(".")


def _edited(value):
    """A value that differs beyond the re-run's tolerance (relative 1e-9, absolute 1e-12)."""
    if isinstance(value, bool):
        return not value
    if isinstance(value, int):
        return value + 1
    return value + max(abs(value) * 1e-6, 1e-9)


@settings(max_examples=10, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(data=st.data())
def test_any_number_edited_is_caught_even_with_a_new_manifest(filed, tmp_path_factory, rerun_once, data):
    folder = tmp_path_factory.mktemp("forged") / "record"
    shutil.copytree(filed, folder)
    record = _read(folder)
    numbers = list(_numbers(record))
    path, value = data.draw(st.sampled_from(numbers), label="number")
    note(f"{_dotted(path)}: {value!r}")
    holder = record
    for key in path[:-1]:
        holder = holder[key]
    holder[path[-1]] = _edited(value)
    _write_record(folder, record)
    _reseal(folder)  # the files then match manifest.json: only the re-run can catch the edit
    report = verify_record(folder)  # the command's exit code follows `passed` (test_verify_edits.py)
    assert report.files_unchanged and not report.reproduced and not report.passed
    if path[0] != "monte_carlo_settings":  # the re-run's own settings change every number after them
        assert _dotted(path) in {m.path for m in report.mismatches}
