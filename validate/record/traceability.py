"""The traceability block of the record (validate.record.blocks_traceability), built from the
method and the model: every number a reader needs to redo a standard's concentration and a
sample's result by hand.

The concentrations and their standard uncertainties are the model's own: its solution terms
evaluated once on the linear engine's numbers (GUM 5.1.2), so they are the values every result
was computed from.
"""

from __future__ import annotations

from uncertainties import ufloat
from uncertainties.core import AffineScalarFunc

from validate.inputs.items import Balance, Burette, Cuvette, Item, Photometer, Volumetric
from validate.inputs.schema import AssayMethod, EquilibriumMethod, Method
from validate.inputs.solutions import Blank, Certified, Diluted, Solution, Weighed
from validate.inputs.units import Unit
from validate.inputs.values import Delivery, UncertainValue
from validate.model.assay import Model, solution_order
from validate.model.equilibrium import EquilibriumModel
from validate.record.blocks_traceability import (
    EquipmentValues,
    FormulaQuantity,
    ItemValue,
    MeasuredAmount,
    PreparedSolution,
    Reading,
    ReadSolutionEntry,
    ReagentTotals,
    TraceabilityBlock,
)

ML = 1e-6  # m^3 per mL
MM = 1e-3  # m per mm
MG = 1e-6  # kg per mg


def _split(x) -> tuple[float, float]:
    """Value and standard uncertainty of a linear-engine number (u = 0 for a plain float)."""
    if isinstance(x, AffineScalarFunc):
        return float(x.nominal_value), float(x.std_dev)
    return float(x), 0.0


def _stated(what: str, value: UncertainValue, item: str = "") -> MeasuredAmount:
    factor = value.unit.factor
    stated = value.u / factor if value.u > 0 or not item else None  # else the item's register gives it
    return MeasuredAmount(what=what, value=value.value / factor, unit=value.unit.text,
                          standard_uncertainty=stated, item=item)


def _delivered(what: str, delivery: Delivery) -> MeasuredAmount:
    return MeasuredAmount(what=what, value=delivery.volume / ML, unit="mL", standard_uncertainty=None,
                          item=delivery.item)


def _amounts(sol: Solution) -> tuple[tuple[MeasuredAmount, ...], Delivery | None]:
    """What was measured out for a solution, and the flask it was made up in."""
    match sol:
        case Weighed():
            amounts = [_stated("mass", sol.mass, sol.balance or "")]
            amounts += [_stated("purity", sol.purity)] if sol.purity else []
            amounts += [_stated("molar mass", sol.molar_mass)] if sol.molar_mass else []
            return tuple(amounts), sol.flask
        case Certified():
            return (_stated("certified concentration", sol.concentration),), None
        case Diluted():
            return (_delivered(f"aliquot of {sol.parent}", sol.aliquot),), sol.flask
        case Blank():
            return (), None


def _unit_for(method: Method, solution_id: str, unit: Unit) -> Unit:
    """The block's unit where the solution's concentration has its dimension, else SI
    (1 mmol/L = 1 mol/m^3, 1 g/L = 1 kg/m^3)."""
    dims = method.concentration_dims(solution_id)
    if dims == unit.dims:
        return unit
    return Unit("mmol/L", 1.0, dims) if dims[2] else Unit("g/L", 1.0, dims)


def _solutions(method: Method, conc: dict, unit: Unit) -> tuple[PreparedSolution, ...]:
    out = []
    for sol in solution_order(method.solutions):
        amounts, flask = _amounts(sol)
        shown = _unit_for(method, sol.id, unit)
        value, u = _split(conc[sol.id])
        out.append(PreparedSolution(
            id=sol.id, made_by=sol.made_by, description=sol.description,
            made_from=sol.parent if isinstance(sol, Diluted) else None, amounts=amounts,
            flask=flask.item if flask else "", volume=flask.volume / ML if flask else None,
            concentration=value / shown.factor, standard_uncertainty=u / shown.factor, unit=shown.text))
    return tuple(out)


def _readings(method: Method, ident: str) -> tuple[Reading, ...]:
    series = method.reading_series.get(ident) or ()
    values = method.readings.get(ident) or ()
    return tuple(Reading(absorbance=a, series=series[i] if i < len(series) else None)
                 for i, a in enumerate(values))


def _entry(method: Method, ident: str, role: str, value=None, unit: Unit | None = None) -> ReadSolutionEntry:
    c, u = _split(value) if value is not None and unit is not None else (None, None)
    factor = unit.factor if unit is not None else 1.0
    return ReadSolutionEntry(id=ident, role=role, concentration=None if c is None else c / factor,
                             standard_uncertainty=None if u is None else u / factor,
                             readings=_readings(method, ident))


def _item_values(item: Item) -> tuple[ItemValue, ...]:
    """The register (or method-file) values the model takes from an item, in display units."""
    match item:
        case Volumetric():
            values = [ItemValue(name="nominal", value=item.nominal / ML, unit="mL"),
                      ItemValue(name="tolerance ±", value=item.tolerance / ML, unit="mL"),
                      ItemValue(name="repeatability s", value=item.repeatability / ML, unit="mL"),
                      ItemValue(name="distribution of the tolerance", value=item.distribution, unit="")]
            if isinstance(item, Burette):
                values.append(ItemValue(name="reading ±", value=item.reading / ML, unit="mL"))
            return tuple(values)
        case Cuvette():
            return (ItemValue(name="path", value=item.path / MM, unit="mm"),
                    ItemValue(name="tolerance ±", value=item.tolerance / MM, unit="mm"))
        case Photometer():
            return (ItemValue(name="offset ±", value=item.offset, unit="absorbance"),
                    ItemValue(name="noise s", value=item.noise, unit="absorbance"))
        case Balance():
            return (ItemValue(name="linearity ±", value=item.linearity / MG, unit="mg"),
                    ItemValue(name="repeatability s", value=item.repeatability / MG, unit="mg"))
    return ()


