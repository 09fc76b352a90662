"""The record as a typed tree: results.json is exactly the tree's JSON form, reads back into
the same tree, is checked against the shipped JSON Schema (draft 2020-12, validated with the
`jsonschema` library) and addresses every result by a key, never by its label."""

from __future__ import annotations

import copy
import dataclasses
import json
import math
import shutil

import jsonschema
import pytest
from conftest import DEMOS

from validate.inputs.errors import InputError
from validate.model.keys import ResultKey
from validate.record import schema
from validate.record.tree import RecordShapeError, from_dict, to_dict
from validate.record.types import SCHEMA_VERSION, InputFile, Record
from validate.workflow import pipeline as api
from validate.workflow.verify import verify_record

DEMO_NAMES = ("phosphate_assay", "nickel_complex")


@pytest.fixture(scope="module")
def filed(tmp_path_factory):
    """Both demos run once (few trials: this checks the layout, not the precision) and filed."""
    out = {}
    for name in DEMO_NAMES:
        folder = tmp_path_factory.mktemp(name)
        run = api.analyse(DEMOS / name / "method.toml", trials=2000, seed=7)
        api.write_outputs(run, folder / "record", pdf=False)
        out[name] = (run, folder / "record")
    return out


def _written(folder):
    return json.loads((folder / "results.json").read_text(encoding="utf-8"))


@pytest.mark.parametrize("name", DEMO_NAMES)
def test_the_file_written_is_exactly_the_tree_in_json_form(filed, name):
    run, folder = filed[name]
    written = _written(folder)
    assert written == run.typed_record.to_dict() == run.record
    assert written["schema_version"] == SCHEMA_VERSION == "2.3"


@pytest.mark.parametrize("name", DEMO_NAMES)
def test_reading_the_json_back_gives_the_same_tree(filed, name):
    run, folder = filed[name]
    record = run.typed_record
    assert Record.from_dict(record.to_dict()) == record
    assert Record.from_dict(_written(folder)) == record
    assert Record.from_dict(_written(folder)).to_dict() == _written(folder)


def test_assay_results_are_keyed_by_sample(filed):
    run, _ = filed["phosphate_assay"]
    record = run.typed_record
    samples = tuple(s.id for s in run.method.samples)
    assert tuple(r.key for r in record.results) == tuple(ResultKey("result", s) for s in samples)
    assert all(r.sample == r.key.id for r in record.results)
    reference = record.result(ResultKey("result", "reference_water"))
    assert reference.sample == "reference_water" and reference.flags == record.validation.range_flags[
        "reference_water"]
    # every budget row carries the key of its result, and the rows of one result add up to
    # its combined variance (GUM 5.1.2: u_c^2 = sum (c_i u_i)^2 for uncorrelated inputs)
    rows = [b for b in record.budget if b.key == reference.key]
    assert rows and math.isclose(sum(b.contribution ** 2 for b in rows), reference.standard_uncertainty ** 2,
                                 rel_tol=1e-9)


def test_equilibrium_results_are_keyed_by_point_and_combination(filed):
    run, _ = filed["nickel_complex"]
    record = run.typed_record
    points = [m.id for m in record.equilibrium.mixtures]
    kinds = [(r.key.kind, r.key.id) for r in record.results]
    assert kinds == [("K", p) for p in points] + [("combined K", None), ("log10 K", None)]
    combined = record.result(ResultKey("combined K"))
    assert combined.value == record.equilibrium.combined.K
    # log10 K of the combined K, with u(log10 K) = u(K) / (K ln 10) (GUM 5.1.2, first order)
    log10k = record.result(ResultKey("log10 K"))
    assert log10k.value == pytest.approx(math.log10(combined.value), rel=1e-12)
    assert log10k.standard_uncertainty == pytest.approx(
        combined.standard_uncertainty / (combined.value * math.log(10)), rel=1e-9)
    assert all(r.sample is None for r in record.results)
    with pytest.raises(KeyError):
        record.result(ResultKey("result", "X1"))


