"""Shared test helpers: paths, a writer for small method files, the command run in this
process, and the invented demos run once per session for the tests that only read their results."""

from __future__ import annotations

import json
import shutil
from dataclasses import dataclass
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
REFERENCE = Path(__file__).resolve().parent / "reference"
DEMOS = ROOT / "example_inputs"


@dataclass(frozen=True)
class Ran:
    """What a finished command gave: its exit code and what it printed (as subprocess.run gives them)."""

    returncode: int
    stdout: str
    stderr: str


@pytest.fixture
def run_command(capsys):
    """`validate ARGS` run in this process through `validate.cli.main`, the function that
    `python -m validate.cli` and the installed `validate` call; returns a Ran. An exit of
    argparse's own (a bad option) gives its exit code as a process would. Starting a process
    costs about a second of imports; tests that check the process itself (signals, start-up
    imports, environment variables, the entry point) still start one."""
    from validate import cli

    def run(*args) -> Ran:
        capsys.readouterr()  # what the test printed before is not the command's
        try:
            code = cli.main([str(arg) for arg in args])
        except SystemExit as exc:
            code = 0 if exc.code is None else exc.code if isinstance(exc.code, int) else 1
        captured = capsys.readouterr()
        return Ran(code, captured.out, captured.err)

    return run


@pytest.fixture
def write_method(tmp_path):
    """Write a method file (and optional readings) into a temporary folder; return its path."""

    def write(text: str, readings: str | None = None, name: str = "method.toml") -> Path:
        path = tmp_path / name
        path.write_text(text, encoding="utf-8")
        if readings is not None:
            (tmp_path / "readings.csv").write_text(readings, encoding="utf-8")
        return path

    return write


def _snapshot(record: dict) -> str:
    return json.dumps(record, sort_keys=True, default=repr)


@pytest.fixture(scope="session")
def nickel_demo():
    """The equilibrium demo run once (20 000 trials, seed 5, no advice), shared by tests that
    read its record, results and model. Tests must not change it: a test that needs a changed
    record works on a copy (copy.deepcopy); a change is reported when the session ends."""
    from validate.workflow import pipeline

    run = pipeline.analyse(DEMOS / "nickel_complex" / "method.toml", trials=20_000, seed=5, advice=False)
    before = _snapshot(run.record)
    yield run
    assert _snapshot(run.record) == before, "a test changed the shared nickel demo record; work on a copy"


@pytest.fixture(scope="session")
def phosphate_demo():
    """The assay demo run once (20 000 trials, seed 11, with the advisor), shared by the tests
    that read its record or its PDF. Tests must not change it (work on a copy.deepcopy)."""
    from validate.workflow import pipeline

    run = pipeline.analyse(DEMOS / "phosphate_assay" / "method.toml", trials=20_000, seed=11)
    before = _snapshot(run.record)
    yield run
    assert _snapshot(run.record) == before, "a test changed the shared phosphate demo record; work on a copy"


@pytest.fixture(scope="session")
def phosphate_report(phosphate_demo, tmp_path_factory):
    """The assay demo's PDF, built once: (ReportInfo, path, text of each page with white space made single)."""
    from pypdf import PdfReader

    from validate.report.pdf import build_report

    path = tmp_path_factory.mktemp("phosphate_report") / "report.pdf"
    info = build_report(phosphate_demo.record, path)
    pages = [" ".join((page.extract_text() or "").split()) for page in PdfReader(str(path)).pages]
    return info, path, pages


def copy_demo(tmp_path: Path, demo: Path = DEMOS / "phosphate_assay") -> Path:
    """A demo's folder copied under tmp_path/demo, to be edited by a test."""
    folder = tmp_path / "demo"
    shutil.copytree(demo, folder)
    return folder


@pytest.fixture
def demo_copy(tmp_path):
    return copy_demo(tmp_path)


def edit_text(folder: Path, old: str, new: str, name: str = "method.toml", count: int = -1) -> Path:
    """Replace `old` (which must be there) by `new` in one file of a copied demo; the method file's path."""
    path = folder / name
    text = path.read_text(encoding="utf-8")
    assert old in text, f"test set-up: {old!r} not in {name}"
    path.write_text(text.replace(old, new, count), encoding="utf-8")
    return folder / "method.toml"


OUTPUT_FILES = ("results.json", "manifest.json", "budget.csv", "report.pdf")  # what a re-run does not read


@pytest.fixture
def rerun_once(monkeypatch):
    """`verify_record`'s re-run of the stored method made once per distinct stored inputs and
    settings within a test, for tests that verify many edited copies of one record: the re-run
    reads only the folder's stored copies (never the record's outputs, which the edits change)
    and is deterministic for a seed, so the copies' re-runs are the same numbers. Every
    comparison of a record with the re-run is still made afresh."""
    from validate.workflow import verify

    real, done = verify.analyse, {}

    def analyse(method_file, *, redirect, **settings):
        folder = Path(redirect.folder)
        stored = tuple(sorted((str(path.relative_to(folder)), path.read_bytes()) for path in folder.rglob("*")
                              if path.is_file() and str(path.relative_to(folder)) not in OUTPUT_FILES))
        key = (str(Path(method_file).relative_to(folder)), stored, tuple(sorted(settings.items())))
        if key not in done:
            done[key] = real(method_file, redirect=redirect, **settings)
        return done[key]

    monkeypatch.setattr(verify, "analyse", analyse)
