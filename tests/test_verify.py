"""A filed record can be checked later: stored inputs against their SHA-256, and a re-run with
the recorded seed and trials that must give the same results and budget. Also: an interrupted
write leaves the previous record as it was."""

from __future__ import annotations

import json
import os
import shutil
from pathlib import Path

import pytest
from conftest import DEMOS

from validate.inputs.errors import InputError
from validate.record import files as records
from validate.record.verify import compare, reproducible_part
from validate.report.terminal import describe_verify
from validate.workflow import pipeline as api
from validate.workflow.verify import verify_record

DEMO = DEMOS / "phosphate_assay"
BUILTIN = Path(__file__).resolve().parents[1] / "budgets"  # the registers shipped with the package
SEED = 20240611
TRIALS = 20000


def _file_record(method_path, out, trials=TRIALS, seed=SEED):
    """What `validate run` does: the record written with the inputs stored beside it."""
    run = api.analyse(method_path, trials=trials, seed=seed)
    api.write_outputs(run, out)
    assert [i["stored"] for i in run.record["inputs"]] == [i.stored for i in run.typed_record.inputs]
    return run


@pytest.fixture(scope="module")
def filed(tmp_path_factory):
    """The demo, copied and run once; each test works on its own copy of the record folder."""
    base = tmp_path_factory.mktemp("filed")
    shutil.copytree(DEMO, base / "demo")
    _file_record(base / "demo" / "method.toml", base / "record")
    return base / "record"


@pytest.fixture
def record_dir(filed, tmp_path):
    folder = tmp_path / "record"
    shutil.copytree(filed, folder)
    return folder


def _record(folder):
    return json.loads((folder / "results.json").read_text(encoding="utf-8"))


@pytest.mark.slow
def test_inputs_are_stored_beside_the_record_with_their_hashes(record_dir):
    record = _record(record_dir)
    registers = sorted(p.name for p in BUILTIN.glob("*.toml"))
    assert [i["stored"] for i in record["inputs"]] == ["inputs/method.toml", "inputs/readings.csv",
                                                       *(f"registers/{name}" for name in registers)]
    assert [i["role"] for i in record["inputs"]] == ["method file", "readings table"] + ["built-in register"] * 3
    for entry in record["inputs"]:
        original = (DEMO if entry["stored"].startswith("inputs/") else BUILTIN) / entry["stored"].split("/")[-1]
        assert (record_dir / entry["stored"]).read_bytes() == original.read_bytes()
        assert records.sha256_of(record_dir / entry["stored"]) == entry["sha256"]


@pytest.mark.slow
def test_an_untouched_record_verifies(record_dir):
    report = verify_record(record_dir)
    assert report.inputs_unchanged and report.reproduced and report.passed
    assert report.rerun_error is None and report.mismatches == ()
    assert (report.trials, report.seed) == (TRIALS, SEED)
    # every number of results and budget was compared: 4 results x 36 sources x 6 numbers at least
    assert report.numbers_compared > 4 * 36 * 6
    assert json.loads(json.dumps(report.to_dict()))["passed"] is True
    assert report.recorded_version == report.current_version
    assert describe_verify(report.to_dict())[-1].startswith("verified")


@pytest.mark.slow
def test_an_edited_readings_table_is_caught(record_dir):
    stored = record_dir / "inputs" / "readings.csv"
    stored.write_text(stored.read_text().replace("river_upstream,0.1329", "river_upstream,0.1429"))
    report = verify_record(record_dir)
    assert not report.passed and not report.inputs_unchanged and not report.reproduced
    assert {c.stored: c.matches for c in report.inputs if c.stored.startswith("inputs/")} == {
        "inputs/method.toml": True, "inputs/readings.csv": False}
    assert all(c.matches for c in report.inputs if c.stored.startswith("registers/"))
    by_path = {m.path: m for m in report.mismatches}
    record = _record(record_dir)
    assert record["results"][0]["sample"] == "river_upstream"
    changed = by_path["results[0].value"]
    # a higher absorbance of that sample reads a higher concentration off the same line
    assert changed.recomputed > changed.recorded
    # the other samples are read off the same (unchanged) line: their values are reproduced
    assert not any(p.startswith(("results[1].value", "results[2].value", "results[3].value")) for p in by_path)
    text = "\n".join(describe_verify(report.to_dict()))
    assert "inputs/readings.csv: CHANGED" in text and "results[0].value" in text and "NOT verified" in text


