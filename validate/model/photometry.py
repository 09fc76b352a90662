"""The photometer's effects on a reading that do not all cancel in a calibrated method.

docs/design.md, "Photometry". A reading is modelled as

    A_read = (1 + g) * A_stray(A) + offset + drift (the solutions read after the standards only)

with A_stray(A) = -log10((10^-A + s) / (1 + s)) the absorbance a photometer with stray-light
ratio s reads for a true absorbance A (stray light as a fraction of the incident light that
reaches the detector without passing through the sample; a common model of the trade,
e.g. Skoog, Holler and Crouch, Principles of Instrumental Analysis, from memory).

What cancels through the calibration line: an offset shared by every reading shifts the
line's intercept, a gain shared by every reading scales its slope, and a sample read off that
line is unchanged (exactly, for any offset and gain). What does not cancel: a drift between
reading the standards and reading the samples (it acts on the samples alone) and stray light
(it bends the response: the refitted straight line no longer matches it). The offset (in
validate.model.assay) and the gain are kept in the model, so the budget shows that they
cancel rather than leaving them out by assumption.

Every effect is one source shared by the readings it acts on (one instrument, one run).
"""

from __future__ import annotations

import math

from validate.inputs.items import Photometer
from validate.inputs.schema import AssayMethod, EquilibriumMethod, Method
from validate.metrology.equipment import SourceSet
from validate.metrology.sources import Source, rectangular
from validate.model import backend

LN10 = math.log(10.0)
STEP = "photometric reading"


def read_after_standards(method: Method, ident: str) -> bool:
    """Whether the solution is read after the calibration standards (a sample, or an equilibrium
    mixture or series point): the solutions a drift since the standards acts on."""
    match method:
        case AssayMethod():
            return any(s.id == ident for s in method.samples)
        case EquilibriumMethod():
            return all(mix.id != ident for mix in method.equilibrium.standards)
    return False


def true_absorbance(a_read, stray):
    """The absorbance a reading `a_read` stands for at stray-light ratio `stray`:
    A = -log10((1 + s) 10^-A_read - s), the inverse of A_read = -log10((10^-A + s) / (1 + s))."""
    return -backend.log10((1.0 + stray) * backend.exp(-LN10 * a_read) - stray)


def stray_light_source(photometer: Photometer) -> Source:
    """The stray-light ratio s as one source shared by every reading. Stray light only adds light
    at the detector, so s lies in [0, s_max] (s_max the stated ratio) and every reading is biased
    low. Known only by those bounds, s is rectangular R(0, s_max) with estimate s_max/2 and
    u = s_max/sqrt(12) (GUM 4.3.7; JCGM 101 6.4.2.1); the result is corrected by that expectation
    (GUM 3.2.4: a result is corrected for every recognised systematic effect) while the readings
    themselves stay as read. Both engines use this one rectangle."""
    half = photometer.stray_light / 2.0
    return rectangular(
        f"{photometer.id}: stray light", half, half, step=STEP, equipment=photometer.id,
        unit="%", display_factor=0.01,
        provenance=f"stray-light ratio between 0 and {100 * photometer.stray_light:.3g} % (stray light only adds "
                   f"light: readings biased low), rectangular, estimate at the midpoint; readings as read, the "
                   f"result corrected by A = -log10((1 + s) 10^-A_read - s); shared by every reading; "
                   f"{photometer.provenance}")


def reading_correction(ss: SourceSet, method: Method, photometer: Photometer | None, ident: str):
    """A closure (x, a) -> the reading `a` (already corrected for the photometer's offset) corrected
    for gain, drift (solutions read after the standards) and stray light; the identity when the
    photometer states none of them."""
    if photometer is None:
        return lambda x, a: a
    gain = drift = stray = None
    if photometer.gain > 0:
        gain = ss.add(rectangular(
            f"{photometer.id}: photometric gain", 0.0, photometer.gain, step=STEP, equipment=photometer.id,
            unit="%", display_factor=0.01,
            provenance=f"+/-{100 * photometer.gain:.3g} % of the reading, rectangular, shared by every reading "
                       f"(cancels through the calibration line); {photometer.provenance}"))
    if photometer.drift > 0 and read_after_standards(method, ident):
        drift = ss.add(rectangular(
            f"{photometer.id}: drift since the standards", 0.0, photometer.drift, step=STEP,
            equipment=photometer.id, unit="AU",
            provenance=f"{photometer.drift_basis}; rectangular about zero, shared by every solution read after the "
                       f"standards (uncorrected); {photometer.provenance}"))
    if photometer.stray_light > 0:
        stray = ss.add(stray_light_source(photometer))

    def correct(x, a):
        if drift is not None:
            a = a - x[drift]
        if gain is not None:
            a = a / (1.0 + x[gain])
        if stray is not None:
            a = true_absorbance(a, x[stray])
        return a

    return correct