def test_not_finite_numbers_are_written_as_null_and_optional_keys_left_out(filed):
    run, _ = filed["phosphate_assay"]
    entry = run.typed_record.results[0]
    odd = dataclasses.replace(entry, effective_dof=math.inf, value=math.nan, monte_carlo=None)
    data = odd.to_dict()
    assert data["effective_dof"] is None and data["value"] is None
    assert "monte_carlo" not in data and "monte_carlo" in entry.to_dict()
    assert InputFile(path="m.toml", sha256="0" * 64).to_dict() == {"path": "m.toml", "sha256": "0" * 64}
    # numpy scalars become plain numbers
    np = pytest.importorskip("numpy")
    assert to_dict({"a": np.float64(0.5), "b": (np.int64(3), np.bool_(True))}) == {"a": 0.5, "b": [3, True]}


@pytest.mark.parametrize("damage, where", [
    (lambda r: r["results"][0].update(value="0.25"), "results[0].value"),
    (lambda r: r["results"][1].pop("key"), "results[1].key"),
    (lambda r: r["results"][0]["key"].update(kind="sample"), "results[0].key.kind"),
    (lambda r: r["budget"][3].update(extra=1), "budget[3]"),
    (lambda r: r["validation"]["criteria"].update(all_met="yes"), "validation.criteria.all_met"),
    (lambda r: r.update(settings=None), "settings"),
])
def test_from_dict_names_where_a_damaged_record_is_wrong(filed, damage, where):
    _, folder = filed["phosphate_assay"]
    record = _written(folder)
    damage(record)
    with pytest.raises(RecordShapeError) as caught:
        Record.from_dict(record)
    assert caught.value.where == where


def test_from_dict_checks_plain_types():
    assert from_dict(tuple[float, ...], [1, 2.5]) == (1, 2.5)
    assert from_dict(dict[str, int | None], {"a": None, "b": 2}) == {"a": None, "b": 2}
    for hint, value in ((int, True), (float, "1"), (str, 1), (tuple[int, ...], {"a": 1}), (int, 1.5)):
        with pytest.raises(RecordShapeError):
            from_dict(hint, value, "x")


# ---- the JSON Schema ----

def test_the_shipped_schema_is_the_generated_one():
    shipped = schema.SCHEMA_FILE.read_text(encoding="utf-8")
    assert shipped == schema.schema_text(), (
        "validate/record/results.schema.json is out of date with the record's declarations; "
        "regenerate it with: python -m validate.record.schema")


def test_the_schema_is_a_valid_draft_2020_12_schema():
    shipped = json.loads(schema.SCHEMA_FILE.read_text(encoding="utf-8"))
    assert shipped["$schema"] == "https://json-schema.org/draft/2020-12/schema"
    jsonschema.Draft202012Validator.check_schema(shipped)


def _validator():
    return jsonschema.Draft202012Validator(json.loads(schema.SCHEMA_FILE.read_text(encoding="utf-8")))


@pytest.mark.parametrize("name", DEMO_NAMES)
def test_both_demo_records_are_valid_against_the_schema(filed, name):
    _, folder = filed[name]
    errors = list(_validator().iter_errors(_written(folder)))
    assert errors == [], [e.message for e in errors[:3]]


@pytest.mark.parametrize("damage", [
    lambda r: r["results"][0].update(value="0.25"),  # wrong type
    lambda r: r["results"][0].pop("key"),  # missing key
    lambda r: r.pop("schema_version"),
    lambda r: r.update(schema_version="3.0"),  # a layout this version cannot read
    lambda r: r["budget"][0].update(share=None),  # a number that must be there
    lambda r: r["results"][0]["key"].update(id=3),
])
def test_a_damaged_record_fails_the_schema(filed, damage):
    _, folder = filed["phosphate_assay"]
    record = copy.deepcopy(_written(folder))
    damage(record)
    assert not _validator().is_valid(record)


# ---- reading a filed record ----

