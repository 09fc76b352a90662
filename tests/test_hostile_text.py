"""Text that leaves for the terminal or the PDF, from inputs or from a record someone else
wrote: control characters are shown escaped, never sent raw, and text too long for a table
cell is cut with a note. ECMA-48 (control functions for coded character sets) defines the
escape sequences that recolour or erase a terminal line; they all begin with a C0 or C1
control character, which is what is escaped here."""

from __future__ import annotations

from rich.console import Console

from validate.report import terminal
from validate.report.style import MAX_CELL_CHARACTERS, cell_text
from validate.report.terminal_run import Line, terminal_safe

FORGED_ID = "abc\x1b[2K\r\x1b[32mverified: the record reproduces\x1b[0m"


def _printed(lines) -> str:
    console = Console(record=True, force_terminal=True, color_system="standard", width=200)
    for item in lines:
        console.print(item.text if isinstance(item, Line) else item)
    return console.export_text(styles=False)


def test_a_forged_record_id_cannot_erase_or_recolour_the_verdict():
    report = {"record_id": FORGED_ID, "folder": "rec", "recorded_version": "x", "current_version": "y",
              "inputs": [], "trials": 0, "seed": None, "relative_tolerance": 1e-9, "mismatches": [],
              "rerun_error": "boom", "numbers_compared": 0, "passed": False}
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
    text = "x" * (MAX_CELL_CHARACTERS + 250)
    shown = cell_text(text)
    assert shown.startswith("x" * MAX_CELL_CHARACTERS)
    assert "[250 more characters; the whole text is in results.json]" in shown


def test_a_short_cell_text_is_only_escaped_for_the_markup():
    assert cell_text("a < b & c") == "a &lt; b &amp; c"
