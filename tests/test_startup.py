"""What a run imports: scipy.stats and the urllib/ssl chain of xml.sax.saxutils stay out (they cost about
0.5 s of CPU per run and the run needs neither; timings are in benchmarks/speed_goals.py, not here)."""

from __future__ import annotations

import json
import subprocess
import sys
from xml.sax.saxutils import escape as library_escape

import pytest

from validate.report.style import escape

RUN_MODULES = ("validate.cli", "validate.workflow.pipeline", "validate.report.pdf", "validate.advisor.advice",
               "validate.validation.quickcheck", "validate.validation.second_order")
KEPT_OUT = ("scipy.stats", "xml.sax.saxutils", "ssl", "pandas")


def test_a_run_imports_neither_scipy_stats_nor_the_network_modules():
    code = (f"import sys; import {', '.join(RUN_MODULES)}; import json; "
            f"print(json.dumps([m for m in {KEPT_OUT!r} if m in sys.modules]))")
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert json.loads(done.stdout) == []


@pytest.mark.parametrize("value", ["", "plain", "a < b & c > d", "&amp; already", "<b>bold</b>", "µ ± ² \"q\" 'a'",
                                   "&&<<>>"])
def test_escape_is_the_standard_librarys(value):
    assert escape(value) == library_escape(value)
