"""Fuzzing the input layer: mutated method files and readings tables never crash the loader.

Hypothesis mutates the demo method file (parsed with tomllib; keys deleted, values replaced by
values of another type, junk keys inserted, text and numbers swapped, numbers rescaled with
their units kept) and writes it back with
a small TOML writer; the readings table is mutated line by line. Reading the files, building
the model and propagating (GUM) must then either succeed or raise `InputError` (bad input) or
`ModelError` (data that allow no result): never any other exception, which would reach the
user as a traceback. The equilibrium demo's method file is mutated the same way and read into
its model.
"""

from __future__ import annotations

import copy
import json
import math
import shutil
import tomllib

import pytest
from conftest import DEMOS
from hypothesis import HealthCheck, given, note, settings
from hypothesis import strategies as st

from validate.inputs.errors import InputError
from validate.inputs.method_file import load_method
from validate.model.assay import ModelError, build_model
from validate.model.build import build
from validate.propagation.linear import propagate

DEMO = DEMOS / "phosphate_assay"
BASE = tomllib.loads((DEMO / "method.toml").read_text(encoding="utf-8"))
BASE_READINGS = (DEMO / "readings.csv").read_text(encoding="utf-8")


# ---- a tiny TOML writer: every top-level key on one line, nested tables inline ----

def _toml_string(text: str) -> str:
    # JSON string escapes are TOML basic-string escapes; TOML also forbids a raw DEL
    return json.dumps(text, ensure_ascii=False).replace("\x7f", "\\u007F")


def _toml_value(value) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        if math.isnan(value):
            return "nan"
        if math.isinf(value):
            return "inf" if value > 0 else "-inf"
        return repr(value)
    if isinstance(value, str):
        return _toml_string(value)
    if isinstance(value, list):
        return "[" + ", ".join(_toml_value(v) for v in value) + "]"
    if isinstance(value, dict):
        return "{" + ", ".join(f"{_toml_string(k)} = {_toml_value(v)}" for k, v in value.items()) + "}"
    raise TypeError(type(value))


def write_toml(doc: dict) -> str:
    return "".join(f"{_toml_string(k)} = {_toml_value(v)}\n" for k, v in doc.items())


def test_the_writer_round_trips_the_demo():
    assert tomllib.loads(write_toml(BASE)) == BASE


# ---- mutations ----

JUNK_KEYS = ["value", "u", "half_width", "item", "volume", "kind", "class", "nominal", "from", "flask",
             "aliquot", "made_by", "readings", "standards", "blanks", "formula", "unit", "equipment",
             "solutions", "samples", "dof", "distribution", "tolerance", "path", "x", ""]
PLAUSIBLE = ["", " ", "0 mL", "-5 mL", "1e308 L", "5 mg", "5", "nan mL", "inf g", "1,5 mL", "2 µmol/L",
             "10 mm", "3 K", "99 %", "150 %", "mg/L", "µmol/L", "g/mol", "A", "B", "Z", "weighing",
             "dilution", "blank", "certificate", "stock", "intermediate", "S1", "S10", "blank",
             "river_upstream", "pipette_5", "pipette_20", "burette_25", "flask_50", "flask_500",
             "cell_40", "photometer", "balance", "c_measured", "observed", "bottom-up", "t", "normal",
             "rectangular", "triangular", "trapezoid", "readings.csv", "method.toml", "missing.csv",
             "c_measured / 0", "c_measured ** 1000", "log(c_measured)", "sqrt(-1)", "1 / (V_flask - V_flask)",
             "x" * 300]
SCALARS = st.one_of(
    st.sampled_from(PLAUSIBLE),
    st.integers(-10**6, 10**6),
    st.sampled_from([0, 1, 2, -1, 10**30, 0.0, -0.0, 1e-300, 1e308, 0.5]),
    st.floats(allow_nan=True, allow_infinity=True),
    st.booleans(),
    st.text(max_size=12),
)
JUNK = st.one_of(
    SCALARS,
    st.lists(SCALARS, max_size=3),
    st.dictionaries(st.sampled_from(JUNK_KEYS), SCALARS, max_size=3),
)


def _places(node, places, label=""):
    """Every (label, container, key) in the document, depth first."""
    items = node.items() if isinstance(node, dict) else enumerate(node)
    for key, value in items:
        places.append((f"{label}.{key}" if label else str(key), node, key))
        if isinstance(value, (dict, list)):
            _places(value, places, f"{label}.{key}" if label else str(key))
    return places


def _tables(doc):
    """(label, table) of the document and every table in it."""
    return [("top level", doc)] + [(label, node[key]) for label, node, key in _places(doc, [])
                                   if isinstance(node[key], dict)]


def _pick(data, options, label):
    index = data.draw(st.integers(0, len(options) - 1), label=label)
    note(f"{label}: {options[index][0]}")
    return options[index]


