"""Report section: the measurement equation and its inputs, with provenance said once.

Where a value comes from (a register and its confidence, a certificate) is printed once, as a
numbered note, and the tables refer to it by number: the inputs here and the equipment of the
traceability annex share the numbering (`provenance_notes`). Sources that differ only by the
use they stand for (one pipette's repeatability at each of seven samples) share one row that
names every use.
"""

from __future__ import annotations

import os

from reportlab.platypus import Paragraph

from validate.report.numbers import DASH, dof, num
from validate.report.style import cell_text, data_table, para, styles, text

GREY = "#5b6670"


def _origin(provenance: str, item_sources: list[str]) -> tuple[str, str]:
    """(detail, origin) of a source's provenance: the origin is an equipment item's register
    source where the provenance ends with one ('tolerance +/-0.25 mL; <register>'), else the
    whole text."""
    for origin in item_sources:
        if origin and provenance.endswith(origin) and provenance != origin:
            return provenance[: -len(origin)].rstrip("; ").strip(), origin
    return "", provenance


def _item_sources(record: dict) -> list[str]:
    sources = [(e.get("source") or "") for e in (record.get("traceability") or {}).get("equipment") or []]
    sources += [(e.get("provenance") or "") for e in record.get("equipment") or []]
    return sorted({s for s in sources if s}, key=len, reverse=True)  # the longest match first


def provenance_notes(record: dict) -> dict[str, int]:
    """Every distinct origin of a value (register, certificate, rule) -> its note number, in the
    order the inputs and then the equipment first name it."""
    items = _item_sources(record)
    notes: dict[str, int] = {}
    origins = [_origin(str(s.get("provenance") or ""), items)[1] for s in record.get("sources") or []]
    origins += [e.get("source") or "" for e in (record.get("traceability") or {}).get("equipment") or []]
    origins += [e.get("provenance") or "" for e in record.get("equipment") or []]
    for origin in origins:
        if origin and origin not in notes:
            notes[origin] = len(notes) + 1
    return notes


def note_ref(notes: dict[str, int], origin: str) -> str:
    return f"[{notes[origin]}]" if origin in notes else DASH


def notes_block(notes: dict[str, int]) -> list:
    """The numbered notes, each said once."""
    if not notes:
        return []
    lines = [f"[{n}] {text(origin)}" for origin, n in notes.items()]
    return [para("<b>Where the values come from</b> (notes referenced by number in the tables):", "small",
                 markup=True),
            *[para(line, "small", markup=True) for line in lines]]


def _template(names: list[str]) -> str:
    """One label for several names that differ only in a middle part: the common start and end
    with the varying parts listed ('pipette_20: repeatability (V_sample, ·) for a, b, c')."""
    if len(names) == 1:
        return names[0]
    start = os.path.commonprefix(names)
    end = os.path.commonprefix([n[len(start):][::-1] for n in names])[::-1]
    middles = [n[len(start): len(n) - len(end)] for n in names]
    return f"{start}·{end} for {len(names)}: {', '.join(middles)}"


def _row_key(src: dict, items: list[str]) -> tuple:
    detail, origin = _origin(str(src.get("provenance") or ""), items)
    value = src.get("value_in_unit", src.get("value"))
    u = src.get("u_in_unit", src.get("u"))
    return (src.get("step"), src.get("equipment"), src.get("unit"), src.get("distribution"), src.get("dof"),
            src.get("kind"), num(value, 9), num(u, 9), detail, origin)


def grouped_sources(record: dict) -> list[tuple[list[dict], str, str]]:
    """(sources, detail, origin) per row: sources identical but for their name share a row."""
    items = _item_sources(record)
    groups: dict[tuple, list[dict]] = {}
    for src in record.get("sources") or []:
        groups.setdefault(_row_key(src, items), []).append(src)
    return [(members, key[-2], key[-1]) for key, members in groups.items()]


def _row(members: list[dict], detail: str, origin: str, notes: dict[str, int]) -> list:
    first = members[0]
    label = _template([str(m.get("name", "")) for m in members])
    item = first.get("equipment") or ""
    shown_item = "" if label.startswith(f"{item}:") else item  # the name says it already
    where = " · ".join(v for v in (first.get("step"), shown_item, detail) if v)
    name = text(label)
    if where:
        name += f'<br/><font size="6.8" color="{GREY}">{cell_text(where, 80)}</font>'
    value = first.get("value_in_unit", first.get("value"))
    u = first.get("u_in_unit", first.get("u"))
    return [Paragraph(name, styles()["cell"]), num(value, 8), num(u, 2), first.get("unit") or DASH,
            first.get("distribution") or DASH, dof(first.get("dof")), first.get("kind") or DASH,
            note_ref(notes, origin)]


def equation_inputs(record: dict) -> list:
    method = record.get("method", {})
    formula = str(method.get("formula", DASH))
    head = formula.split(",")[0]
    symbol = head.split("=")[0].strip() if "=" in head else "y"  # "K = ..." names itself
    out = [para("The result is calculated as", "lead"),
           para(formula if "=" in head else f"y = {formula}", "formula"),
           para(f"with {symbol} in {method.get('result_unit') or DASH}. Every uncertainty source of the "
                "model follows. Type A: evaluated from replicate readings; Type B: from certificates, "
                "tolerances and specifications (GUM 4.2, 4.3). ν: degrees of freedom (∞ for Type B). "
                "Sources alike but for the use they stand for share a row; the note number says where "
                "the value comes from.", "small")]
    notes = provenance_notes(record)
    rows = [_row(members, detail, origin, notes) for members, detail, origin in grouped_sources(record)]
    if not rows:
        out.append(para("The record lists no input quantities.", "body"))
        return out
    out.append(data_table(["input", "value", "u(x)", "unit", "distribution", "ν", "type", "note"], rows,
                          [82, 16, 15, 11, 19, 8, 9, 14], numeric={1, 2, 5}))
    return out + notes_block(notes)