def _equipment(method: Method) -> tuple[EquipmentValues, ...]:
    return tuple(EquipmentValues(id=i.id, kind=i.kind, item_class=i.item_class, values=_item_values(i),
                                 source=i.provenance) for i in method.items.values())


def _quantities(method: AssayMethod) -> tuple[FormulaQuantity, ...]:
    out = []
    for q in method.quantities.values():
        if q.delivery is not None:
            out.append(FormulaQuantity(name=q.name, value=q.delivery.volume / ML, unit="mL",
                                       standard_uncertainty=None, item=q.delivery.item))
        elif q.value is not None:
            factor = q.value.unit.factor
            out.append(FormulaQuantity(name=q.name, value=q.value.value / factor, unit=q.value.unit.text,
                                       standard_uncertainty=q.value.u / factor, item=""))
    return tuple(out)


def _linear_inputs(model: Model | EquilibriumModel) -> dict:
    """The model's sources as linear-engine numbers, as the linear engine makes them."""
    return {name: ufloat(src.value, src.u, tag=name) for name, src in model.sources.items()}


def _assay_block(method: AssayMethod, model: Model) -> TraceabilityBlock:
    x = _linear_inputs(model)
    conc = model.concentrations(x)
    cal = method.calibration
    unit = cal.concentration_unit if cal else Unit("mmol/L", 1.0, (0, -3, 1, 0))
    standards: list[ReadSolutionEntry] = []
    if model.design is not None:
        standards = [_entry(method, p.solution, lv.role, conc[p.solution], unit)
                     for lv, p in model.design.fitted()]
        fitted = {e.id for e in standards}
        standards += [_entry(method, b.id, "blank", conc[b.id], unit)
                      for b in model.design.blanks if b.id not in fitted]
    samples = tuple(_entry(method, s.id, "sample") for s in method.samples)
    return TraceabilityBlock(concentration_unit=unit.text, solutions=_solutions(method, conc, unit),
                             standards=tuple(standards), samples=samples, quantities=_quantities(method),
                             equipment=_equipment(method), totals=())


def _made_up(study) -> dict[str, tuple[tuple[MeasuredAmount, ...], Delivery | None]]:
    """Id -> (aliquots of the reagent solutions, flask) of every standard, mixture and series point."""
    made: dict[str, tuple[tuple[MeasuredAmount, ...], Delivery | None]] = {}
    for mix in study.standards + study.mixtures:
        made[mix.id] = (tuple(_delivered(f"aliquot of {mix.solutions[r]}", d) for r, d in mix.parts.items()),
                        mix.flask)
    for series in study.series:
        start = [_delivered(f"aliquot of {series.solutions[r]}", d) for r, d in series.start.items()]
        added = series.solutions[series.added]
        for k, ident in enumerate(series.reading_ids(), start=1):
            step = MeasuredAmount(what=f"{k} addition(s) of {added}", value=k * series.aliquot.volume / ML,
                                  unit="mL", standard_uncertainty=None, item=series.aliquot.item)
            made[ident] = (tuple(start) + (step,), None)
    return made


def _study_block(method: EquilibriumMethod, model: EquilibriumModel) -> TraceabilityBlock:
    x = _linear_inputs(model)
    conc = model.concentrations(x)
    study = method.equilibrium
    unit = study.concentration_unit
    sm, sl, _, _, pm, pl, _ = model.columns(x)
    limiting = sl if study.limiting == "ligand" else sm
    design = model.design
    standards = tuple(_entry(method, lv.id, "standard", c, unit)
                      for lv, c in zip(design.standards, limiting, strict=True))
    series_ids = {p.id for p in design.series_points}
    points = tuple(_entry(method, p.id, "series point" if p.id in series_ids else "mixture")
                   for p in design.points)
    rows = [(lv.id, "standard", m, l_) for lv, m, l_ in zip(design.standards, sm, sl, strict=True)]
    rows += [(e.id, e.role, m, l_) for e, m, l_ in zip(points, pm, pl, strict=True)]
    made = _made_up(study)
    totals = []
    for ident, role, m, l_ in rows:
        (mv, mu), (lv_, lu) = _split(m), _split(l_)
        amounts, flask = made.get(ident, ((), None))
        totals.append(ReagentTotals(id=ident, role=role, amounts=amounts, flask=flask.item if flask else "",
                                    volume=flask.volume / ML if flask else None,
                                    M_total=mv / unit.factor, u_M_total=mu / unit.factor,
                                    L_total=lv_ / unit.factor, u_L_total=lu / unit.factor))
    return TraceabilityBlock(concentration_unit=unit.text, solutions=_solutions(method, conc, unit),
                             standards=standards, samples=points, quantities=(),
                             equipment=_equipment(method), totals=tuple(totals))


def traceability_block(method: Method, model: Model | EquilibriumModel) -> TraceabilityBlock:
    """The block for an assay or an equilibrium study."""
    if isinstance(method, EquilibriumMethod) and isinstance(model, EquilibriumModel):
        return _study_block(method, model)
    assert isinstance(method, AssayMethod) and isinstance(model, Model)
    return _assay_block(method, model)