def test_verify_refuses_a_record_not_of_the_schema_with_a_clear_message(filed, tmp_path):
    _, folder = filed["phosphate_assay"]
    shutil.copytree(folder, tmp_path / "rec")
    record = _written(folder)
    record["results"][2]["expanded_uncertainty"] = "0.01"
    (tmp_path / "rec" / "results.json").write_text(json.dumps(record), encoding="utf-8")
    with pytest.raises(InputError) as caught:
        verify_record(tmp_path / "rec")
    assert caught.value.where == "results[2].expanded_uncertainty"
    assert "expected a number" in caught.value.what and "restore it" in caught.value.fix


def test_verify_refuses_a_record_without_a_layout_version(filed, tmp_path):
    _, folder = filed["phosphate_assay"]
    shutil.copytree(folder, tmp_path / "rec")
    record = _written(folder)
    del record["schema_version"]
    (tmp_path / "rec" / "results.json").write_text(json.dumps(record), encoding="utf-8")
    with pytest.raises(InputError, match="written before versioned layouts"):
        verify_record(tmp_path / "rec")


# ---- the declarations mirror the stages' own results (also parts the demos do not reach) ----

def _mirrors():
    from validate.advisor import advice
    from validate.equilibrium import combine
    from validate.metrology.sources import Source
    from validate.model.line import LineFit
    from validate.propagation import linear, mcstats
    from validate.record import blocks, blocks_validation, types
    from validate.validation import criteria, limits, linearity, precision, window
    return [
        (mcstats.AdaptiveCheck, types.AdaptiveCheck, set()),
        (Source, types.SourceEntry, {"value_in_unit", "u_in_unit"}),
        (linear.Contribution, types.BudgetRow, {"result", "key"}),
        (LineFit, blocks_validation.LineFitEntry, set()),
        (linearity.PointDiagnostics, blocks_validation.PointDiagnosticsEntry, set()),
        (linearity.SignificanceTest, blocks_validation.LineTest, set()),
        (limits.Sensitivity, blocks_validation.SensitivityEntry, set()),
        (limits.MolarAbsorptivity, blocks_validation.MolarAbsorptivityEntry, set()),
        (limits.LimitRoute, blocks_validation.LimitRouteEntry, set()),
        (limits.Iso11843Result, blocks_validation.Iso11843Entry, set()),
        (limits.DetectionLimits, blocks_validation.DetectionLimitsEntry, set()),
        (window.WindowFlags, blocks_validation.WindowFlagsEntry, set()),
        (precision.Repeatability, blocks_validation.RepeatabilityEntry, {"unit"}),
        (precision.IntermediatePrecision, blocks_validation.IntermediatePrecisionEntry, {"unit"}),
        (precision.Recovery, blocks_validation.TruenessEntry, set()),
        (precision.ScatterConsistency, blocks_validation.ScatterConsistencyEntry, set()),
        (criteria.Criterion, blocks_validation.Criterion, set()),
        (criteria.CriteriaResult, blocks_validation.CriteriaBlock, set()),
        (combine.TrendTest, blocks.TrendEntry, {"against"}),
        (combine.ActivityCorrection, blocks.ActivityEstimate, set()),
        (advice.ResultEffect, blocks.AdviceEffect, set()),
        (advice.Advice, blocks.AdviceItem, set()),
        (advice.AdviceReport, blocks.AdviceBlock, set()),
    ]


def test_each_declaration_has_the_keys_of_the_stage_result_it_holds():
    for stage_type, declared, added in _mirrors():
        stage_keys = {f.name for f in dataclasses.fields(stage_type)} | added
        declared_keys = {f.metadata.get("key", f.name) for f in dataclasses.fields(declared)}
        assert stage_keys == declared_keys, (stage_type.__name__, stage_keys ^ declared_keys)


def test_the_schema_writer_takes_an_option_for_an_option_not_a_file_name(tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)
    assert schema.main(["--help"]) == 0 and "usage" in capsys.readouterr().out
    assert schema.main(["--bogus"]) == 2
    assert list(tmp_path.iterdir()) == []  # no file named --help or --bogus
    assert schema.main([str(tmp_path / "s.json")]) == 0
    assert (tmp_path / "s.json").read_text(encoding="utf-8") == schema.schema_text()
