"""`validate verify` catches an edit to any file or any number of a record folder, re-runs from
the folder's own copies only, and the same inputs, seed and software give the same bytes.

The demo data are invented (example_inputs/); these tests check the record's integrity, not
the numbers themselves.
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest
from conftest import DEMOS, ROOT

from validate import cli
from validate.inputs.errors import InputError
from validate.record.files import record_json
from validate.record.manifest import MANIFEST_FILE, content_hash, make_manifest
from validate.record.verify import reproducible_part
from validate.workflow import pipeline as api
from validate.workflow.verify import verify_record

DEMO = DEMOS / "phosphate_assay"


@pytest.fixture(scope="module")
def filed(tmp_path_factory):
    """The demo with Monte Carlo and advice, filed once (with a stand-in PDF: its bytes are
    checked like any other file's); each test edits its own copy."""
    base = tmp_path_factory.mktemp("filed")
    shutil.copytree(DEMO, base / "demo")
    run = api.analyse(base / "demo" / "method.toml", trials=4000, seed=11)
    api.write_outputs(run, base / "record", pdf=False)
    (base / "record" / "report.pdf").write_bytes(b"%PDF-1.4 stand-in\n")  # listed in a fresh manifest
    _reseal(base / "record")
    return base / "record"


@pytest.fixture
def folder(filed, tmp_path):
    shutil.copytree(filed, tmp_path / "record")
    return tmp_path / "record"


def _read(folder: Path) -> dict:
    return json.loads((folder / "results.json").read_text(encoding="utf-8"))


def _write(folder: Path, record: dict) -> None:
    (folder / "results.json").write_text(json.dumps(record, indent=2, ensure_ascii=False) + "\n", encoding="utf-8")


def _reseal(folder: Path) -> None:
    """Make manifest.json agree with the folder as it now is: only the re-run can then catch an edit."""
    (folder / MANIFEST_FILE).unlink(missing_ok=True)
    (folder / MANIFEST_FILE).write_bytes(make_manifest(folder, _read(folder)).to_json())


@pytest.mark.slow
def test_an_untouched_record_verifies_bit_for_bit(folder):
    report = verify_record(folder)
    assert report.passed and report.identical and report.files_unchanged and report.budget_file_matches
    assert report.content_hash == content_hash(_read(folder))
    assert {f.path for f in report.files} >= {"results.json", "budget.csv", "report.pdf", "inputs/method.toml",
                                             "inputs/readings.csv", "registers/glassware_iso.toml"}


@pytest.mark.slow
@pytest.mark.parametrize("name, edit", [
    ("budget.csv", lambda p: p.write_text(p.read_text().replace("0.", "0.0", 1))),
    ("report.pdf", lambda p: p.write_bytes(b"%PDF-1.4 another report\n")),
    ("registers/glassware_iso.toml", lambda p: p.write_text(p.read_text() + "\n# a comment\n")),
    (MANIFEST_FILE, lambda p: p.write_text(p.read_text().replace('"size": ', '"size": 1', 1))),
])
def test_an_edit_to_any_file_is_caught(folder, name, edit):
    edit(folder / name)
    report = verify_record(folder)
    assert not report.passed
    states = {f.path: f.state for f in report.files}
    if name == MANIFEST_FILE:  # the edited size of the first file listed no longer matches it
        assert states["budget.csv"] == "changed"
    else:
        assert states[name] == "changed"


@pytest.mark.slow
def test_a_file_added_or_removed_is_caught(folder):
    (folder / "inputs" / "notes.txt").write_text("added later")
    (folder / "report.pdf").unlink()
    states = {f.path: f.state for f in verify_record(folder).files}
    assert states["inputs/notes.txt"] == "not listed" and states["report.pdf"] == "missing"


@pytest.mark.slow
def test_a_tiny_edit_of_a_number_is_caught_by_the_content_hash(folder):
    record = _read(folder)
    record["results"][0]["value"] *= 1 + 1e-14  # far below the re-run's tolerance
    _write(folder, record)
    report = verify_record(folder)
    assert not report.passed and report.content_hash != report.recorded_content_hash
    assert report.reproduced and not report.identical  # the re-run alone would not have caught it


def _nudge(record: dict, path: tuple) -> None:
    *parents, last = path
    holder = record
    for key in parents:
        holder = holder[key]
    value = holder[last]
    holder[last] = (not value) if isinstance(value, bool) else value * 1.001 + 1e-6


# numbers of every part of the record, not only results and budget (edited with the manifest
# made anew, so the re-run is what must catch them)
EDITS = [
    ("validation", "limits", "routes", 0, "lod"),
    ("calibration", "r_squared"),
    ("calibration", "slope"),
    ("validation", "criteria", "all_met"),
    ("advice", "expanded_uncertainty_before"),
    ("results", 1, "monte_carlo", "interval", 0),
    ("budget", 5, "share"),
    ("sources", 3, "u"),
]


@pytest.mark.slow
def test_an_edited_number_anywhere_in_the_record_is_caught_by_the_rerun(folder, rerun_once):
    original = _read(folder)
    for path in EDITS:
        record = json.loads(json.dumps(original))
        try:
            _nudge(record, path)
        except (KeyError, IndexError, TypeError):
            pytest.fail(f"the record has no {path}: choose a number it holds")
        _write(folder, record)
        _reseal(folder)
        report = verify_record(folder)
        assert report.files_unchanged and not report.passed, path
        dotted = "".join(f"[{p}]" if isinstance(p, int) else f".{p}" for p in path).lstrip(".")
        assert [m.path for m in report.mismatches] == [dotted], path


@pytest.mark.slow
def test_every_k_of_the_equilibrium_block_edited_is_caught(tmp_path):
    run = api.analyse(DEMOS / "nickel_complex" / "method.toml", trials=None, advice=False)
    api.write_outputs(run, tmp_path / "rec", pdf=False)
    record = _read(tmp_path / "rec")
    for point in record["equilibrium"]["mixtures"]:
        point["K"] *= 1.01
    _write(tmp_path / "rec", record)
    _reseal(tmp_path / "rec")
    report = verify_record(tmp_path / "rec")
    assert not report.passed
    edited = {m.path for m in report.mismatches}
    assert {f"equilibrium.mixtures[{i}].K" for i in range(len(record["equilibrium"]["mixtures"]))} == edited


# ---- the re-run reads the folder's own copies only ----

def _with_absolute_readings(tmp_path: Path) -> Path:
    (tmp_path / "method").mkdir()
    (tmp_path / "data").mkdir()
    shutil.copy(DEMO / "readings.csv", tmp_path / "data" / "readings.csv")
    absolute = (tmp_path / "data" / "readings.csv").resolve().as_posix()
    text = (DEMO / "method.toml").read_text().replace('readings = "readings.csv"', f'readings = "{absolute}"')
    (tmp_path / "method" / "method.toml").write_text(text)
    return tmp_path / "method" / "method.toml"


@pytest.mark.slow
def test_an_absolute_readings_path_is_read_from_the_stored_copy(tmp_path):
    method = _with_absolute_readings(tmp_path)
    run = api.analyse(method, trials=None, advice=False)
    api.write_outputs(run, tmp_path / "rec", pdf=False)
    original = tmp_path / "data" / "readings.csv"
    original.write_text(original.read_text().replace("river_upstream,0.1329", "river_upstream,0.2"))
    assert verify_record(tmp_path / "rec").passed  # the edited original is not read
    original.unlink()
    assert verify_record(tmp_path / "rec").passed  # nor needed
    stored = next((tmp_path / "rec" / "inputs").rglob("readings.csv"))
    stored.write_text(stored.read_text().replace("river_upstream,0.1329", "river_upstream,0.2"))
    report = verify_record(tmp_path / "rec")
    assert not report.passed and "results[0].value" in {m.path for m in report.mismatches}


@pytest.mark.slow
def test_a_stored_method_naming_a_file_outside_the_record_is_not_read(folder, tmp_path):
    outside = tmp_path / "outside.csv"
    shutil.copy(DEMO / "readings.csv", outside)
    method = folder / "inputs" / "method.toml"
    method.write_text(method.read_text().replace('readings = "readings.csv"', f'readings = "{outside.as_posix()}"'))
    report = verify_record(folder)
    assert not report.passed and "not among the record's stored copies" in report.rerun_error


@pytest.mark.slow
@pytest.mark.parametrize("stored", ["../outside.toml", "ABSOLUTE", "inputs/../../outside.toml"])
def test_stored_names_that_leave_the_folder_are_refused(folder, tmp_path, stored):
    outside = tmp_path / "outside.toml"
    shutil.copy(folder / "inputs" / "method.toml", outside)
    record = _read(folder)
    record["inputs"][0]["stored"] = outside.resolve().as_posix() if stored == "ABSOLUTE" else stored
    _write(folder, record)
    _reseal(folder)
    with pytest.raises(InputError, match="outside its folder"):
        verify_record(folder)
    assert cli.main(["verify", str(folder)]) == cli.EXIT_INPUT


@pytest.mark.slow
def test_a_built_in_register_is_read_from_the_stored_copy(folder):
    register = folder / "registers" / "instruments_typical.toml"
    text = register.read_text()
    assert 'linearity = "0.2 mg"' in text  # the analytical balance of the demo
    register.write_text(text.replace('linearity = "0.2 mg"', 'linearity = "0.4 mg"'))
    report = verify_record(folder)
    assert not report.passed and not report.reproduced
    assert any(m.path.startswith("results[") and m.path.endswith("standard_uncertainty") for m in report.mismatches)


@pytest.mark.slow
def test_verify_exit_codes(folder, tmp_path, capsys):
    assert cli.main(["verify", str(folder)]) == 0
    assert "verified" in capsys.readouterr().out
    assert cli.main(["verify", str(tmp_path / "nothing here")]) == cli.EXIT_INPUT
    (folder / "budget.csv").write_text("edited\n")
    assert cli.main(["verify", str(folder)]) == 1
    assert f"content hash {content_hash(_read(folder))}" in capsys.readouterr().out


# ---- bit-identical reproduction ----

def _runs_in_two_processes(method: Path, tmp_path: Path, *extra: str) -> None:
    """`validate run` of `method` into tmp_path/one and tmp_path/two, in two processes started
    together with the hash seeds 1 and 2 (set and dict orders of strings differ between them)."""
    started = []
    for name, hash_seed in (("one", "1"), ("two", "2")):
        env = {**os.environ, "PYTHONHASHSEED": hash_seed}
        started.append(subprocess.Popen(
            [sys.executable, "-m", "validate.cli", "run", str(method), "--out", str(tmp_path / name), "--seed", "3",
             "--trials", "2000", "--no-pdf", *extra], cwd=ROOT, env=env, stdout=subprocess.DEVNULL,
            stderr=subprocess.PIPE, text=True))
    for process in started:
        _, err = process.communicate(timeout=600)
        assert process.returncode == 0, err[-2000:]


@pytest.mark.parametrize("demo, extra", [
    # the quick pair: the study, whose K covariance was summed in memory-address order before
    ("nickel_complex", ("--no-advice",)),
    pytest.param("phosphate_assay", (), marks=pytest.mark.slow),  # the advisor's numbers too
], ids=["study", "assay with advice"])
def test_two_processes_with_different_hash_seeds_write_the_same_bytes(tmp_path, demo, extra):
    # the same inputs, seed and software must give the same results.json apart from its run block
    method = DEMOS / demo / "method.toml"
    _runs_in_two_processes(method, tmp_path, *extra)
    one, two = (_read(tmp_path / name) for name in ("one", "two"))
    assert one["run"] != two["run"] or one["run"]["record_id"]  # the run block may differ, by design
    assert record_json_without_run(one) == record_json_without_run(two)
    manifests = [json.loads((tmp_path / name / MANIFEST_FILE).read_text()) for name in ("one", "two")]
    assert manifests[0]["content_hash"] == manifests[1]["content_hash"] == content_hash(one)
    assert (tmp_path / "one" / "budget.csv").read_bytes() == (tmp_path / "two" / "budget.csv").read_bytes()


def record_json_without_run(record: dict) -> bytes:
    return json.dumps(reproducible_part(record), indent=2, ensure_ascii=False).encode()


def test_the_content_hash_is_that_of_results_json_without_its_run_block(tmp_path):
    run = api.analyse(DEMO / "method.toml", trials=None, advice=False)
    api.write_outputs(run, tmp_path / "rec", pdf=False)
    written = (tmp_path / "rec" / "results.json").read_bytes()
    assert written == record_json(run.typed_record)
    other_run = {**run.record, "run": {"record_id": "VR-other", "created": "2000-01-01T00:00:00+00:00"}}
    assert content_hash(other_run) == content_hash(run.record)  # the run block is left out
    changed = {**run.record, "notes": ["one more note"]}
    assert content_hash(changed) != content_hash(run.record)
    manifest = json.loads((tmp_path / "rec" / MANIFEST_FILE).read_text())
    assert manifest["content_hash"] == content_hash(json.loads(written))
