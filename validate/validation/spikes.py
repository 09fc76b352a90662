"""Bias from spiked samples: the recovered amount against the amount added.

The added amount is c_spike V_aliquot / V_made_up in the measured solution, evaluated with the
model's own sources (the spike solution's preparation, and the items' calibration offsets,
shared where the same item is used elsewhere; docs/design.md, "Correlation from identity") and
the delivery's own per-use terms, by the law of propagation of uncertainty (GUM 5.1.2).
"""

from __future__ import annotations

from uncertainties import ufloat

from validate.inputs.errors import InputError
from validate.inputs.routine_section import SECTION, Spike
from validate.inputs.schema import AssayMethod
from validate.metrology.equipment import SourceSet, volume_term
from validate.validation.control_readings import ControlReadings, series_results
from validate.validation.method_uncertainty import ReferenceBias


def added_in_measured_solution(spike: Spike, method: AssayMethod, data: ControlReadings):
    """The added concentration in the measured solution (SI), a ufloat."""
    cal = method.calibration
    if cal is None or method.concentration_dims(spike.solution) != cal.concentration_unit.dims:
        raise InputError(f"the spike solution `{spike.solution}` is not in the calibration's concentration "
                         "dimension", file=method.path, where=f"[{SECTION}.spikes.{spike.sample}].solution",
                         fix="spike with a solution of the kind the standards are made from")
    ss = SourceSet()
    ss.sources.update(data.model.sources)  # the model's sources first: identity keeps correlation
    step = f"spike {spike.sample}"
    aliquot = volume_term(ss, method, spike.aliquot, step, "spike aliquot")
    made_up = volume_term(ss, method, spike.made_up_to, step, "spike made up")
    x = {name: ufloat(src.value, src.u, tag=name) for name, src in ss.sources.items()}
    return data.model.concentrations(x)[spike.solution] * aliquot(x) / made_up(x)


def spike_bias(spike: Spike, method: AssayMethod, data: ControlReadings) -> ReferenceBias:
    """Recovered (spiked result minus base result) against added, both in the result's unit."""
    cal = method.calibration
    assert cal is not None  # added_in_measured_solution refuses a method without a calibration
    added = added_in_measured_solution(spike, method, data) / cal.concentration_unit.factor * data.scale(spike.sample)
    recovered = data.results[spike.sample].value - data.results[spike.base].value
    sd, count = series_results(data.values(spike.sample), method.reading_series.get(spike.sample))
    return ReferenceBias(spike.sample, recovered, float(added.nominal_value), float(added.std_dev), sd, count,
                         kind="spike")
