"""Page 1: the verdict with everything listed under it, and which interval each result is
reported with (the results table's last column).

Read from the record's verdict block (validate.record.verdict); the wording is shared with
the terminal (validate.report.verdict_text), so both say the same.
"""

from __future__ import annotations

from reportlab.lib import colors

from validate.report.numbers import DASH
from validate.report.style import BAD, GOOD, para, text
from validate.report.verdict_text import HEADINGS, TONE, headline

CAUTION = colors.HexColor("#8a5a00")  # amber: fit with reservations
REPORTED_WIDTH = 19.0  # mm, the results table's "reported" column
COLUMN_TEXT = {"GUM": "y ± U", "Monte Carlo": "MC"}


def _statement(verdict: dict):
    colour = {True: GOOD, None: CAUTION, False: BAD}[TONE[verdict["status"]]]
    return para(f'<font color="#{colour.hexval()[2:]}"><b>{text(headline(verdict))}</b></font>', "body",
                markup=True)


def _lists(verdict: dict) -> list:
    """Each list under a small heading, one compact line per item (what in bold, then why)."""
    out: list = []
    for key, title in HEADINGS:
        if verdict[key]:
            out.append(para(f"<b>{text(title.capitalize())}</b>", "small", markup=True))
            out += [para(f"•&nbsp;<b>{text(i['what'])}</b>: {text(i['why'])}", "small", markup=True)
                    for i in verdict[key]]
    return out


def verdict_block(record: dict, study: bool = False) -> list:
    """The verdict and its lists (the same for an assay and a study)."""
    verdict = record.get("verdict")
    if not verdict:
        return []
    return [_statement(verdict), *_lists(verdict)]  # the statement starts "Verdict:": no heading of its own


def reported_bases(record: dict) -> dict:
    """(kind, id) of each result's key -> its reported entry; empty for a record without a verdict."""
    reported = (record.get("verdict") or {}).get("reported") or []
    return {(r["key"]["kind"], r["key"]["id"]): r for r in reported}


def reported_column(bases: dict, result: dict) -> str:
    key = result.get("key") or {}
    entry = bases.get((key.get("kind"), key.get("id")))
    return COLUMN_TEXT[entry["basis"]] if entry else DASH


def interval_rule_note(record: dict) -> list:
    """The one rule for the reported interval, under the results table."""
    verdict = record.get("verdict")
    return [para(f"Reported: {verdict['interval_rule']}", "note")] if verdict else []
