"""Table cells drawn by CellLine write the very PDF operators a reportlab Paragraph writes (the
Paragraph is the reference: reportlab's own layout), for one-line text, for text that wraps and for
text with markup, in every cell style; only the layout work differs."""

from __future__ import annotations

import io

from hypothesis import given, settings
from hypothesis import strategies as st
from reportlab.pdfgen.canvas import Canvas
from reportlab.platypus import Paragraph

from validate.report.style import CellLine, cell, cell_text, styles

STYLES = ("cell", "cell_right", "cell_head", "cell_head_right", "mono")
TEXT = st.text(alphabet=st.characters(codec="utf-8", exclude_categories=("Cs",)), max_size=60)
PLAIN = st.text(alphabet="abcdefghij ABC0123456789.,;:-+()/%±µ²_", max_size=60)


def drawn(flowable, width: float) -> tuple:
    canvas = Canvas(io.BytesIO())
    size = flowable.wrapOn(canvas, width, 10_000)
    flowable.drawOn(canvas, 12.5, 40.0)
    return size, canvas._code


@settings(max_examples=300, deadline=None)
@given(value=st.one_of(PLAIN, TEXT), style=st.sampled_from(STYLES), width=st.floats(20, 480))
def test_a_cell_draws_as_a_paragraph_of_its_text(value, style, width):
    s = styles()[style]
    assert drawn(cell(value, s, width / 2.835), width) == drawn(Paragraph(cell_text(value, width / 2.835), s), width)


def test_plain_one_line_text_takes_the_quick_path_and_markup_does_not():
    s = styles()["cell_right"]
    assert isinstance(cell("0.000901 AU", s), CellLine)
    assert cell("0.000901 AU", s).getPlainText() == "0.000901 AU"
    for value in ("a < b", "`key`", "a  b", " lead", "tab\there", "R&D"):
        assert isinstance(cell(value, s), Paragraph)


def test_a_line_too_long_for_the_cell_wraps_as_a_paragraph_does():
    s = styles()["cell"]
    long = "a rather long text that will not fit on one line of this cell at all"
    quick = CellLine(long, s)
    size, _ = drawn(quick, 80.0)
    assert size[1] > s.leading  # more than one line
    assert drawn(CellLine(long, s), 80.0) == drawn(Paragraph(long, s), 80.0)