@pytest.mark.slow
def test_an_edited_method_file_is_caught(record_dir):
    stored = record_dir / "inputs" / "method.toml"
    stored.write_text(stored.read_text().replace('mass = "68.05 mg"', 'mass = "68.10 mg"'))
    report = verify_record(record_dir)
    assert [c.matches for c in report.inputs] == [False, True, True, True, True]
    values = {m.path: m for m in report.mismatches if m.path.endswith("].value") and m.path.startswith("results")}
    assert len(values) == 7  # every result (seven samples) rests on the stock solution's mass
    for m in values.values():
        # a heavier weighing means more concentrated standards, a flatter line per unit of
        # concentration and so every sample reads higher, in proportion to the mass
        assert m.recomputed / m.recorded == pytest.approx(68.10 / 68.05, rel=1e-9)


@pytest.mark.slow
def test_a_changed_seed_is_caught(record_dir):
    # the Monte Carlo numbers depend on the seed: a record whose seed was altered does not reproduce
    record = _record(record_dir)
    record["monte_carlo_settings"]["seed"] = SEED + 1
    (record_dir / "results.json").write_text(json.dumps(record))
    report = verify_record(record_dir)
    assert report.inputs_unchanged and not report.reproduced
    paths = [m.path for m in report.mismatches]
    assert "results[0].monte_carlo.mean" in paths
    assert not any(p.endswith("].value") or p.startswith("budget") for p in paths)  # the GUM part is unchanged


@pytest.mark.slow
def test_a_stored_method_that_no_longer_reads_is_reported(record_dir):
    (record_dir / "inputs" / "method.toml").write_text("this is not TOML =\n")
    report = verify_record(record_dir)
    assert not report.passed and "TOML syntax error" in report.rerun_error


def test_same_inputs_and_seed_give_identical_results_and_budget():
    first = api.analyse(DEMO / "method.toml", trials=5000, seed=SEED)
    second = api.analyse(DEMO / "method.toml", trials=5000, seed=SEED)
    one, two = (reproducible_part(json.loads(records.record_json(r.typed_record))) for r in (first, second))
    assert one["results"] == two["results"]  # exactly equal, not merely within a tolerance
    assert one["budget"] == two["budget"]
    assert "run" not in one and first.record["run"]["record_id"]


def test_compare_names_every_difference_with_its_path():
    recorded = {"results": [{"value": 1.0, "unit": "mg/L", "interval": [0.9, 1.1]}], "extra": 1}
    recomputed = {"results": [{"value": 1.0 + 1e-12, "unit": "mg", "interval": [0.9, 1.1 + 1e-6]}]}
    found, count = compare(recorded, recomputed)
    assert count == 3  # value and the two interval ends; text is compared but not counted
    assert {m.path for m in found} == {"results[0].unit", "results[0].interval[1]", "extra"}
    assert compare([1, 2], [1, 2, 3])[0][0].path == " (number of entries)"
    assert compare({"x": None}, {"x": 0.0})[0]  # a missing number is not a zero


def test_verify_refuses_a_folder_without_a_record(tmp_path):
    with pytest.raises(InputError, match="no record here"):
        verify_record(tmp_path)


@pytest.mark.slow
def test_verify_refuses_a_record_without_stored_inputs(record_dir):
    # a record written before inputs were stored: no `stored` entries and no inputs folder
    record = _record(record_dir)
    record["inputs"] = [{"path": i["path"], "sha256": i["sha256"]} for i in record["inputs"]]
    (record_dir / "results.json").write_text(json.dumps(record))
    shutil.rmtree(record_dir / "inputs")
    with pytest.raises(InputError, match="no stored copies"):
        verify_record(record_dir)


