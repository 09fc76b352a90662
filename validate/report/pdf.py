"""The PDF validation report, built only from the record dict (the same dict as results.json).

    info = build_report(record, Path("out/report.pdf"))
    info.to_dict()  # {"page_count": ..., "sections": [...]}

Sections whose block is absent from the record are left out; the fixed
sections (summary, method, inputs, budget, defaults and assumptions,
cautions, appendix, sign-off) are always there. The file is written
atomically: built under a temporary name in the same folder and moved into
place only when complete, so a failed build leaves nothing behind.
"""

from __future__ import annotations

import os
import tempfile
from dataclasses import dataclass
from pathlib import Path

from reportlab import rl_config
from reportlab.lib.units import mm
from reportlab.pdfgen.canvas import Canvas
from reportlab.platypus import CondPageBreak, KeepTogether, PageBreak, Paragraph, SimpleDocTemplate, Table

from validate.report import (
    sections,
    sections_addition,
    sections_advice,
    sections_annex,
    sections_equilibrium,
    sections_inputs,
    sections_record,
    sections_routine,
    sections_study,
    sections_uncertainty,
    sections_validation,
)
from validate.report.style import (
    ACCENT,
    FONT,
    MARGIN_BOTTOM,
    MARGIN_TOP,
    MARGIN_X,
    PAGE_SIZE,
    RULE,
    heading,
    register_fonts,
)


def _by_kind(general, for_study):
    """The study layout's builder for an equilibrium study (combined K first), else the general one."""
    def build(record: dict):
        return (for_study if sections_equilibrium.is_study(record) else general)(record)
    return build


# (title, builder, starts a new page). Builders return None when their block is absent.
SECTIONS = (
    ("Summary", _by_kind(sections.summary, sections_study.summary), False),
    ("Method and scope", sections.method_scope, False),
    ("Measurement equation and inputs", sections_inputs.equation_inputs, False),
    ("Equilibrium constant", sections_equilibrium.equilibrium, False),
    ("Calibration", sections.calibration, False),
    ("Second-order calibration function", sections_validation.second_order, False),
    ("Linearity", sections_validation.linearity, False),
    ("Limits of detection and quantitation", sections_validation.detection_limits, False),
    ("Working range", sections_validation.working_range, False),
    ("Precision and trueness", sections_validation.precision_trueness, False),
    ("Standard addition and matrix effect", sections_addition.standard_additions, False),
    ("Uncertainty budget", _by_kind(sections_uncertainty.budget, sections_study.budget), False),
    ("Monte Carlo check", _by_kind(sections_uncertainty.monte_carlo, sections_study.monte_carlo),
     False),
    ("Method uncertainty for routine use", sections_routine.method_uncertainty, False),
    ("What to improve first", sections_advice.advice, False),
    ("Defaults applied and assumptions", sections_record.defaults_assumptions, False),
    ("Cautions", sections_record.cautions, False),
    ("Annex: traceability to the raw data", sections_annex.annex, False),
    ("Record details: registers, input files, record", sections_record.appendix, False),
    ("Sign-off", sections_record.sign_off, False),
)
FIXED = ("Summary", "Method and scope", "Measurement equation and inputs", "Uncertainty budget",
         "Defaults applied and assumptions", "Cautions",
         "Record details: registers, input files, record", "Sign-off")


@dataclass(frozen=True)
class ReportInfo:
    page_count: int
    sections: tuple[str, ...]

    def to_dict(self) -> dict:
        return {"page_count": self.page_count, "sections": list(self.sections)}


def _story(record: dict, content_hash: str | None = None) -> tuple[list, list[str]]:
    """All flowables in order, and the titles of the sections that were rendered."""
    story, titles = list(sections.title_block(record, content_hash)), list[str]()
    for title, builder, new_page in SECTIONS:
        body = builder(record)
        if body is None and title not in FIXED:
            continue
        body = list(body or [])
        if new_page and titles:
            story.append(PageBreak())
        number = len(titles) + 1
        story.append(heading(f"{number}  {title}"))
        story.extend(body)
        titles.append(title)
    return _bind(story), titles  # _bind keeps each heading with what follows it


BINDING_STYLES = ("h1", "h2", "lead", "lead_small")
LONG_TABLE_ROWS = 5
MIN_SPACE = 45 * mm
MIN_TABLE_SPACE = 25 * mm


def _binds(flowable) -> bool:
    return isinstance(flowable, Paragraph) and flowable.style.name in BINDING_STYLES


