"""The package's identity: one version everywhere, and `validate --version` tells which folder
the package runs from (a foreign module named `validate` earlier on the path shows at once)."""

from __future__ import annotations

import tomllib
from pathlib import Path

import pytest
from conftest import ROOT

import validate
from validate import cli


def test_version_is_the_one_in_pyproject():
    project = tomllib.loads((ROOT / "pyproject.toml").read_text(encoding="utf-8"))["project"]
    assert validate.__version__ == project["version"]
    # the command keeps its name; the distribution has one of its own (README, package identity)
    assert project["scripts"]["validate"] == "validate.cli:main"
    assert project["name"] != "validate"


def test_version_option_prints_the_version_and_the_package_folder(capsys):
    with pytest.raises(SystemExit) as stop:
        cli.main(["--version"])
    assert stop.value.code == 0
    lines = capsys.readouterr().out.splitlines()
    assert lines[0] == f"validate {validate.__version__}"
    assert lines[1].startswith("package folder: ")
    folder = Path(lines[1].removeprefix("package folder: "))
    assert folder == Path(validate.__file__).resolve().parent
    assert (folder / "cli.py").is_file() and (folder / "workflow").is_dir()  # this package, not another
