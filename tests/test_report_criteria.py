"""The PDF's acceptance-criteria table: each criterion with its unit or %, as the terminal shows it,
and the criteria left out as not applicable named (invented demo records; the criteria and their
sources are in validate.inputs.validation_settings: ISO 13528 for |E_n| <= 1)."""

from __future__ import annotations

import pytest
from conftest import DEMOS

from validate.report.sections import criteria_block
from validate.workflow import pipeline


def _texts(flowables) -> tuple[list[list[str]], list[str]]:
    """The table's rows and the paragraphs' texts of a list of flowables."""
    rows, paras = [], []
    for f in flowables:
        if hasattr(f, "_cellvalues"):
            rows += [[str(getattr(c, "text", c)) for c in row] for row in f._cellvalues]
        elif hasattr(f, "text"):
            paras.append(f.text)
    return rows, paras


@pytest.fixture(scope="module")
def phosphate_record():
    return pipeline.analyse(DEMOS / "phosphate_assay" / "method.toml", trials=None, advice=False).record


def test_each_criterion_has_its_unit_and_no_formula_text(phosphate_record):
    rows, paras = _texts(criteria_block(phosphate_record))
    by_name = {r[0]: r for r in rows[1:]}
    assert by_name["largest |residual| / fitted value of the standards"][1] == "≤ 5 %"
    assert by_name["largest |residual| / fitted value of the standards"][2].endswith(" %")
    assert by_name["limit of quantitation"][1] == "≤ 0.5 µmol/L"
    assert by_name["limit of quantitation"][2].endswith(" µmol/L")
    assert by_name["recovery against the reference value"][1] == "95 to 105 %"
    # |E_n| <= 1 (ISO 13528): the limit reads "≤ 1", the observed value carries the bars
    en = by_name["|E_n| against the reference value"]
    assert en[1] == "≤ 1" and en[2].startswith("|") and en[2].endswith("|")
    assert not any("|x|" in cell for row in rows for cell in row)
    # an assay judges every criterion: nothing is listed as not applicable
    assert not any(p.startswith("Not applicable") for p in paras)


def test_a_study_names_the_criteria_not_applicable_to_it(nickel_demo):
    rows, paras = _texts(criteria_block(nickel_demo.record))
    line = next(p for p in paras if p.startswith("Not applicable to this kind of method"))
    for name in ("recovery against the reference value", "|E_n| against the reference value",
                 "repeatability relative SD"):
        assert name in line
    judged = [r[0] for r in rows[1:]]
    assert "recovery against the reference value" not in judged
    assert sum("Not applicable" in p for p in paras) == 1  # said once, not again in the caution