def _swap(value):
    """Text and numbers swapped: "10.00 mL" -> 10.0, 0.95 -> "0.95", true -> "true"."""
    if isinstance(value, bool):
        return str(value).lower()
    if isinstance(value, (int, float)):
        return str(value)
    if isinstance(value, str):
        head = value.split(" ")[0]
        try:
            return float(head)
        except ValueError:
            return 1
    if isinstance(value, list):
        return value[0] if value else ""
    return next(iter(value.values()), {})


SCALES = [0.0, -1.0, 1e-300, 1e-12, 1e-6, 0.5, 0.999, 1.001, 2.0, 1e6, 1e12, 1e300]


def _rescale(value, factor):
    """The number in a value scaled, its unit kept: "5 mL" x 1e6 -> "5000000.0 mL"."""
    if isinstance(value, (int, float)) and not isinstance(value, bool):
        return value * factor
    if isinstance(value, str):
        head, _, unit = value.partition(" ")
        try:
            return f"{float(head) * factor!r} {unit}".strip()
        except ValueError:
            return value
    return value


def mutate(doc: dict, data) -> dict:
    doc = copy.deepcopy(doc)
    for _ in range(data.draw(st.integers(1, 3), label="mutations")):
        op = data.draw(st.sampled_from(["delete", "retype", "swap", "insert", "rescale"]), label="operation")
        if op == "insert":
            _, table = _pick(data, _tables(doc), "into")
            key = data.draw(st.one_of(st.sampled_from(JUNK_KEYS), st.text(max_size=8)), label="key")
            table[key] = data.draw(JUNK, label="value")
            continue
        places = _places(doc, [])
        if not places:
            continue
        _, container, key = _pick(data, places, "place")
        if op == "delete":
            del container[key]
        elif op == "retype":
            container[key] = data.draw(JUNK, label="value")
        elif op == "rescale":
            container[key] = _rescale(container[key], data.draw(st.sampled_from(SCALES), label="factor"))
        else:
            container[key] = _swap(container[key])
    return doc


def _pipeline(path) -> None:
    """The input layer, the model and the GUM engine, as `validate check` and `run` use them."""
    try:
        propagate(build_model(load_method(path)))
    except (InputError, ModelError):
        pass


@pytest.fixture(scope="module")
def folder(tmp_path_factory):
    folder = tmp_path_factory.mktemp("fuzz")
    shutil.copytree(DEMO, folder, dirs_exist_ok=True)
    return folder


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(data=st.data())
def test_mutated_method_files_give_clear_errors_only(folder, data):
    text = write_toml(mutate(BASE, data))
    tomllib.loads(text)  # the writer itself must give valid TOML
    note(text)
    (folder / "method.toml").write_text(text, encoding="utf-8")
    (folder / "readings.csv").write_text(BASE_READINGS, encoding="utf-8")
    _pipeline(folder / "method.toml")


LINE_JUNK = st.sampled_from(["", "#", "id,absorbance", "S1", "S1,", ",0.5", "S1,0.5,0.6", "S1,1e9", "S1,-1",
                             "S1,nan", "S1,inf", "S1,0x1p-2", 'S1,"0,5"', "S1;0,5", "S1,1_0", "\ufeffS1,0.1",
                             "river_upstream,0.0", "blank,4", "S10,0.0", '"S1,0.1', "S1,\x00"])


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(data=st.data())
def test_mutated_readings_tables_give_clear_errors_only(folder, data):
    lines = BASE_READINGS.splitlines()
    for _ in range(data.draw(st.integers(1, 4), label="edits")):
        index = data.draw(st.integers(0, len(lines)), label="line")
        junk = data.draw(st.one_of(LINE_JUNK, st.text(max_size=10)), label="text")
        if data.draw(st.booleans(), label="replace") and index < len(lines):
            lines[index] = junk
        else:
            lines.insert(index, junk)
    text = "\n".join(lines) + "\n"
    note(text)
    (folder / "method.toml").write_text((DEMO / "method.toml").read_text(encoding="utf-8"), encoding="utf-8")
    (folder / "readings.csv").write_text(text, encoding="utf-8")
    _pipeline(folder / "method.toml")


# ---- the equilibrium study's file: the loader and the model ----

STUDY = DEMOS / "nickel_complex"
STUDY_BASE = tomllib.loads((STUDY / "method.toml").read_text(encoding="utf-8"))


@pytest.fixture(scope="module")
def study_folder(tmp_path_factory):
    folder = tmp_path_factory.mktemp("fuzz_study")
    shutil.copytree(STUDY, folder, dirs_exist_ok=True)
    return folder


@settings(max_examples=80, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(data=st.data())
def test_mutated_study_files_give_clear_errors_only(study_folder, data):
    text = write_toml(mutate(STUDY_BASE, data))
    note(text)
    (study_folder / "method.toml").write_text(text, encoding="utf-8")
    try:
        build(load_method(study_folder / "method.toml"))
    except (InputError, ModelError):
        pass