@pytest.mark.slow
def test_inputs_in_sibling_folders_keep_their_relative_places(tmp_path):
    (tmp_path / "methods").mkdir()
    (tmp_path / "data").mkdir()
    text = (DEMO / "method.toml").read_text().replace('readings = "readings.csv"',
                                                      'readings = "../data/readings.csv"')
    (tmp_path / "methods" / "method.toml").write_text(text)
    shutil.copy(DEMO / "readings.csv", tmp_path / "data" / "readings.csv")
    out = tmp_path / "record"
    _file_record(tmp_path / "methods" / "method.toml", out, trials=None)
    assert (out / "inputs" / "methods" / "method.toml").is_file()
    assert (out / "inputs" / "data" / "readings.csv").is_file()
    report = verify_record(out)
    assert report.passed and report.trials is None


# ---- an interrupted write leaves the previous record intact ----

def _temp_files(folder):
    return [p.name for p in folder.iterdir() if p.name.endswith(".part")]


def test_a_failed_move_into_place_keeps_the_old_file(tmp_path, monkeypatch):
    target = tmp_path / "results.json"
    records.write_atomic(target, b'{"old": true}\n')

    def fail(*args):
        raise OSError("disk full (simulated)")

    monkeypatch.setattr(records.os, "replace", fail)
    with pytest.raises(OSError, match="simulated"):
        records.write_atomic(target, b'{"new": true}\n')
    assert target.read_bytes() == b'{"old": true}\n'
    assert _temp_files(tmp_path) == []


def test_an_interruption_while_writing_keeps_the_old_file(tmp_path, monkeypatch):
    target = tmp_path / "budget.csv"
    records.write_atomic(target, b"old\n")

    def interrupt(fd):
        raise KeyboardInterrupt  # the analyst pressed Ctrl-C while the data were being flushed

    monkeypatch.setattr(records.os, "fsync", interrupt)
    with pytest.raises(KeyboardInterrupt):
        records.write_atomic(target, b"new\n" * 1000)
    assert target.read_bytes() == b"old\n"
    assert _temp_files(tmp_path) == []


@pytest.mark.slow
def test_a_failing_payload_builder_leaves_the_previous_record(record_dir, monkeypatch):
    before = {name: (record_dir / name).read_bytes() for name in ("results.json", "budget.csv")}
    run = api.analyse(record_dir / "inputs" / "method.toml", trials=None)

    def broken(record):
        raise RuntimeError("cannot serialise (simulated)")

    monkeypatch.setattr(api, "json_members", broken)
    with pytest.raises(RuntimeError, match="simulated"):
        api.write_outputs(run, record_dir, overwrite=True)
    assert {name: (record_dir / name).read_bytes() for name in before} == before
    assert _temp_files(record_dir) == []
    assert verify_record(record_dir).passed


def test_no_temporary_file_is_left_after_a_normal_write(tmp_path):
    records.write_atomic(tmp_path / "a.json", b"{}")
    assert os.listdir(tmp_path) == ["a.json"]


@pytest.mark.slow
def test_equilibrium_demo_record_verifies(tmp_path):
    # issue 8: `validate verify` confirms both demos' records; here the equilibrium study,
    # with few trials (the comparison is of every recorded number, not of their precision)
    from validate.workflow import pipeline as api
    from validate.workflow.verify import verify_record

    demo = Path(__file__).resolve().parents[1] / "example_inputs" / "nickel_complex" / "method.toml"
    run = api.analyse(demo, trials=4000, seed=13, advice=False)
    api.write_outputs(run, tmp_path / "rec", pdf=False)
    report = verify_record(tmp_path / "rec")
    assert report.inputs_unchanged and report.reproduced, report.mismatches[:3]
    assert report.numbers_compared > 1000
