"""Build the model of any method file, ready for both engines."""

from __future__ import annotations

from validate.inputs.schema import Method
from validate.model import build_model


def build_any_model(method: Method):
    """The model of a method file: an assay's, or an equilibrium study's (weights not yet set)."""
    if method.equilibrium is None:
        return build_model(method)
    from validate.equilibrium_model import build_equilibrium_model
    return build_equilibrium_model(method)


def build_ready_model(method: Method):
    """(model, combination). An assay's model as it is; for an equilibrium study the
    per-point K covariance is computed first and the combined K's weights fixed, so
    both engines evaluate the same combined estimator (combination: GLS result,
    K values, covariance)."""
    model = build_any_model(method)
    if method.equilibrium is None:
        return model, None
    from validate.equilibrium_record import prepare_combination
    return model, prepare_combination(model)
