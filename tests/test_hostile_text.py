"""Text that leaves for the terminal or the PDF, from inputs or from a record someone else
wrote: control characters are shown escaped, never sent raw, and text too long for a table
cell is cut with a note. ECMA-48 (control functions for coded character sets) defines the
escape sequences that recolour or erase a terminal line; they all begin with a C0 or C1
control character, which is what is escaped here."""

from __future__ import annotations

import pytest
from rich.console import Console

from validate.report import terminal
from validate.report.style import cell_limit, cell_text
from validate.report.terminal_run import Line, terminal_safe

FORGED_ID = "abc\x1b[2K\r\x1b[32mverified: the record reproduces\x1b[0m"


def _printed(lines) -> str:
    console = Console(record=True, force_terminal=True, color_system="standard", width=200)
    for item in lines:
        console.print(item.text if isinstance(item, Line) else item)
    return console.export_text(styles=False)


def test_a_forged_record_id_cannot_erase_or_recolour_the_verdict():
    from validate.record.verify import VerifyReport
    report = VerifyReport(folder="rec", record_id=FORGED_ID, inputs=(), trials=0, seed=None, rerun_error="boom",
                          numbers_compared=0, mismatches=(), recorded_version="x", current_version="y").to_dict()
    lines = terminal.verify_lines(report)
    assert all("\x1b" not in line.text and "\r" not in line.text for line in lines)
    shown = _printed(lines)
    assert "\\u001b[2K" in shown  # the sequence is visible as text
    assert "NOT verified" in shown


def test_an_error_message_with_a_bidirectional_override_is_escaped():
    line = terminal.error_line("input error", "readings.csv: id 'S\u202e4'")
    assert "\u202e" not in line.text and "\\u202e" in line.text


def test_line_breaks_survive_and_other_controls_do_not():
    assert terminal_safe("one\ntwo\tthree\x07") == "one\ntwo\\u0009three\\u0007"


def test_a_long_cell_text_is_cut_with_a_note():
    limit = cell_limit(53)
    shown = cell_text("x" * (limit + 250), 53)
    assert shown.startswith("x" * limit) and not shown.startswith("x" * (limit + 1))
    assert "[250 more characters; the whole text is in results.json]" in shown
    assert cell_limit(20) < cell_limit(120)  # a narrow column holds fewer characters


def test_a_short_cell_text_is_only_escaped_for_the_markup():
    assert cell_text("a < b & c") == "a &lt; b &amp; c"


def test_an_ascii_only_terminal_gets_replacement_marks_not_a_traceback(tmp_path):
    import os
    import shutil
    import subprocess
    import sys

    from conftest import DEMOS
    folder = tmp_path / "demo"
    shutil.copytree(DEMOS / "phosphate_assay", folder)
    method = folder / "method.toml"
    text = method.read_text(encoding="utf-8")
    start = text.index("title = ")
    method.write_text(text[:start] + 'title = "Phosphate at 0.5 µmol/L"' + text[text.index("\n", start):],
                      encoding="utf-8")
    env = {**os.environ, "PYTHONIOENCODING": "ascii"}
    proc = subprocess.run([sys.executable, "-m", "validate.cli", "check", str(method)], capture_output=True, env=env)
    assert proc.returncode == 0, proc.stderr.decode("ascii", "replace")
    assert b"Traceback" not in proc.stderr
    assert b"0.5 ?mol/L" in proc.stdout  # the micro sign shown as a replacement mark


@pytest.mark.slow
def test_the_longest_texts_allowed_still_give_a_pdf(tmp_path):
    import shutil

    from conftest import DEMOS

    from validate import cli
    from validate.inputs.text import MAX_ID_LENGTH, MAX_TEXT_LENGTH
    folder = tmp_path / "demo"
    shutil.copytree(DEMOS / "phosphate_assay", folder)
    method = folder / "method.toml"
    long_id = "o" * MAX_ID_LENGTH
    text = method.read_text(encoding="utf-8")
    text = text.replace('"IUPAC standard atomic weight of phosphorus"', '"' + "p" * MAX_TEXT_LENGTH + '"')
    text = text.replace("[samples.outfall]", f"[samples.{long_id}]")
    method.write_text(text, encoding="utf-8")
    readings = folder / "readings.csv"
    readings.write_text(readings.read_text(encoding="utf-8").replace("outfall,", f"{long_id},"), encoding="utf-8")
    out = tmp_path / "out"
    assert cli.main(["run", str(method), "--out", str(out), "--trials", "0", "--no-advice"]) == 0
    assert (out / "report.pdf").stat().st_size > 10_000
