"""End-to-end accuracy: measurand in, reading out, against the physical truth.

Layer 4 of the verification. Measurands over the sensor's whole range (and over the
temperature range where it is compensated) go through the exact bridge model (leads
included), an ideal ADC (the code nearest to the bridge voltage, saturated at the rails) and
the bit-exact integer pipeline with the constants in force; the reading is compared with the
measurand. A settled input suffices: every filter's integer DC gain is exactly 1
(DEVELOPERS.md, "Arithmetic contract"), so the static path gives the settled reading.

The error is split in two, and the two add up to the total exactly:
- model error: what the float64 pipeline with the same constants reads from the exact,
  unquantised bridge voltage, minus the measurand: the sensor's nonlinearity left after the
  linearisation (or all of it without one) and the residual of the temperature model;
- arithmetic error: the rest: the ADC code's rounding and every rounding of the integer
  pipeline.
The spec's error budget is judged on the total. When it fails because of the model, the
smallest bridge-inverse linearisation order that would pass is found by resolving the same
spec with that order (the design's own rule, not a copy of it).

Which sensor is the truth: with the design's nominal constants, the spec's sensor (its exact
bridge, its nominal temperature coefficients). With one unit's constants, the same bridge
shape through the zero, span and temperature coefficients that unit's constants describe: the
unit as its calibration says it is, so the figures show what the constants and the arithmetic
add, not how well the unit was calibrated (calibrate judges that on its readings).
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from hosttool.design.model import static_integer, static_reference_real
from hosttool.design.resolve import Design, make_design
from hosttool.errors import DesignError
from hosttool.spec.schema import Linearisation

F64 = NDArray[np.float64]

#: Measurands evaluated across the range at each temperature.
MEASURAND_POINTS = 1001
#: Temperatures evaluated across the compensated range (the reference is added).
TEMPERATURE_POINTS = 5
#: Fractional part of the golden ratio: a low-discrepancy step through [0, 1).
GOLDEN_FRACTION = (math.sqrt(5.0) - 1.0) / 2.0
#: Most coefficients the linearisation may use (the calibration block's slots).
MAX_SUGGESTED_ORDER = 5


@dataclass(frozen=True)
class EndToEnd:
    """The reading against the measurand over range and temperature, output units."""

    measurand: F64                  # the grid, output units
    temperatures_c: tuple[float, ...]   # one row of the error arrays per temperature
    #                                 (empty without compensation: one row)
    total: F64                      # reading - measurand, shape (temperatures, points)
    model: F64                      # float64 pipeline on the exact voltage - measurand
    arithmetic: F64                 # total - model: ADC code and integer rounding
    worst: float                    # largest |total|
    worst_at: float                 # the measurand where it occurs
    worst_temperature_c: float | None
    worst_model: float              # largest |model| anywhere
    worst_arithmetic: float         # largest |arithmetic| anywhere
    sensor_nonlinearity: float      # largest |tangent reading - measurand| of the bridge
    budget: float | None            # the spec's error budget, output units
    suggested_order: int | None     # bridge-inverse order that would pass, when one helps
    suggested_worst: float | None   # that design's end-to-end worst, output units
    rail_from: float | None = None  # smallest |measurand| whose bridge voltage lies beyond
    #                                 the ADC's codes (None: the whole range fits)

    @property
    def passed(self) -> bool | None:
        """Within the budget (None without one)."""
        return None if self.budget is None else self.worst <= self.budget

    @property
    def budget_used(self) -> float | None:
        """worst / budget."""
        return None if self.budget is None else self.worst / self.budget

    def reason(self, unit: str, mode: str) -> str | None:
        """One line saying why the budget is exceeded (None when it is not)."""
        if self.passed is not False or self.budget is None:
            return None
        where = f" at {self.worst_at:.6g} {unit}"
        if self.worst_temperature_c is not None:
            where += f", {self.worst_temperature_c:g} C"
        text = (f"end to end: the reading is off by up to {self.worst:.4g} {unit}{where}, "
                f"more than the budget {self.budget:g} {unit} (model {self.worst_model:.4g}, "
                f"arithmetic {self.worst_arithmetic:.4g})")
        if self.rail_from is not None:
            text += (f"; the ADC is at its rail from |measurand| {self.rail_from:.6g} {unit} "
                     "on (a lower PGA gain would keep the range inside its codes)")
        elif self.worst_model > self.worst_arithmetic:
            text += (f"; the bridge is nonlinear by {self.sensor_nonlinearity:.4g} {unit} and "
                     + ("it is not linearised" if mode == "none" else
                        f"linearisation ({mode}) leaves {self.worst_model:.4g} {unit}"))
            if self.suggested_order is not None and self.suggested_worst is not None:
                text += (f"; linearisation.mode = \"bridge_inverse\" with order = "
                         f"{self.suggested_order} would read within "
                         f"{self.suggested_worst:.4g} {unit}")
        return text


def error_budget(design: Design) -> float | None:
    """The spec's allowed error in output units (calibration.max_error or % of span)."""
    cal = design.spec.calibration
    if cal is None:
        return None
    options = []
    if cal.max_error is not None:
        options.append(cal.max_error)
    if cal.max_error_pct_span is not None:
        options.append(cal.max_error_pct_span / 100 * (design.budget.range_max
                                                       - design.budget.range_min))
    return min(options) if options else None


def _temperatures(design: Design) -> list[int | None]:
    """Temperatures of the sweep, 0.01 C (None: no compensation)."""
    tc = design.temperature
    if tc is None:
        return [None]
    grid = {int(round(t)) for t in np.linspace(tc.min_centi, tc.max_centi, TEMPERATURE_POINTS)}
    return [*sorted(grid | {tc.reference_centi})]