def _bind(story: list) -> list:
    """Keep headings and lead-in lines with what follows, so none is left alone at a page foot.

    A long table may still start on the current page (it splits with its
    header repeated) when at least MIN_SPACE is left; anything else moves
    to the next page whole with its heading.
    """
    out, run = [], []
    for flowable in story:
        if _binds(flowable):
            run.append(flowable)
            continue
        if isinstance(flowable, CondPageBreak):  # a conditional break goes before the heading
            out.append(flowable)
            continue
        if run:
            long_table = isinstance(flowable, Table) and len(flowable._cellvalues) > LONG_TABLE_ROWS
            if long_table:  # start it here when there is room for its first rows
                out += [CondPageBreak(MIN_SPACE), *run, flowable]
            else:  # one level of grouping: nested KeepTogethers mis-measure in reportlab
                inner = flowable._content if isinstance(flowable, KeepTogether) else [flowable]
                out.append(KeepTogether(run + list(inner)))
            run = []
        elif isinstance(flowable, Table):  # never start a table with a lone row at a page foot
            out += [CondPageBreak(MIN_TABLE_SPACE), flowable]
        else:
            out.append(flowable)
    return out + run


def _numbered_canvas(record: dict, pages: list[int]):
    """A canvas that holds back its pages until the end, so each can say 'page N of M'."""
    record_id = (record.get("run") or {}).get("record_id") or ""
    title = (record.get("method") or {}).get("title") or ""
    software = record.get("software") or {}
    maker = f"{software.get('name', 'validate')} {software.get('version', '')}".strip()

    class NumberedCanvas(Canvas):
        def __init__(self, *args, **kwargs):
            super().__init__(*args, **kwargs)
            self._pages = []

        def showPage(self):
            self._pages.append(dict(self.__dict__))
            self._startPage()

        def save(self):
            total = len(self._pages)
            for state in self._pages:
                self.__dict__.update(state)
                self._decorate(total)
                super().showPage()
            pages.append(total)
            super().save()

        def _decorate(self, total: int) -> None:
            width, height = PAGE_SIZE
            self.saveState()
            self.setStrokeColor(RULE)
            self.setLineWidth(0.5)
            self.line(MARGIN_X, height - 14 * mm, width - MARGIN_X, height - 14 * mm)
            self.line(MARGIN_X, 13 * mm, width - MARGIN_X, 13 * mm)
            self.setFont(FONT, 7.5)
            self.setFillColor(ACCENT)
            short = title if len(title) <= 80 else title[:77] + "..."
            self.drawString(MARGIN_X, height - 12.5 * mm, short)
            self.drawRightString(width - MARGIN_X, height - 12.5 * mm, f"record {record_id}")
            self.drawString(MARGIN_X, 9.5 * mm, f"validation report · {maker}")
            self.drawRightString(width - MARGIN_X, 9.5 * mm, f"page {self._pageNumber} of {total}")
            self.restoreState()

    return NumberedCanvas


def _check_record(record) -> None:
    if not isinstance(record, dict):
        raise TypeError("build_report needs the record dict (as in results.json), "
                        f"got {type(record).__name__}")
    missing = [key for key in ("method", "run", "results") if key not in record]
    if missing:
        raise ValueError(f"the record lacks {', '.join(missing)}; pass the dict that "
                         "validate.workflow.pipeline.build_record returns")


def build_report(record: dict, path: Path, content_hash: str | None = None) -> ReportInfo:
    """Write the PDF report of `record` to `path` atomically; return its page count and sections.
    `content_hash` (validate.record.manifest.content_hash of the record) is shown on page 1."""
    _check_record(record)
    register_fonts()
    path = Path(path)
    handle, temp = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=".part")
    os.close(handle)
    try:
        story, titles = _story(record, content_hash)
        method = record.get("method") or {}
        doc = SimpleDocTemplate(
            temp, pagesize=PAGE_SIZE, leftMargin=MARGIN_X, rightMargin=MARGIN_X,
            topMargin=MARGIN_TOP, bottomMargin=MARGIN_BOTTOM,
            title=f"Validation report: {method.get('title') or ''}",
            subject=(record.get("run") or {}).get("record_id") or "",
            author="", creator=f"validate {(record.get('software') or {}).get('version', '')}")
        pages: list[int] = []
        previous, rl_config.useA85 = rl_config.useA85, 0  # binary streams: smaller, and no slow
        try:                                                # pure-Python ASCII85 encoding of figures
            doc.build(story, canvasmaker=_numbered_canvas(record, pages))
        finally:
            rl_config.useA85 = previous
        os.chmod(temp, 0o644)  # mkstemp makes it owner-only; a report is meant to be read by others
        os.replace(temp, path)
    except BaseException:
        if os.path.exists(temp):
            os.unlink(temp)
        raise
    return ReportInfo(page_count=pages[-1], sections=tuple(titles))
