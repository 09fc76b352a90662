"""Page 1: the verdict with everything listed under it, and each result as reported.

Read from the record's verdict block (validate.record.verdict); the wording is shared with
the terminal (validate.report.verdict_text), so both say the same.
"""

from __future__ import annotations

from reportlab.lib import colors
from reportlab.platypus import Paragraph

from validate.report.style import BAD, GOOD, bullets, data_table, heading, para, styles, text
from validate.report.verdict_text import TONE, basis_text, headline, listed, reported_text

CAUTION = colors.HexColor("#8a5a00")  # amber: fit with reservations
STUDY_HEADLINE = ("combined K", "log10 K")


def _statement(verdict: dict) -> Paragraph:
    colour = {True: GOOD, None: CAUTION, False: BAD}[TONE[verdict["status"]]]
    return para(f'<font color="#{colour.hexval()[2:]}"><b>{text(headline(verdict))}</b></font>', "body",
                markup=True)


def _lists(verdict: dict) -> list:
    out: list = []
    for title, lines in listed(verdict):
        out += [para(f"<b>{text(title.capitalize())}</b>", "small", markup=True), *bullets(lines, "bullet")]
    return out


def _reported_table(reported: list[dict]) -> list:
    cell = styles()["cell"]
    rows = [[Paragraph(text(r["name"]), cell), Paragraph(f"<b>{text(reported_text(r))}</b>", cell),
             Paragraph(text(basis_text(r)), cell)] for r in reported]
    return [heading("Reported results", 2), data_table(["result", "reported", "basis"], rows, [44, 52, 78])]


def verdict_block(record: dict, study: bool = False) -> list:
    """The verdict, its lists, and the reported results (for a study, the combined K and log10 K)."""
    verdict = record.get("verdict")
    if not verdict:
        return []
    reported = [r for r in verdict["reported"] if not study or r["key"]["kind"] in STUDY_HEADLINE]
    out = [heading("Verdict", 2), _statement(verdict), *_lists(verdict)]
    if reported:
        out += _reported_table(reported)
    return out + [para(verdict["interval_rule"], "note")]
