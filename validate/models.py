"""Build the model of any method file, ready for both engines."""

from __future__ import annotations

from validate.inputs.schema import Method
from validate.model import build_model


def build_ready_model(method: Method):
    """(model, combination). An assay's model as it is; for an equilibrium study the
    per-point K covariance is computed first and the combined K's weights fixed, so
    both engines evaluate the same combined estimator (combination: GLS result,
    K values, covariance)."""
    if method.equilibrium is None:
        return build_model(method), None
    from validate.equilibrium_model import build_equilibrium_model
    from validate.equilibrium_record import prepare_combination
    model = build_equilibrium_model(method)
    return model, prepare_combination(model)
