"""Bad input gets a clear message naming the file and the key, exit code 2, no traceback.

The commands run in this process through `validate.cli.main` (the conftest fixture
`run_command`); `validate init` also runs as a separate `python -m validate.cli` process, as a
user would start it (the other commands do so in test_bad_inputs.py, test_verify_edits.py,
test_hostile_text.py and test_validation_record.py).
"""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest
from conftest import DEMOS, edit_text

DEMO = DEMOS / "phosphate_assay"


def _process(*args):
    return subprocess.run([sys.executable, "-m", "validate.cli", *args], capture_output=True, text=True)


def _edit(folder, old, new, name="method.toml"):
    return edit_text(folder, old, new, name, count=1)


CASES = [
    ("broken TOML", 'class = "A"\n', 'class = "A\n', ["method.toml", "TOML syntax error", "line"]),
    ("missing key", 'formula = "c_measured * V_flask / V_sample * M_P"\n', "\n",
     ["method.toml", "[result]", "formula"]),
    ("unknown class", 'nominal = "5 mL"\nclass = "A"', 'nominal = "5 mL"\nclass = "Z"',
     ["method.toml", "[equipment.pipette_5].class", "'Z'", "A, B"]),
    ("negative volume", 'volume = "2.00 mL"', 'volume = "-2.00 mL"',
     ["method.toml", "[solutions.S2].aliquot.volume", "greater than zero"]),
    ("volume in a mass unit", 'volume = "2.00 mL"', 'volume = "2.00 mg"',
     ["[solutions.S2].aliquot.volume", "mass", "volume is needed"]),
    ("unknown key", "made_by = \"weighing\"", "made_by = \"weighing\"\nmolarmass = 1",
     ["[solutions.stock].molarmass", "did you mean `molar_mass`"]),
    ("missing readings table", 'readings = "readings.csv"', 'readings = "missing.csv"',
     ["missing.csv", "not found"]),
]


@pytest.mark.parametrize("label, old, new, expected", CASES, ids=[c[0] for c in CASES])
def test_bad_method_file(demo_copy, tmp_path, run_command, label, old, new, expected):
    method = _edit(demo_copy, old, new)
    out = tmp_path / "out"
    proc = run_command("run", str(method), "--out", str(out))
    assert proc.returncode == 2, proc.stderr
    assert "Traceback" not in proc.stderr
    for fragment in expected:
        assert fragment in proc.stderr, f"{fragment!r} not in {proc.stderr!r}"
    assert not out.exists(), "a refused input must leave no output"


def test_non_numeric_reading(demo_copy, tmp_path, run_command):
    _edit(demo_copy, "S4,0.3406", "S4,zero point three", name="readings.csv")
    proc = run_command("run", str(demo_copy / "method.toml"), "--out", str(tmp_path / "out"))
    assert proc.returncode == 2
    assert "readings.csv" in proc.stderr and "row" in proc.stderr and "not a number" in proc.stderr


def test_decimal_comma_reading(demo_copy, tmp_path, run_command):
    _edit(demo_copy, "S4,0.3406", 'S4,"0,3406"', name="readings.csv")
    proc = run_command("check", str(demo_copy / "method.toml"))
    assert proc.returncode == 2 and "decimal comma" in proc.stderr


@pytest.mark.slow
def test_demo_run_writes_the_record(tmp_path, run_command):
    out = tmp_path / "out"
    proc = run_command("run", str(DEMO / "method.toml"), "--out", str(out), "--trials", "20000", "--seed", "7")
    assert proc.returncode == 0, proc.stderr
    record = json.loads((out / "results.json").read_text())
    assert record["software"]["name"] == "validate"
    # the method, its readings and the built-in registers it was read with (budgets/)
    builtin = {p.name for p in (Path(__file__).resolve().parents[1] / "budgets").glob("*.toml")}
    assert {i["path"].split("/")[-1] for i in record["inputs"]} == {"method.toml", "readings.csv"} | builtin
    assert all(len(i["sha256"]) == 64 for i in record["inputs"])
    for result in record["results"]:
        for key in ("name", "unit", "value", "standard_uncertainty", "expanded_uncertainty",
                    "coverage_factor", "coverage_probability", "effective_dof"):
            assert key in result
        assert result["expanded_uncertainty"] == pytest.approx(
            result["coverage_factor"] * result["standard_uncertainty"])
    shares = [row["share"] for row in record["budget"] if row["result"] == record["results"][0]["name"]]
    ranked = [round(x, 12) for x in shares]  # the ranking ignores round-off below 1e-12
    assert ranked == sorted(ranked, reverse=True) and sum(shares) == pytest.approx(1.0)
    for key in ("source", "step", "equipment", "sensitivity", "contribution", "share"):
        assert key in record["budget"][0]
    assert (out / "budget.csv").read_text().startswith("result,source,step")
    mc = record["results"][0]["monte_carlo"]
    for key in ("trials", "mean", "standard_uncertainty", "interval", "shortest_interval",
                "agrees_with_gum", "invalid_trials", "seed"):
        assert key in mc
    # the trials asked for are recorded; the clause 8 comparison may add trials (JCGM 101 8.2)
    assert record["monte_carlo_settings"]["trials"] == 20000 and mc["trials"] >= 20000 and mc["seed"] == 7
    # a second run into the same folder is refused rather than overwriting the record
    again = run_command("run", str(DEMO / "method.toml"), "--out", str(out), "--trials", "0")
    assert again.returncode == 2 and "--overwrite" in again.stderr


def test_init_writes_a_starter_that_checks(tmp_path, run_command):
    proc = _process("init", str(tmp_path / "new"))
    assert proc.returncode == 0, proc.stderr
    check = run_command("check", str(tmp_path / "new" / "method.toml"))
    assert check.returncode == 0, check.stderr


def test_interrupted_run_writes_nothing(tmp_path, monkeypatch):
    # Ctrl-C during the computation: a clear line, exit 130, and no output folder
    from validate import cli
    from validate.workflow import pipeline as api

    def interrupted(*args, **kwargs):
        raise KeyboardInterrupt

    monkeypatch.setattr(api, "analyse", interrupted)
    out = tmp_path / "out"
    assert cli.main(["run", str(DEMO / "method.toml"), "--out", str(out)]) == 130
    assert not out.exists()
