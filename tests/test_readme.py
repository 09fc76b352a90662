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
