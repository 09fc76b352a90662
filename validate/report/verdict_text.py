"""The verdict and the reported results in words, shared by the terminal and the PDF so the
two say the same. Everything is read from the record's verdict block (validate.record.verdict)."""

from __future__ import annotations

from validate.report.numbers import DASH, gum_decimals, gum_pair, interval

HEADINGS = (("not_met", "not met"), ("not_evaluable", "not evaluable"), ("not_applicable", "not applicable"),
            ("warnings", "warnings"))
TONE = {"fit": True, "fit with reservations": None, "not shown fit": False}  # good, caution, bad


def headline(verdict: dict) -> str:
    """'Verdict: ...' as the first and last lines of the terminal and the top of page 1 say it."""
    return f"Verdict: {verdict['statement']}"


def item_text(item: dict) -> str:
    return f"{item['what']}: {item['why']}"


def listed(verdict: dict) -> list[tuple[str, list[str]]]:
    """(heading, lines) for each non-empty list under the verdict, in a fixed order."""
    return [(title, [item_text(i) for i in verdict.get(key, [])]) for key, title in HEADINGS if verdict.get(key)]


def gum_text(reported: dict) -> str:
    value, big_u = gum_pair(reported["value"], reported["expanded_uncertainty"])
    return f"{value} ± {big_u} {reported['unit']}".strip()


def reported_text(reported: dict) -> str:
    """The reported result: y ± U, or the Monte Carlo interval to the decimal place of U."""
    if reported["basis"] == "GUM":
        return f"{gum_text(reported)} (k = {reported['coverage_factor']:.2f})"
    places = gum_decimals(reported["value"], reported["expanded_uncertainty"])
    ends = interval((reported["low"], reported["high"]), places)
    return f"{ends} {reported['unit']}".strip() if ends != DASH else DASH


def basis_text(reported: dict) -> str:
    """How the reported result was chosen, with the GUM interval beside a Monte Carlo one."""
    p = f"{100 * reported['coverage_probability']:g} %"
    if reported["basis"] == "Monte Carlo":
        return f"Monte Carlo {p} interval; GUM {gum_text(reported)}, not validated by JCGM 101 clause 8"
    if reported["clause8"] == "validated":
        return f"GUM {p}, validated by Monte Carlo, JCGM 101 clause 8"
    return f"GUM {p}; Monte Carlo not run, so not checked by JCGM 101 clause 8"
