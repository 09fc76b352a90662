"""A record names the built-in registers (budgets/, shipped with the package) by a stable name and
their SHA-256, never by the place the package is installed: the same method run from two
installations gives the same names. `validate verify` still reads the stored copies and catches an
edited one. (Behaviour of this tool; no outside source: a record must not depend on the machine.)"""

from __future__ import annotations

import hashlib
import shutil
from pathlib import Path

import pytest
from conftest import DEMOS

from validate.inputs.method_file import load_method
from validate.record.build import BUILTIN_PREFIX, input_entries, register_names
from validate.workflow import pipeline as api
from validate.workflow.verify import verify_record

BUILTIN = Path(__file__).resolve().parents[1] / "budgets"
DEMO = DEMOS / "phosphate_assay"


class _Installed:
    """The loader's redirect (`validate.inputs.redirect.Redirect`) for a package installed at
    `folder`: its built-in registers are read from there, every other file where it is named."""

    def __init__(self, folder: Path):
        self._registers = tuple(sorted(folder.glob("*.toml")))

    def locate(self, path: Path, what: str) -> Path:
        return path

    @property
    def builtin_registers(self) -> tuple[Path, ...]:
        return self._registers


def _installed_at(root: Path) -> _Installed:
    shutil.copytree(BUILTIN, root / "site-packages" / "validate" / "registers")
    return _Installed(root / "site-packages" / "validate" / "registers")


def test_two_installations_name_the_built_in_registers_alike(tmp_path):
    names, entries = [], []
    for place in ("opt", "home/analyst/.local"):
        method = load_method(DEMO / "method.toml", _installed_at(tmp_path / place))
        names.append(register_names(method))
        entries.append(input_entries(method))
    assert names[0] == names[1]
    assert entries[0] == entries[1]
    expected = [BUILTIN_PREFIX + p.name for p in sorted(BUILTIN.glob("*.toml"))]
    assert list(names[0]) == expected
    builtin = [e for e in entries[0] if e.role == "built-in register"]
    assert [e.path for e in builtin] == expected
    for entry in builtin:  # the name says which file, the hash which version of it
        assert entry.sha256 == hashlib.sha256((BUILTIN / entry.path.split("/")[-1]).read_bytes()).hexdigest()
    assert not any(str(tmp_path) in text for text in [*names[0], *(e.path for e in entries[0])])


@pytest.mark.slow
def test_a_record_names_its_registers_stably_and_verify_catches_an_edited_one(tmp_path):
    shutil.copytree(DEMO, tmp_path / "demo")
    run = api.analyse(tmp_path / "demo" / "method.toml", trials=0, advice=False)
    api.write_outputs(run, tmp_path / "record", pdf=False)
    record = run.record
    builtin = [i for i in record["inputs"] if i["role"] == "built-in register"]
    assert builtin and all(i["path"].startswith(BUILTIN_PREFIX) for i in builtin)
    assert [i["stored"] for i in builtin] == [f"registers/{i['path'].split('/')[-1]}" for i in builtin]
    assert all(r.startswith(BUILTIN_PREFIX) for r in record["registers"])
    assert verify_record(tmp_path / "record").passed
    stored = tmp_path / "record" / "registers" / "glassware_iso.toml"
    stored.write_text(stored.read_text(encoding="utf-8").replace("\n", "\n# edited\n", 1), encoding="utf-8")
    report = verify_record(tmp_path / "record")
    assert not report.passed and not report.inputs_unchanged
    assert {c.stored: c.matches for c in report.inputs}["registers/glassware_iso.toml"] is False
