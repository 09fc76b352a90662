"""The README's two commands are the ones CI runs."""

import re

from conftest import ROOT


def test_ci_runs_the_readme_commands():
    readme = (ROOT / "README.md").read_text(encoding="utf-8")
    blocks = re.findall(r"```\n(.*?)\n```", readme, flags=re.S)
    demo, tests = blocks[0].strip(), blocks[1].strip()
    ci = (ROOT / ".ci" / "run").read_text(encoding="utf-8")
    assert "validate run" in demo and "pytest" in tests
    assert demo in ci and tests in ci


def test_the_quick_test_command_uses_a_registered_marker():
    # DEVELOPERS.md tells how to leave out the slow tests; the marker it names must be the
    # one pyproject.toml registers (an unknown marker would select nothing or fail)
    import tomllib

    developers = (ROOT / "DEVELOPERS.md").read_text(encoding="utf-8")
    command = re.search(r'python -m pytest -m "not (\w+)"', developers)
    assert command, "DEVELOPERS.md names no command for the quick part of the tests"
    options = tomllib.loads((ROOT / "pyproject.toml").read_text(encoding="utf-8"))["tool"]["pytest"]["ini_options"]
    registered = [m.split(":")[0].strip() for m in options["markers"]]
    assert command.group(1) in registered
