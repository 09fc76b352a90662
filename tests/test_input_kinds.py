"""The method file is read into typed kinds: an assay or an equilibrium study, solutions by the
way they are made, equipment items by their kind, each carrying only its own fields."""

from __future__ import annotations

import shutil

import pytest
from conftest import DEMOS

from validate.inputs.errors import InputError
from validate.inputs.items import Balance, Burette, Cuvette, OneMarkPipette, Photometer, VolumetricFlask
from validate.inputs.method_file import load_method
from validate.inputs.schema import AMOUNT_CONCENTRATION, AssayMethod, EquilibriumMethod
from validate.inputs.solutions import Blank, Diluted, Weighed, deliveries_of, parent_of
from validate.model.assay import Model
from validate.model.build import build
from validate.model.equilibrium import EquilibriumModel

ASSAY = DEMOS / "phosphate_assay" / "method.toml"
STUDY = DEMOS / "nickel_complex"


@pytest.fixture(scope="module")
def assay():
    return load_method(ASSAY)


def test_the_demo_assay_is_read_into_its_kinds(assay):
    assert isinstance(assay, AssayMethod)
    kinds = {i: type(item) for i, item in assay.items.items()}
    assert kinds == {"balance": Balance, "flask_500": VolumetricFlask, "flask_100": VolumetricFlask,
                     "flask_50": VolumetricFlask, "pipette_5": OneMarkPipette, "pipette_20": OneMarkPipette,
                     "burette_25": Burette, "cell_40": Cuvette, "photometer": Photometer}
    stock, intermediate, blank = (assay.solutions[s] for s in ("stock", "intermediate", "blank"))
    assert isinstance(stock, Weighed) and stock.balance == "balance" and stock.molar_mass is not None
    assert isinstance(intermediate, Diluted) and parent_of(intermediate) == "stock"
    assert isinstance(blank, Blank) and deliveries_of(blank) == ()
    assert deliveries_of(intermediate) == (intermediate.aliquot, intermediate.flask)
    # a weighed substance with a molar mass gives an amount concentration, and its dilutions too
    assert assay.concentration_dims("S4") == AMOUNT_CONCENTRATION
    # the words of the method file stay readable for messages and the record
    assert (stock.made_by, intermediate.made_by, assay.items["burette_25"].kind) == ("weighing", "dilution",
                                                                                      "burette")


def test_items_carry_only_the_fields_of_their_kind(assay):
    assert not hasattr(assay.items["balance"], "tolerance")
    assert not hasattr(assay.items["cell_40"], "repeatability")
    assert not hasattr(assay.items["flask_50"], "reading")
    assert hasattr(assay.items["burette_25"], "reading")
    assert not hasattr(assay.solutions["blank"], "flask")


def test_the_model_is_built_for_the_method_kind(assay):
    assert type(build(assay)) is Model
    study = load_method(STUDY / "method.toml")
    assert isinstance(study, EquilibriumMethod)
    assert type(build(study)) is EquilibriumModel


OWN_FLASK = """
[equipment.flask]
kind = "volumetric flask"
nominal = "100 mL"
tolerance = "0.1 mL"
{extra}
[solutions.stock]
made_by = "certificate"
concentration = {{ value = "1000 mg/L", expanded_uncertainty = "2 mg/L", coverage_factor = 2 }}

[result]
name = "stock"
unit = "mg/L"
formula = "stock"
"""


def test_glassware_repeatability_defaults_to_a_fifth_of_the_tolerance(write_method):
    # EURACHEM/CITAC CG4 (3rd ed.), Example A1: a 100 mL flask of tolerance +/-0.1 mL with a
    # filling repeatability of 0.02 mL (from memory); the loader takes that ratio as its default
    # and says so among the defaults applied.
    method = load_method(write_method(OWN_FLASK.format(extra="")))
    assert method.items["flask"].repeatability == pytest.approx(0.02e-6, rel=1e-12)
    assert any("0.2 x its tolerance" in line and "flask 0.02 mL" in line for line in method.defaults_shown)


def test_a_burette_reading_defaults_to_half_a_subdivision(write_method):
    # a reading of a scale is within half its smallest division (common practice); without a
    # subdivision given, the tolerance stands for it, and the default is listed
    text = OWN_FLASK.format(extra='\n[equipment.burette]\nkind = "burette"\nnominal = "25 mL"\n'
                                  'tolerance = "0.03 mL"\n')
    method = load_method(write_method(text))
    assert method.items["burette"].reading == pytest.approx(0.015e-6, rel=1e-12)
    assert any("half a subdivision" in line for line in method.defaults_shown)


@pytest.mark.parametrize("kind, key, value", [
    ("balance", "tolerance", '"0.1 mg"'),
    ("cuvette", "distribution", '"triangular"'),
    ("photometer", "repeatability", '"0.001"'),
    ("volumetric flask", "reading", '"0.01 mL"'),
])
def test_a_value_the_kind_does_not_carry_is_refused(write_method, kind, key, value):
    # before typed items such a value was read and then used by nothing: now it is named
    own = {"balance": 'linearity = "0.2 mg"', "cuvette": 'path = "10 mm"', "photometer": 'noise = "0.001"',
           "volumetric flask": 'nominal = "50 mL"\ntolerance = "0.06 mL"'}[kind]
    extra = f'\n[equipment.item]\nkind = "{kind}"\n{own}\n{key} = {value}\n'
    with pytest.raises(InputError) as err:
        load_method(write_method(OWN_FLASK.format(extra=extra)))
    message = err.value.message()
    assert "[equipment.item]." + key in message and f"a {kind} has no `{key}`" in message
    assert "what to do" in message and "leave it out" in message


@pytest.fixture
def study_copy(tmp_path):
    folder = tmp_path / "study"
    shutil.copytree(STUDY, folder)
    return folder / "method.toml"


def _append(path, text):
    path.write_text(path.read_text(encoding="utf-8") + text, encoding="utf-8")


def test_a_study_refuses_the_sections_of_an_assay(study_copy):
    _append(study_copy, '\n[samples.river]\ndescription = "an assay sample"\n')
    with pytest.raises(InputError) as err:
        load_method(study_copy)
    assert "[samples]" in err.value.message() and "does not read it" in err.value.message()


def test_a_study_and_an_assay_are_not_mixed_in_one_file(study_copy):
    _append(study_copy, '\n[result]\nname = "x"\nunit = "mg/L"\nformula = "nickel_stock"\n')
    with pytest.raises(InputError, match="either an assay .* or an equilibrium study"):
        load_method(study_copy)


def test_the_record_still_reads_the_absent_parts_of_each_kind(assay):
    # compatibility for the record and the command line: an assay has no study, a study no
    # calibration, result formula or assay samples
    study = load_method(STUDY / "method.toml")
    assert assay.equilibrium is None
    assert (study.calibration, study.result, study.samples) == (None, None, ())
