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
