"""What a run imports: scipy.stats and the urllib/ssl chain of xml.sax.saxutils stay out (they cost about
0.5 s of CPU per run and the run needs neither; timings are in benchmarks/speed_goals.py, not here)."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path
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


@pytest.mark.parametrize("demo", ["nickel_complex", "phosphate_assay"])
def test_check_reads_a_method_without_importing_scipy(demo):
    # scipy.special costs about a quarter of a second to import (it pulls in numpy.f2py and the array
    # API layer); reading and checking a method file needs no quantile (an assay's steep slope is
    # significant without one: validate.model.line.slope_resolved), so `validate check` leaves it
    # to the commands that compute (validate.metrology.probability imports it at the first call)
    root = Path(__file__).resolve().parents[1]
    method = root / "example_inputs" / demo / "method.toml"
    code = ("import sys, runpy; sys.argv = ['validate', 'check', sys.argv[1]]\n"
            "try:\n    runpy.run_module('validate.cli', run_name='__main__')\n"
            "except SystemExit as exc:\n    assert not exc.code, exc.code\n"
            "print(json.dumps(sorted(m for m in sys.modules if m == 'scipy' or m.startswith('scipy.'))))\n")
    done = subprocess.run([sys.executable, "-c", "import json\n" + code, str(method)], capture_output=True,
                          text=True, check=True, cwd=root)
    assert json.loads(done.stdout.strip().splitlines()[-1]) == []


def test_the_quantiles_import_scipy_when_first_used():
    code = ("import sys, json; from validate.metrology import probability as p; "
            "before = 'scipy.special' in sys.modules; q = float(p.t_quantile(0.975, 10)); "
            "print(json.dumps([before, 'scipy.special' in sys.modules, q]))")
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    before, after, q = json.loads(done.stdout)
    assert (before, after) == (False, True)
    # t(0.975, 10) = 2.228: printed t tables (NIST/SEMATECH e-Handbook of Statistical Methods, 1.3.6.7.2)
    assert q == pytest.approx(2.228, abs=5e-4)
