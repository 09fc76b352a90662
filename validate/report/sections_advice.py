"""Report section: what to improve first.

Reads record["advice"] in either shape: the advisor's report (a dict with
ranked `items`, a `combined` change, `without_effect`, `skipped`, `sources`)
or a plain list of changes. Nothing is evaluated here.
"""

from __future__ import annotations

from validate.report.numbers import DASH, dof, is_number, num, pct
from validate.report.style import bullets, data_table, heading, para, unquoted


def _figure(value, unit: str) -> str:
    """A ranking figure: relative ones (U/|y|) in percent, others with their unit."""
    if not is_number(value):
        return "not evaluated"
    if str(unit).startswith("relative"):
        return pct(value, 2)
    return f"{num(value, 3)} {unit}".strip()


def _evaluated(a: dict) -> bool:
    return is_number(a.get("expanded_uncertainty_after"))


def _rows(items: list[dict], unit: str) -> list[list]:
    rows = []
    for rank, a in enumerate(items, 1):
        u = a.get("unit") or unit
        rows.append([rank, unquoted(a.get("change", DASH)), _figure(a.get("expanded_uncertainty_after"), u),
                     pct(a.get("reduction")) if is_number(a.get("reduction")) else DASH,
                     _figure(a["confirmed_by_monte_carlo"], u)
                     if is_number(a.get("confirmed_by_monte_carlo")) else DASH,
                     unquoted(a.get("cost") or DASH)])
    return rows


def _effects(advice: dict, units: dict, title: str) -> list:
    effects = advice.get("effects") or []
    if not effects:
        return []
    rows = [[e.get("result", DASH),
             f"{num(e.get('expanded_uncertainty_before'), 3)} → "
             f"{num(e.get('expanded_uncertainty_after'), 3)} {units.get(e.get('result'), '')}".strip(),
             f"{num(e.get('coverage_factor_before'), 3)} → {num(e.get('coverage_factor_after'), 3)}",
             f"{dof(e.get('effective_dof_before'))} → {dof(e.get('effective_dof_after'))}"]
            for e in effects]
    return [heading(title, 2),
            data_table(["result", "U before → after", "k before → after", "ν_eff before → after"],
                       rows, [62, 46, 34, 32], numeric={1, 2, 3})]


TABLE_HEADER = ["#", "change", "after the change", "reduction", "Monte Carlo after", "cost"]
TABLE_WIDTHS = [7, 60, 22, 18, 24, 43]


def _advice_block(record: dict) -> dict | None:
    """The advisor's block as a dict (a plain list of changes is wrapped), None when empty."""
    block = record.get("advice")
    if isinstance(block, list):
        block = {"items": block}
    if not isinstance(block, dict) or not (block.get("items") or block.get("combined")):
        return None
    return block


def _intro(block: dict, unit: str) -> list:
    intro = ("Each change is evaluated with the same model, one at a time"
             + (f", {block['ranking']}" if block.get("ranking") else "") + ".")
    if is_number(block.get("expanded_uncertainty_before")):
        intro += (f" Now: {block.get('target', 'U')} = "
                  f"{_figure(block['expanded_uncertainty_before'], unit)}.")
    return [para(intro, "lead")]


def _changes(items: list[dict], combined, unit: str, units: dict) -> list:
    """The ranked changes, the best ones together, and their effect on each result; suggestions
    the model cannot evaluate follow in one short list, each with what is expected of it."""
    out: list = []
    evaluated = [a for a in items if _evaluated(a)]
    if evaluated:
        out.append(data_table(TABLE_HEADER, _rows(evaluated, unit), TABLE_WIDTHS, numeric={0, 2, 3, 4}))
    others = [a for a in items if not _evaluated(a)]
    if others:
        out += [para("Suggested, not evaluated by the model:", "small"),
                *bullets([f"{a.get('change', DASH)}" + (f" ({a['assumption']})"
                                                                  if a.get("assumption") else "")
                          for a in others], "small")]
    if isinstance(combined, dict):
        out += [heading("The best changes together", 2),
                data_table(["", *TABLE_HEADER[1:]], _rows([combined], unit), TABLE_WIDTHS, numeric={0, 2, 3, 4})]
        out += _effects(combined, units, "Effect of the best changes together on each result")
    elif items:
        out += _effects(items[0], units,
                        f"Effect of the first change on each result: {items[0].get('change', '')}")
    return out


def _notes(block: dict, items: list[dict]) -> list:
    """Assumptions behind the changes, changes without effect or not evaluated, and sources."""
    out: list = []
    notes = [f"{a['change']}: {a['assumption']}" for a in items
             if a.get("assumption") and _evaluated(a)]
    if notes:
        out += [heading("Assumptions behind the changes", 2), *bullets(notes, "small")]
    for title, key in (("Changes without effect", "without_effect"),
                       ("Changes that could not be evaluated", "skipped")):
        if block.get(key):
            out += [heading(title, 2), *bullets(block[key], "small")]
    if block.get("sources"):
        out += [para("Sources", "small"), *bullets(block["sources"], "small")]
    return out


NOT_RUN = ("Not run in this evaluation: the advisor was skipped on request (validate run --no-advice, or "
           "advice=False from Python). Run without that option for changes ranked by how much they reduce U.")


def advice(record: dict) -> list | None:
    block = _advice_block(record)
    if block is None and "advice" in record and record["advice"] is None:
        return [para(NOT_RUN, "body")]
    if block is None:
        return None
    units = {r.get("name"): r.get("unit", "") for r in record.get("results") or []}
    unit = block.get("unit") or next(iter(units.values()), "")
    items = [a for a in block.get("items") or [] if isinstance(a, dict)]
    return _intro(block, unit) + _changes(items, block.get("combined"), unit, units) + _notes(block, items)