def _drift(design: Design) -> tuple[float, float]:
    """(zero drift in output units per 0.01 C, relative span drift per 0.01 C) of the truth.

    Nominal constants: the spec's sensor coefficients. A unit's: what its constants
    compensate (the zero the pipeline subtracts, the inverse of the gain it applies).
    """
    tc, t = design.temperature, design.spec.temperature
    if tc is None or t is None:
        return 0.0, 0.0
    c = design.constants
    if c == design.nominal:
        full_scale = design.spec.sensor.full_scale
        return t.zero_tc_ppm_fs_per_c * 1e-6 * full_scale / 100.0, \
            t.span_tc_ppm_per_c * 1e-6 / 100.0
    gain = tc.realised_span(c.tc_span)
    return design.to_units(tc.realised_zero(c.tc_zero)), 1.0 / (1.0 + gain) - 1.0 \
        if gain > -1.0 else 0.0


def _real_codes(design: Design, m: F64, dt_centi: float) -> F64:
    """Exact (unrounded) ADC codes of measurands ``m`` at ``dt_centi`` from the reference."""
    bridge = design.bridge
    zero_units, span_rel = _drift(design)
    # the bridge's change from its zero, in ratio terms, with the span drift
    change = (np.asarray(bridge.ratio(m)) - bridge.zero_ratio) * (1.0 + span_rel * dt_centi)
    change = change + zero_units * dt_centi * bridge.sensitivity
    per_count = design.ratio_per_count
    nominal, c = design.nominal, design.constants
    g = 2.0 ** design.guard_bits
    # the unit's span relative to the nominal (1 for the nominal constants)
    span = design.scale.realised(nominal.scale_mul) / design.scale.realised(c.scale_mul)
    return c.offset / g + change / per_count * span


def _evaluate(design: Design, m: F64) -> tuple[list[int | None], F64, F64, NDArray[np.bool_]]:
    """(temperatures, total error, model error, beyond the ADC's codes), each row one
    temperature."""
    temps = _temperatures(design)
    ref = design.temperature.reference_centi if design.temperature else 0
    total = np.empty((len(temps), m.size))
    model = np.empty_like(total)
    rail = np.zeros(total.shape, dtype=bool)
    for i, t in enumerate(temps):
        dt = 0.0 if t is None else float(t - ref)
        x = _real_codes(design, m, dt)
        rail[i] = (x < design.code_min - 0.5) | (x > design.code_max + 0.5)
        codes = np.clip(np.rint(x), design.code_min, design.code_max).astype(np.int64)
        t_arr = None if t is None else np.full(m.size, t, dtype=np.int64)
        reading = design.to_units(1.0) * static_integer(design, codes, t_arr).output
        exact = design.to_units(1.0) * static_reference_real(design, x, t_arr)
        total[i] = reading - m
        model[i] = exact - m
    return temps, total, model, rail


def _measurands(design: Design) -> F64:
    """The range's ends and points between them, each moved by a different fraction of an
    output step (golden-ratio sequence), so the output's rounding is seen at every phase
    and not only where a measurand falls on the output grid."""
    bridge = design.bridge
    m = np.linspace(bridge.m_min, bridge.m_max, MEASURAND_POINTS)
    phase = np.mod(np.arange(m.size) * GOLDEN_FRACTION, 1.0) - 0.5
    inner = np.clip(m[1:-1] + phase[1:-1] * design.output_step, bridge.m_min, bridge.m_max)
    return np.concatenate(([bridge.m_min], inner, [bridge.m_max]))


def _worst(design: Design) -> float:
    """Largest |reading - measurand| of a design (for the order search)."""
    _, total, _, _ = _evaluate(design, _measurands(design))
    return float(np.max(np.abs(total)))


def _suggest(design: Design, budget: float) -> tuple[int | None, float | None]:
    """The smallest bridge-inverse order whose design reads within ``budget``."""
    spec = design.spec
    lin = design.linearisation
    start = 1 if lin is None or lin.mode != "bridge_inverse" else len(lin.coeffs)
    for order in range(start, MAX_SUGGESTED_ORDER + 1):
        trial = dataclasses.replace(spec, linearisation=Linearisation("bridge_inverse", order))
        try:
            worst = _worst(make_design(trial))
        except DesignError:
            continue
        if worst <= budget:
            return order, worst
    return None, None


def end_to_end(design: Design) -> EndToEnd:
    """The end-to-end accuracy of ``design`` with its constants in force."""
    m = _measurands(design)
    temps, total, model, rail = _evaluate(design, m)
    at_rail = m[np.any(rail, axis=0)]
    arithmetic = total - model
    flat = int(np.argmax(np.abs(total)))
    row, col = divmod(flat, m.size)
    bridge = design.bridge
    nonlinearity = float(np.max(np.abs(np.asarray(bridge.tangent_reading(m)) - m)))
    budget = error_budget(design)
    worst = float(np.abs(total).max())
    worst_model = float(np.abs(model).max())
    order = suggested = None
    if budget is not None and worst > budget and worst_model > float(np.abs(arithmetic).max()):
        order, suggested = _suggest(design, budget)
    t = temps[row]
    return EndToEnd(
        measurand=m, temperatures_c=tuple(x / 100 for x in temps if x is not None),
        total=total, model=model, arithmetic=arithmetic, worst=worst,
        worst_at=float(m[col]), worst_temperature_c=None if t is None else t / 100,
        worst_model=worst_model, worst_arithmetic=float(np.abs(arithmetic).max()),
        sensor_nonlinearity=nonlinearity if math.isfinite(nonlinearity) else 0.0,
        budget=budget, suggested_order=order, suggested_worst=suggested,
        rail_from=None if at_rail.size == 0 else float(np.abs(at_rail).min()))
