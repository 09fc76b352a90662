"""`validate init --equilibrium`: a commented starter for a 1:1 complex-formation study that
passes `validate check`, and whose every [equilibrium] key is documented in the README."""

from __future__ import annotations

import re
import tomllib

from conftest import ROOT

from validate import cli
from validate.inputs.method_file import load_method
from validate.inputs.schema import EquilibriumMethod


def test_init_equilibrium_writes_a_study_that_checks(tmp_path, capsys):
    folder = tmp_path / "study"
    assert cli.main(["init", str(folder), "--equilibrium"]) == 0
    assert cli.main(["check", str(folder / "method.toml")]) == 0
    method = load_method(folder / "method.toml")
    assert isinstance(method, EquilibriumMethod)
    study = method.equilibrium
    assert (len(study.standards), len(study.mixtures), len(study.series)) == (4, 2, 1)
    assert "PLACEHOLDER" in (folder / "method.toml").read_text(encoding="utf-8")
    # a second init into the same folder refuses to overwrite (exit 2, bad input)
    assert cli.main(["init", str(folder), "--equilibrium"]) == cli.EXIT_INPUT
    capsys.readouterr()


def test_plain_init_still_writes_an_assay(tmp_path, capsys):
    assert cli.main(["init", str(tmp_path / "assay")]) == 0
    assert not isinstance(load_method(tmp_path / "assay" / "method.toml"), EquilibriumMethod)
    capsys.readouterr()


def _equilibrium_keys(study: dict) -> set[str]:
    keys = {k for k, v in study.items() if not isinstance(v, dict)} | {"standards", "mixtures", "series"}
    for part in ("standards", "mixtures", "series"):
        for entry in study[part].values():
            keys |= set(entry)
    return keys | {"charges"}  # commented out in the starter, documented all the same


def test_every_equilibrium_key_of_the_starter_is_documented_in_the_readme():
    template = tomllib.loads((ROOT / "validate" / "templates" / "equilibrium.toml").read_text(encoding="utf-8"))
    readme = (ROOT / "README.md").read_text(encoding="utf-8")
    section = readme.split("#### The [equilibrium] section, key by key", 1)[1].split("\n### ", 1)[0]
    documented = set(re.findall(r"^\| `([a-z_]+)`", section, flags=re.MULTILINE))
    assert _equilibrium_keys(template["equilibrium"]) <= documented


def _uncommented(text: str, *starts: str) -> str:
    """The starter with the commented lines that begin with one of `starts` made active."""
    lines = []
    for line in text.splitlines():
        bare = line.lstrip("# ")
        lines.append(bare if line.startswith("# ") and bare.startswith(starts) else line)
    return "\n".join(lines) + "\n"


def test_the_optional_photometer_and_balance_keys_of_the_starters_are_read(tmp_path, capsys):
    assert cli.main(["init", str(tmp_path / "assay")]) == 0
    path = tmp_path / "assay" / "method.toml"
    path.write_text(_uncommented(path.read_text(encoding="utf-8"), "stray_light =", 'drift = "', "gain ="),
                    encoding="utf-8")
    photometer = load_method(path).items["photometer"]
    assert (photometer.stray_light, photometer.drift, photometer.gain) == (0.0005, 0.002, 0.005)
    assert cli.main(["init", str(tmp_path / "study"), "--equilibrium"]) == 0
    path = tmp_path / "study" / "method.toml"
    path.write_text(_uncommented(path.read_text(encoding="utf-8"), "linearity_correlation =", "drift = {"),
                    encoding="utf-8")
    method = load_method(path)
    assert method.items["balance"].linearity_correlation == "independent"
    photometer = method.items["photometer"]
    assert abs(photometer.drift - 0.003) < 1e-12 and "check standard" in photometer.drift_basis
    assert method.solutions["metal_stock"].weighing == "by difference"
    capsys.readouterr()


def test_the_new_method_file_keys_are_documented_in_the_readme():
    readme = (ROOT / "README.md").read_text(encoding="utf-8")
    section = readme.split("### The method file", 1)[1].split("\n### ", 1)[0]
    for key in ("`linearity_correlation`", "`stray_light`", "`drift`", "`gain`", "`weighing`", "exact = true }`"):
        assert key in section, key
