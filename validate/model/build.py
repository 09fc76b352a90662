"""Build the model of any method file, ready for both engines: one dispatch on the method's kind."""

from __future__ import annotations

from validate.inputs.schema import AssayMethod, EquilibriumMethod, Method
from validate.model.addition import build_addition_model
from validate.model.assay import Model, build_model
from validate.model.equilibrium import EquilibriumModel, build_equilibrium_model


def build(method: Method) -> Model | EquilibriumModel:
    """The model of a method file: an assay's, or an equilibrium study's (weights not yet set)."""
    match method:
        case AssayMethod(additions=additions) if additions:
            return build_addition_model(method)
        case AssayMethod():
            return build_model(method)
        case EquilibriumMethod():
            return build_equilibrium_model(method)
