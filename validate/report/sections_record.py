"""Report sections, part 4: defaults and assumptions, cautions, appendix, sign-off."""

from __future__ import annotations

from pathlib import PurePath

from reportlab.lib.units import mm
from reportlab.platypus import Paragraph, Table, TableStyle

from validate.report import figures
from validate.report.numbers import DASH
from validate.report.style import ACCENT, INK, bullets, data_table, heading, key_value_table, para, styles, text

CAUTIONS = (
    "This report evaluates the data it was given. It does not replace the laboratory's own "
    "procedures, the safety data sheets, local regulations or accredited practice.",
    "Acceptance criteria come from the requirements that apply to the method and the "
    "laboratory, not from this tool. Limits marked as defaults are placeholders until the "
    "laboratory confirms them.",
    "Photometric methods use reagents that need care: acids, oxidisers and colour reagents can "
    "be corrosive or toxic. Read the safety data sheets, wear the protective equipment they "
    "require, and follow the laboratory's rules for handling and waste.",
    "Register values recalled from memory or typical of the trade are marked as such in the "
    "inputs; replace them with the laboratory's own calibration certificates before the "
    "record is used for decisions.",
    "The uncertainty covers the sources listed in this report only. Effects that are not "
    "modelled (matrix interferences, sampling, sample stability) are not included.",
)


def defaults_assumptions(record: dict) -> list:
    out = []
    for title, key, empty in (("Defaults applied", "defaults_applied", "No defaults were applied."),
                              ("Assumptions", "assumptions", "No further assumptions."),
                              ("Notes", "notes", "")):
        lines = [str(x) for x in record.get(key) or []]
        if lines or empty:  # no heading for an empty list of notes
            out += [heading(title, 2), *(bullets(lines) if lines else [para(empty, "body")])]
    return out


def cautions(record: dict) -> list:
    return bullets(CAUTIONS)


def _seeds(record: dict) -> str:
    seeds = [r["monte_carlo"]["seed"] for r in record.get("results") or []
             if isinstance(r.get("monte_carlo"), dict) and r["monte_carlo"].get("seed") is not None]
    settings_seed = (record.get("monte_carlo_settings") or {}).get("seed")
    if settings_seed is not None:
        seeds.insert(0, settings_seed)
    unique = list(dict.fromkeys(str(s) for s in seeds))
    return ", ".join(unique)


def _equipment(record: dict) -> list:
    equipment = record.get("equipment") or []
    if not equipment:
        return []
    rows = [[e.get("id", DASH), e.get("kind", DASH), e.get("class") or DASH,
             e.get("provenance") or DASH] for e in equipment]
    return [heading("Equipment", 2), data_table(["item", "kind", "class", "provenance"], rows, [28, 30, 30, 86])]


def _registers(record: dict) -> list:
    registers = record.get("registers") or []
    if not registers:
        return []
    rows = [[PurePath(r).name, Paragraph(text(r), styles()["mono"])] for r in registers]
    return [heading("Registers used", 2), data_table(["register", "path"], rows, [50, 124])]


def _input_files(record: dict) -> list:
    inputs = record.get("inputs") or []
    if not inputs:
        return []
    s = styles()
    rows = [[Paragraph(text(i.get("path", DASH)), s["cell"]),
             Paragraph(text(i.get("sha256", DASH)), s["mono"])] for i in inputs]
    return [heading("Input files", 2), data_table(["file", "SHA-256"], rows, [74, 100])]


def _record_facts(record: dict) -> list:
    run, software = record.get("run") or {}, record.get("software") or {}
    facts = [("record id", run.get("record_id", DASH)), ("created (UTC)", run.get("created", DASH)),
             ("software", f"{software.get('name', 'validate')} {software.get('version', DASH)}")]
    seeds = _seeds(record)
    if seeds:
        facts.append(("random seed", seeds))
    facts.append(("figures", f"drawn at {figures.DPI} dpi of their printed size (sharp on paper; common practice "
                             "prints line art at 150 to 300 dpi)"))
    return [heading("Record", 2), key_value_table(facts, (40, 134)),
            para("The record id and the input files' SHA-256"
                 + (", with the random seed," if seeds else "") + " let the evaluation be "
                 "repeated and checked against the JSON record of the same id.", "note")]


def appendix(record: dict) -> list:
    """Registers, input files and the record's facts; the equipment is in the traceability annex
    (a record without that block, from an older layout, shows it here)."""
    equipment = [] if record.get("traceability") else _equipment(record)
    listed = {str(i.get("path")) for i in record.get("inputs") or []}
    registers = [] if set(map(str, record.get("registers") or [])) <= listed else _registers(record)
    return equipment + registers + _input_files(record) + _record_facts(record)


def sign_off(record: dict) -> list:
    s = styles()
    head = [Paragraph(text(h), s["cell_head"]) for h in ("", "name", "", "signature", "", "date")]
    rows = [head] + [[Paragraph(f"<b>{text(role)}</b>", s["cell"]), "", "", "", "", ""]
                     for role in ("Prepared by", "Reviewed by", "Approved by")]
    # blank columns 2 and 4 keep the three writing lines apart
    table = Table(rows, colWidths=[30 * mm, 52 * mm, 6 * mm, 52 * mm, 6 * mm, 28 * mm],
                  rowHeights=[6 * mm] + [11 * mm] * 3, hAlign="LEFT")
    table.setStyle(TableStyle([
        ("LINEBELOW", (0, 0), (-1, 0), 0.8, ACCENT),
        *[("LINEBELOW", (col, 1), (col, -1), 0.6, INK) for col in (1, 3, 5)],
        ("VALIGN", (0, 1), (-1, -1), "BOTTOM"),
        ("LEFTPADDING", (0, 0), (-1, -1), 3),
    ]))
    return [para("By signing, each person confirms the role named; approval releases the method "
                 "for routine use within the scope above.", "lead"), table]
